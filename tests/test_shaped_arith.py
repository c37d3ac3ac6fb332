"""The "shaped" output arithmetic (edgetally.fixedpoint.shaped_step: one 32-bit product per term,
32-bit sums, data and coefficient formats sharing 31 bits, error feedback of each recursive
section's rounding).

Outside references used here:
- exact rational arithmetic (fractions.Fraction) for the definition of the section step (round half
  up of the exact sum, the shifted-off bits), written out independently of the module;
- the C compiler and C99's exact-width types (7.18.1.1) as the arithmetic the C twin must match;
- scipy.signal.sosfilt / lfilter / welch / freqz for the float response and the noise spectrum;
- Higgins & Munson, "Noise reduction strategies for digital filters: error spectrum shaping versus
  the optimal linear state-space formulation", IEEE Trans. ASSP 30(6), 1982: with error feedback
  (1 + k1 z^-1 + k2 z^-2) the rounding noise reaches the output through that polynomial over A(z);
- Jackson, BSTJ 49(2), 1970 / IEEE AU-18(2), 1970: a rounding is a white source of variance q^2 / 12.
The emitted C of whole designs is checked bit for bit in tests/test_variants.py (host and emulator).
"""

from __future__ import annotations

import math
import subprocess
import tomllib
from fractions import Fraction

import numpy as np
import pytest
from scipy import signal

import edgetally
from edgetally.check import choice, hostbuild
from edgetally.designer import wordlength
from edgetally.designer.assemble import design as assemble_design
from edgetally.fixedpoint import c_definitions, shaped_step

from conftest import EXAMPLES, host_cc

LIM = (1 << 15) - 1


def _shaped_design():
    spec = edgetally.load_spec(EXAMPLES / "orchard_link.toml")
    return assemble_design(spec, choice.settle(spec), overrides={"arith": "shaped"})


@pytest.fixture(scope="module")
def shaped():
    return _shaped_design()


def test_step_matches_exact_definition():
    # round half up of the exact sum (Fraction), error = what the rounding shifted off, on random
    # words, coefficients and taps inside the certificate's ranges (final sum inside int32)
    rng = np.random.default_rng(11)
    n = 0
    while n < 5000:
        cb = int(rng.integers(8, 16))
        lim = (1 << (30 - cb)) - 1                      # the data limit of this coefficient format
        c = [int(v) for v in rng.integers(-(2 << cb), 2 << cb, size=5)] + [int(v) for v in rng.integers(-2, 3, size=2)]
        z = [int(v) for v in rng.integers(-lim, lim + 1, size=4)]
        e = [int(v) for v in rng.integers(-(1 << (cb - 1)), 1 << (cb - 1), size=2)]
        x = int(rng.integers(-lim, lim + 1))
        exact = c[0] * x + c[1] * z[0] + c[2] * z[1] - c[3] * z[2] - c[4] * z[3] - c[5] * e[0] - c[6] * e[1]
        if abs(exact) + (1 << cb) >= 1 << 31:
            continue                                    # outside the certificate's range: not a legal state
        n += 1
        yr = math.floor(Fraction(exact, 1 << cb) + Fraction(1, 2))
        z2, e2 = list(z), list(e)
        y, saturated = shaped_step(tuple(c), z2, e2, x, cb, lim)
        assert y == max(-lim, min(lim, yr)) and saturated == (y != yr)
        assert e2 == [exact - yr * (1 << cb), e[0]]
        assert -(1 << (cb - 1)) <= e2[0] < 1 << (cb - 1)
        assert z2 == [x, z[0], y, z[2]]


HARNESS = r"""
#include <inttypes.h>
#include <stdint.h>
#include <stdio.h>

{defs}

/* per line: kind cb c0..c6 x z0..z3 e0 e1; prints the rounded sum and the new e0 */
int main(void)
{{
    int kind;
    unsigned cb;
    long c[7], x, z[4], e[2];
    while (scanf("%d %u %ld %ld %ld %ld %ld %ld %ld %ld %ld %ld %ld %ld %ld %ld", &kind, &cb, &c[0], &c[1], &c[2],
                 &c[3], &c[4], &c[5], &c[6], &x, &z[0], &z[1], &z[2], &z[3], &e[0], &e[1]) == 16) {{
        int32_t cc[7], zz[4], ee[2];
        int32_t r;
        int i;
        for (i = 0; i < 7; i++) cc[i] = (int32_t)c[i];
        for (i = 0; i < 4; i++) zz[i] = (int32_t)z[i];
        ee[0] = (int32_t)e[0];
        ee[1] = (int32_t)e[1];
        r = (kind != 0) ? fx_shaped_section(cc, (int32_t)x, zz, ee, cb) : fx_fir_section(cc, (int32_t)x, zz, cb);
        printf("%" PRId32 " %d\n", r, (int)ee[0]);
    }}
    return 0;
}}
"""


