"""Output-rate IIR filters (design, Q(coef_bits) quantisation, integer arithmetic) checked against
references outside the project.

Outside references used here:
- scipy.signal (ellip, sosfreqz, freqz, sosfilt, lfilter) as the general-purpose reference designs and
  evaluators.
- Recommendation ITU-R BS.450: de-emphasis 50 us -> corner 3183.1 Hz, 75 us -> 2122.1 Hz (values as
  quoted in DESIGN.md sec. 4).
- Jury's stability test for a second-order denominator z^2 + a1 z + a2 (the "stability triangle"
  |a2| < 1, |a1| < 1 + a2; e.g. Oppenheim & Schafer, Discrete-Time Signal Processing, from memory).

The quantisation bound used throughout: each Q(cb) coefficient is the float coefficient rounded to the
nearest multiple of 2^-cb, so it is off by at most eps = 2^-(cb+1) (checked below, not assumed). For one
section H = B/A and its quantised H' = B'/A':  H' - H = (dB - H dA) / A', so
    |H' - H| <= (3 eps + 2 eps |H|) / |A'|        (3 numerator and 2 denominator coefficients),
evaluated per frequency with the exactly known quantised A'. For a cascade,
    |prod H'_k - prod H_k| <= prod (|H_k| + d_k) - prod |H_k|.
Double-precision evaluation of the responses adds ~1e-14 (relative, magnified by 1/|A'| <= ~10 here);
1e-12 absolute is allowed for it.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

import edgetally
from edgetally import iir, model
from edgetally.fixedpoint import rshr, sat

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ["orchard_link.toml", "campus_fm.toml"]
FLOAT_EVAL = 1e-12   # double-precision evaluation of sosfreqz / freqz, see module docstring


@pytest.fixture(scope="module", params=EXAMPLES)
def design(request):
    return edgetally.design(edgetally.load_spec(ROOT / "examples" / request.param))


def _rows(sections):
    return [(s.b0, s.b1, s.b2, s.a1, s.a2) for s in sections]


def _quant_bound(float_sos, q_sections, cb, f, fs):
    """Per-frequency bound on |H'(f) - H(f)| for the cascade (see module docstring)."""
    eps = 2.0 ** -(cb + 1)
    plus = np.ones(len(f))
    exact = np.ones(len(f))
    for row, q in zip(np.asarray(float_sos, dtype=float), q_sections):
        _, h = signal.sosfreqz(row[None, :], worN=f, fs=fs)
        _, a_q = signal.freqz([1.0, q[3] / 2.0 ** cb, q[4] / 2.0 ** cb], [1.0], worN=f, fs=fs)
        d = (3 * eps + 2 * eps * np.abs(h)) / np.abs(a_q)
        plus *= np.abs(h) + d
        exact *= np.abs(h)
    return plus - exact


def test_quantised_coefficients_are_rounded_float_design(design):
    # Premise of every bound in this file: |q - c 2^cb| <= 1/2 (round to nearest), exact in doubles
    # because c * 2^cb is an exact scaling of a double.
    for flt in design.filters:
        assert len(flt.sections) == len(flt.float_sos)
        for q, row in zip(_rows(flt.sections), flt.float_sos):
            b0, b1, b2, a0, a1, a2 = row
            assert a0 == 1.0
            for qi, ci in zip(q, (b0, b1, b2, a1, a2)):
                assert isinstance(qi, int)
                assert abs(qi - ci * 2.0 ** flt.coef_bits) <= 0.5


def test_as_sos_is_exact_division(design):
    # iir.as_sos must give q / 2^cb exactly (a power-of-two scaling is exact in doubles).
    for flt in design.filters:
        s = iir.as_sos(_rows(flt.sections), flt.coef_bits)
        for q, row in zip(_rows(flt.sections), s):
            assert list(row) == [q[0] / 2.0 ** flt.coef_bits, q[1] / 2.0 ** flt.coef_bits, q[2] / 2.0 ** flt.coef_bits,
                                 1.0, q[3] / 2.0 ** flt.coef_bits, q[4] / 2.0 ** flt.coef_bits]