@pytest.mark.parametrize("ubsan", [False, True])
def test_c_twin_matches_python(tmp_path, ubsan):
    cc = host_cc()
    if cc is None:
        pytest.skip("no C compiler found (looked for $CC, cc, gcc)")
    flags = ["-fsanitize=undefined", "-fno-sanitize-recover=all"] if ubsan else []
    src, exe = tmp_path / "h.c", tmp_path / "h"
    src.write_text(HARNESS.format(defs=c_definitions("fx", ["shaped_section", "fir_section"])), encoding="utf-8")
    res = subprocess.run([cc, *hostbuild.STRICT_FLAGS, *hostbuild.OPT_FLAGS, *flags, str(src), "-o", str(exe)],
                         capture_output=True, text=True)
    if ubsan and res.returncode != 0 and "sanitize" in res.stderr:
        pytest.skip("the C compiler cannot link -fsanitize=undefined here")
    assert res.returncode == 0 and not res.stderr.strip(), res.stderr
    rng = np.random.default_rng(12)
    cases = []
    while len(cases) < 4000:
        kind = len(cases) % 2
        cb = int(rng.integers(8, 17))
        lim = (1 << (30 - cb)) - 1                      # the data limit of this coefficient format
        # coefficients up to 2^(cb+1) in magnitude: products beyond 32 bits, taken modulo 2^32
        c = [int(v) for v in rng.integers(-(2 << cb), 2 << cb, size=5)] + [int(v) for v in rng.integers(-2, 3, size=2)]
        if not kind:
            c[3:] = [0, 0, 0, 0]
        z = [int(v) for v in rng.integers(-lim, lim + 1, size=4)]
        e = [int(v) for v in rng.integers(-(1 << (cb - 1)), 1 << (cb - 1), size=2)] if kind else [0, 0]
        x = int(rng.integers(-lim, lim + 1))
        exact = c[0] * x + c[1] * z[0] + c[2] * z[1] - c[3] * z[2] - c[4] * z[3] - c[5] * e[0] - c[6] * e[1]
        if abs(exact) + (1 << cb) < 1 << 31:            # the certificate's range
            cases.append((kind, cb, c, x, z, e))
    lines = [" ".join(str(v) for v in (k, cb, *c, x, *z, *e)) for k, cb, c, x, z, e in cases]
    run = subprocess.run([str(exe)], input="\n".join(lines) + "\n", capture_output=True, text=True, timeout=60)
    assert run.returncode == 0 and not run.stderr.strip(), run.stderr
    got = [tuple(int(v) for v in ln.split()) for ln in run.stdout.splitlines()]
    assert len(got) == len(cases)
    for (kind, cb, c, x, z, e), (r, e0) in zip(cases, got, strict=True):
        ee = list(e)
        # the Python step with no saturation (limit 2^31): its rounded sum before saturation
        y, _ = shaped_step(tuple(c), list(z), ee, x, cb, (1 << 31) - 1)
        assert r == y
        if kind:
            assert e0 == ee[0]


def _integer_sos(f):
    """The integer sections as float sos rows in each section's own LSB (exact: |coefs| < 2^16)."""
    s = float(1 << f.coef_bits)
    return np.array([[x.b0 / s, x.b1 / s, x.b2 / s, 1.0, x.a1 / s, x.a2 / s] for x in f.sections])


def _run_shaped(f, x):
    z = [[0, 0, 0, 0] for _ in f.sections]
    e = [[0, 0] for _ in f.sections]
    out = np.empty(len(x), dtype=np.int64)
    sats = 0
    for n, v in enumerate(x.tolist()):
        for sec, zz, ee in zip(f.sections, z, e, strict=True):
            v, s = shaped_step((sec.b0, sec.b1, sec.b2, sec.a1, sec.a2, sec.k1, sec.k2), zz, ee, v, f.coef_bits, f.limit)
            sats += s
        out[n] = v
    return out, sats


def test_chain_follows_sosfilt_within_the_rounding_bound(shaped):
    # the shaped cascade on a random input against scipy.signal.sosfilt of the same integer
    # coefficients (no rounding): the difference is each section's injected error, at most
    # (1 + |k1| + |k2|) / 2 LSB per sample, through 1 / A_j(z) and the sections after it: its L1 norm
    # bounds the difference for any input (the certificate's bound, worst case, not statistical)
    f = shaped.filters
    sos = _integer_sos(f)
    rng = np.random.default_rng(3)
    l1 = np.sum(np.abs(signal.sosfilt(sos, np.r_[1.0, np.zeros(4095)])))
    x = rng.integers(-int(LIM / l1 / 2), int(LIM / l1 / 2), size=6000)     # no node can saturate
    got, sats = _run_shaped(f, x)
    assert sats == 0
    want = signal.sosfilt(sos, x.astype(float))
    bound = 0.0
    for j, sec in enumerate(f.sections):
        imp = signal.sosfilt(np.vstack([[1, 0, 0, 1, sos[j][4], sos[j][5]], sos[j + 1:]]), np.r_[1.0, np.zeros(4095)])
        bound += 0.5 * (1 + abs(sec.k1) + abs(sec.k2)) * np.sum(np.abs(imp))
    err = np.abs(got - want)
    assert err.max() <= bound
    assert err.max() > 0                               # the roundings are there: the check can fail