def test_quantised_response_matches_float_design(design):
    # scipy.signal.sosfreqz of the float design as the reference; bound from coefficient rounding.
    fs = design.rates.out_hz
    f = np.linspace(0.0, fs / 2.0, 8001)
    for flt in design.filters:
        q = _rows(flt.sections)
        _, h_ref = signal.sosfreqz(np.array(flt.float_sos), worN=f, fs=fs)
        _, h_q = signal.sosfreqz(iir.as_sos(q, flt.coef_bits), worN=f, fs=fs)
        bound = _quant_bound(flt.float_sos, q, flt.coef_bits, f, fs)
        err = np.abs(h_q - h_ref)
        assert np.all(err <= bound + FLOAT_EVAL), (flt.role, float(np.max(err - bound)))
        # The bound is meaningful: it is far below the response itself in the passband (< 1e-6).
        assert float(np.max(bound)) < 1e-6


def test_quantised_poles_inside_unit_circle(design):
    for flt in design.filters:
        scale = 1 << flt.coef_bits
        for (_, _, _, a1, a2) in _rows(flt.sections):
            # Jury's test for z^2 + a1 z + a2 (stability triangle, from memory of Oppenheim & Schafer),
            # on the exact integers: |a2| < 1 and |a1| < 1 + a2, scaled by 2^cb.
            assert abs(a2) < scale
            assert abs(a1) < scale + a2
            # numpy.roots as a second, numerical reference: the largest pole radius is < 1.
            assert np.max(np.abs(np.roots([1.0, a1 / scale, a2 / scale]))) < 1.0


@pytest.mark.parametrize("tau,corner", [(50e-6, 3183.1), (75e-6, 2122.1)])
def test_deemphasis_corner(tau, corner):
    # Recommendation ITU-R BS.450: 50 us -> 3183.1 Hz, 75 us -> 2122.1 Hz; a first-order low-pass is
    # 10 log10(2) = 3.0103 dB down at its corner; the bilinear design is pre-warped there.
    # Tolerance (tighter than 0.01 dB, by analysis): the published corners are rounded to 0.1 Hz, i.e.
    # off by <= 0.05 Hz from 1/(2 pi tau); the slope of the pre-warped response at the corner is
    # (10/ln 10) * (2 pi / fs) / sin(2 pi fc / fs) dB/Hz = 1.4e-3 (3183 Hz) and 2.1e-3 (2122 Hz) dB/Hz,
    # so <= 1.1e-4 dB; plus 5e-5 dB for -3.0103 given to 4 decimals: 2e-4 dB.
    assert 1.0 / (2 * math.pi * tau) == pytest.approx(corner, abs=0.05)   # the ITU figures themselves
    _, h = signal.sosfreqz(iir.deemphasis_sos(tau, 48000), worN=[corner], fs=48000)  # scipy as evaluator
    assert 20 * math.log10(abs(h[0])) == pytest.approx(-3.0103, abs=2e-4)
    # DC gain 0 dB (1/(1 + s tau) at s = 0), double rounding only.
    _, h0 = signal.sosfreqz(iir.deemphasis_sos(tau, 48000), worN=[0.0], fs=48000)
    assert abs(h0[0]) == pytest.approx(1.0, abs=1e-12)


def test_design_deemphasis_quantised_corner():
    # campus_fm.toml asks for 50 us at 48 kHz: the quantised filter in the Design is still -3.0103 dB
    # at 3183.1 Hz (ITU-R BS.450) within 2e-4 dB (as above) plus the quantisation bound in dB
    # (8.686 * bound / |H|, with |H| = 0.707).
    d = edgetally.design(edgetally.load_spec(ROOT / "examples" / "campus_fm.toml"))
    flt = [x for x in d.filters if x.role == "deemphasis"]
    assert len(flt) == 1
    flt = flt[0]
    fs = d.rates.out_hz
    q = _rows(flt.sections)
    _, h = signal.sosfreqz(iir.as_sos(q, flt.coef_bits), worN=[3183.1], fs=fs)
    b = float(_quant_bound(flt.float_sos, q, flt.coef_bits, [3183.1], fs)[0]) + FLOAT_EVAL
    assert 20 * math.log10(abs(h[0])) == pytest.approx(-3.0103, abs=2e-4 + 8.686 * b / 0.707)