def _section_noise(sec, cb, k, n=1 << 17, seed=9):
    """Measured rounding noise of one section (taps k) driven by a busy random input: output minus
    the exact response of the same integer coefficients (scipy.signal.lfilter), in output LSB."""
    s = float(1 << cb)
    b, a = np.array([sec.b0, sec.b1, sec.b2]) / s, np.array([1.0, sec.a1 / s, sec.a2 / s])
    l1 = np.sum(np.abs(signal.lfilter(b, a, np.r_[1.0, np.zeros(4095)])))
    x = np.random.default_rng(seed).integers(-int(LIM / l1 / 1.5), int(LIM / l1 / 1.5), size=n)
    z, e = [0, 0, 0, 0], [0, 0]
    coefs = (sec.b0, sec.b1, sec.b2, sec.a1, sec.a2, *k)
    y = np.array([shaped_step(coefs, z, e, v, cb, LIM)[0] for v in x.tolist()], dtype=float)
    return y - signal.lfilter(b, a, x.astype(float)), a


@pytest.mark.parametrize("taps", ["designed", "none"])
def test_noise_spectrum_follows_the_shaping_polynomial(shaped, taps):
    # Higgins & Munson (1982): the rounding noise at the output of a section with error feedback has
    # the spectrum q^2 / 12 |1 + k1 z^-1 + k2 z^-2|^2 / |A(z)|^2 (q = 1 LSB, Jackson 1970). Measured
    # with scipy.signal.welch (Hann, 256-sample segments, 50 % overlap: about 1000 segments over
    # 2^17 samples) and compared in eight bands of 16 bins. Tolerance from the estimate's variance: a
    # band power averages about 1000 segments x 8 independent bins (Hann bins overlap by half), so
    # its relative standard deviation is about 1 / sqrt(8000) = 1.1 %; 5 sigma is 5.6 %. The Hann
    # window's main lobe (4 bins) smooths the resonance of the lowpass's second section (3 dB width
    # (1 - r) / pi = 0.04 cycles per sample, 10 bins): a bias of a few per cent at the peak's flanks.
    # Together: 10 % per band.
    f = shaped.filters
    sec = next(s for s in reversed(f.sections) if not s.fir)
    k = (sec.k1, sec.k2) if taps == "designed" else (0, 0)
    if taps == "designed":
        assert k != (0, 0)                              # the designer chose a shaping for this section
    err, a = _section_noise(sec, f.coef_bits, k)
    assert np.abs(err).max() > 1                        # busy input: many LSB of roundoff, not a dead band
    fr, pxx = signal.welch(err, fs=1.0, nperseg=256)
    _, h = signal.freqz([1.0, *map(float, k)], a, worN=fr, fs=1.0)
    pred = 2.0 * np.abs(h) ** 2 / 12                    # one-sided density, fs = 1
    for lo in range(1, 129 - 16, 16):
        m, p = pxx[lo:lo + 16].sum(), pred[lo:lo + 16].sum()
        assert abs(m / p - 1) < 0.10, (lo, m, p)


def test_designed_taps_lower_the_in_band_noise(shaped):
    # what the designer chose the taps for: the predicted in-band noise of each shaped section is
    # below that of the same section without feedback (wordlength.noise_gain, Higgins & Munson)
    f, spec = shaped.filters, edgetally.load_spec(EXAMPLES / "orchard_link.toml")
    rows = wordlength.quantised_rows(f, shaped.scale.q)
    lo = shaped.test.band_lo_hz
    for k, sec in enumerate(f.sections):
        if sec.fir:
            assert (sec.k1, sec.k2) == (0, 0)
            continue
        g = wordlength.noise_gain(rows, k, (sec.k1, sec.k2), spec.output.rate_hz, lo, spec.signal.audio_hz)
        g0 = wordlength.noise_gain(rows, k, (0, 0), spec.output.rate_hz, lo, spec.signal.audio_hz)
        assert g <= g0


def test_orchard_link_in_the_shaped_arithmetic_meets_its_loss_limit():
    # orchard_link (48 MHz M0+ class, no 32x32->64 multiply) with the shaped arithmetic named in the
    # spec: one 32-bit product per term, and the simulated loss against the float chain (rounded to
    # the output word) meets the spec's limit
    raw = tomllib.loads((EXAMPLES / "orchard_link.toml").read_text())
    raw.setdefault("fixed", {})["arith"] = "shaped"
    spec = edgetally.parse_spec(raw)
    d, _ = choice.design_and_plan(spec)
    assert d.filters.shaped and choice.arith_name(d) == "shaped"
    assert d.filters.data_bits + d.filters.coef_bits <= 31
    assert choice.simulated_loss_db(d) <= spec.fixed.loss_limit_db