def test_lowpass_is_the_elliptic_reference_with_its_ripple(design):
    fs = design.rates.out_hz
    audio = design.audio_hz
    flt = [x for x in design.filters if x.role == "lowpass"]
    assert len(flt) == 1
    flt = flt[0]
    # scipy.signal.ellip as the reference design: order 4, 0.1 dB ripple, 60 dB stopband, edge at audio_hz.
    ref = signal.ellip(4, 0.1, 60.0, audio, btype="low", fs=fs, output="sos")
    f_pass = np.linspace(0.0, audio, 4001)
    _, h_ref = signal.sosfreqz(ref, worN=f_pass, fs=fs)
    _, h_flt = signal.sosfreqz(np.array(flt.float_sos), worN=f_pass, fs=fs)
    np.testing.assert_allclose(h_flt, h_ref, rtol=0, atol=FLOAT_EVAL)   # same design (double rounding)
    # Passband: |H| within [-0.1 dB, 0 dB] up to and including the band edge (scipy docs: for ellip, Wn
    # is where the gain first drops below -rp). The float design meets this to 1e-9 dB (scipy computes
    # the elliptic poles and zeros to double precision; observed ~1e-10 dB).
    db = 20 * np.log10(np.abs(h_flt))
    assert db.max() <= 1e-9 and db.min() >= -0.1 - 1e-9
    assert db[-1] == pytest.approx(-0.1, abs=1e-9)   # band edge
    # Quantised: the same limits widened by the coefficient-rounding bound.
    q = _rows(flt.sections)
    _, h_q = signal.sosfreqz(iir.as_sos(q, flt.coef_bits), worN=f_pass, fs=fs)
    b = _quant_bound(flt.float_sos, q, flt.coef_bits, f_pass, fs) + FLOAT_EVAL
    lo = 10 ** ((-0.1 - 1e-9) / 20)
    hi = 10 ** (1e-9 / 20)
    assert np.all(np.abs(h_q) >= lo - b) and np.all(np.abs(h_q) <= hi + b)
    # Stopband (equiripple, scipy.signal.ellip): from the first -60 dB point to Nyquist the float design
    # stays at or below -60 dB (+1e-9 dB); the quantised one below 10^-3 plus the bound.
    f_all = np.linspace(audio, fs / 2.0, 40001)
    _, h_all = signal.sosfreqz(np.array(flt.float_sos), worN=f_all, fs=fs)
    db_all = 20 * np.log10(np.abs(h_all) + 1e-300)
    i0 = int(np.argmax(db_all <= -60.0))
    assert i0 > 0 and db_all[i0:].max() <= -60.0 + 1e-9
    _, h_all_q = signal.sosfreqz(iir.as_sos(q, flt.coef_bits), worN=f_all[i0:], fs=fs)
    b_all = _quant_bound(flt.float_sos, q, flt.coef_bits, f_all[i0:], fs) + FLOAT_EVAL
    assert np.all(np.abs(h_all_q) <= 10 ** ((-60.0 + 1e-9) / 20) + b_all)


# --- time domain: integer sections against scipy.signal.sosfilt ---------------------------------

def _l1(b, a, length):
    imp = np.zeros(length)
    imp[0] = 1.0
    return float(np.sum(np.abs(signal.lfilter(b, a, imp))))


def _impulse_length(sections, cb):
    r = max(float(np.max(np.abs(np.roots([1.0, s[3] / 2.0 ** cb, s[4] / 2.0 ** cb])), initial=0.0))
            for s in sections)
    # r^L < 1e-20: the neglected tail of the l1 sums is below 1e-19 / (1 - r), far under the slack.
    return int(math.ceil(math.log(1e-20) / math.log(max(r, 1e-3)))) + 50


def _int_sections(sections, cb, lim, x):
    """Straightforward Python-integer direct form I: y = sat(rshr(b.x - a.y, cb), +-lim), per section.
    Returns the output after every section."""
    v = [int(s) for s in x]
    outs = []
    for (b0, b1, b2, a1, a2) in sections:
        x1 = x2 = y1 = y2 = 0
        res = []
        for xn in v:
            yn = sat(rshr(b0 * xn + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2, cb), -lim, lim)
            x2, x1, y2, y1 = x1, xn, y1, yn
            res.append(yn)
        v = res
        outs.append(np.array(v, dtype=float))
    return outs


def _rounding_bounds(sections, cb, length):
    """Bound on |integer - exact(quantised coefficients)| after each section. The integer section adds a
    rounding error |e| <= 1/2 at its output, which is fed back: d_k = H'_k d_(k-1) + (1/A'_k) e_k, so
    D_k = ||h'_k||_1 D_(k-1) + 0.5 ||g'_k||_1 with g'_k the impulse response of 1/A'_k."""
    bounds, d = [], 0.0
    s = 2.0 ** cb
    for (b0, b1, b2, a1, a2) in sections:
        a = [1.0, a1 / s, a2 / s]
        d = _l1([b0 / s, b1 / s, b2 / s], a, length) * d + 0.5 * _l1([1.0], a, length)
        bounds.append(d)
    return bounds


def test_integer_sections_match_sosfilt_on_impulse(design):
    # scipy.signal.sosfilt on the float value of the quantised coefficients as the reference.
    for flt in design.filters:
        q = _rows(flt.sections)
        length = _impulse_length(q, flt.coef_bits)
        x = np.zeros(length, dtype=np.int64)
        x[0] = 1 << 22                        # moderate: a quarter of full scale (2^24), far below the limit
        outs = _int_sections(q, flt.coef_bits, flt.limit, x)
        bounds = _rounding_bounds(q, flt.coef_bits, length)
        ref = x.astype(float)
        for k, sec in enumerate(q):
            ref = signal.sosfilt(iir.as_sos([sec], flt.coef_bits), ref)
            # Premise: no saturation (the integer path would then legitimately differ).
            assert np.max(np.abs(ref)) < flt.limit / 2
            # Slack 1e-6 for double rounding in sosfilt (values < 2^24, eps * 2^24 * ||g||_1 ~ 1e-8).
            err = np.abs(outs[k] - ref)
            assert np.all(err <= bounds[k] + 1e-6), (flt.role, k, float(err.max()), bounds[k])
        # The whole cascade in one sosfilt call equals the per-section chain (same reference).
        full = signal.sosfilt(iir.as_sos(q, flt.coef_bits), x.astype(float))
        assert np.all(np.abs(outs[-1] - full) <= bounds[-1] + 1e-6)
        # The bound is a few LSB, so this check can fail on a wrong shift or wrong rounding.
        assert bounds[-1] < 16


def test_model_post_chain_impulse_matches_sosfilt(design):
    # edgetally.model.post_chain driven with a CIC output that is the centre everywhere except one
    # sample: the scaled input is then an impulse, and the output is the quantised cascade's impulse
    # response (scipy.signal.sosfilt reference) divided by 2^output.shift and rounded.
    sc, of = design.scale, design.output
    k = ((1 << 22) << sc.shift) // sc.mult            # CIC units giving ~2^22 data units
    n = 400
    y = np.full(n, sc.centre, dtype=np.int64)
    y[0] += k
    u = np.zeros(n)
    u[0] = rshr(k * sc.mult, sc.shift)                # the Scale rule of ir.Scale for one sample
    secs, bounds_total = [], 0.0
    for flt in design.filters:
        q = _rows(flt.sections)
        length = max(n, _impulse_length(q, flt.coef_bits))
        # Chain the per-filter bounds: the next filter's input error is amplified by its l1 norm.
        for sec in q:
            s = 2.0 ** flt.coef_bits
            a = [1.0, sec[3] / s, sec[4] / s]
            bounds_total = (_l1([sec[0] / s, sec[1] / s, sec[2] / s], a, length) * bounds_total
                            + 0.5 * _l1([1.0], a, length))
        secs.extend(iir.as_sos(q, flt.coef_bits))
    ref = signal.sosfilt(np.array(secs), u) / 2.0 ** of.shift
    assert np.max(np.abs(ref)) < of.hi - 1          # premise: no output saturation
    got = model.post_chain(design, y).astype(float)
    assert got.shape == (n,)
    # Bound: filter rounding (bounds_total data LSB) scaled to output LSB, plus 1/2 from the final rshr,
    # plus 1e-6 for double rounding in sosfilt.
    err = np.abs(got - ref)
    assert np.all(err <= bounds_total / 2.0 ** of.shift + 0.5 + 1e-6), float(err.max())
    assert np.max(np.abs(got)) > 1000               # the impulse response is actually visible
