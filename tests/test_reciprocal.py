"""The division-free quotients of the stamp front (edgetally.fixedpoint: reciprocal, ratio_recip,
the cubic's 32-bit correction) against floor division, in Python and in the compiled C.

Outside references used here:
- Python's integer floor division ``//`` (exact on unbounded integers, Python language reference,
  "Binary arithmetic operations") for the Python functions;
- the C compiler's unsigned 32-bit division ``/`` (C99 6.5.5: the quotient truncated toward zero,
  which is the floor for unsigned operands) inside the compiled harness, so the C is checked
  against the C division it replaces;
- exact rational arithmetic (fractions.Fraction) for the cubic correction's exact value.
Every comparison of quotients is exact equality, over every legal divisor (exhaustive) and a large
random sample of numerators with their edges.
"""

from __future__ import annotations

import subprocess
from fractions import Fraction

import numpy as np
import pytest

from edgetally.check import hostbuild
from edgetally.fixedpoint import (CUBIC_CORR_SHIFT, CUBIC_T_BITS, INV6, c_definitions, cubic_shifts,
                                  interval_fraction, interval_reciprocal, ratio_recip, recip_plan, reciprocal, rshr)

from conftest import ALL_DESIGNS, host_cc

# (interval bits, phase shift): every bundled design's, and the corners the planner can reach
# (bits + shift <= 32, shift 8..24, intervals of 3..24 bits).
DESIGN_CASES = sorted({(d.front.gap_ticks.bit_length(), d.front.phase_shift) for d in ALL_DESIGNS.values() if d.stamps})
CASES = sorted(set(DESIGN_CASES) | {(3, 24), (8, 24), (12, 20), (16, 16), (18, 12), (20, 12), (24, 8)})


@pytest.mark.parametrize("bits,shift", CASES)
def test_reciprocal_equals_floor_division_on_every_divisor(bits, shift):
    plan = recip_plan(bits, shift)
    d = np.arange(plan.d_lo, plan.d_hi + 1, dtype=np.int64)
    assert np.array_equal(reciprocal(d, plan), ((1 << 32) - 1) // d)      # Python floor division


@pytest.mark.parametrize("bits,shift", CASES)
def test_fraction_equals_floor_division(bits, shift):
    # Every divisor from 1 to the longest interval (short ones go through the power-of-two scaling;
    # above 2**20 divisors, the first and last 2**19 of them), each with the edge numerators 0, 1,
    # d/2, d-1, and 2 million random draws.
    plan = recip_plan(bits, shift)
    rng = np.random.default_rng(bits * 100 + shift)
    d_all = np.arange(1, plan.d_hi + 1, dtype=np.int64)
    if d_all.size > 1 << 20:
        d_all = np.concatenate([d_all[:1 << 19], d_all[-(1 << 19):]])
    edges = [np.zeros_like(d_all), np.minimum(1, d_all - 1), d_all // 2, d_all - 1]
    d_rand = rng.integers(1, plan.d_hi + 1, size=2_000_000)
    e_rand = (rng.random(d_rand.size) * d_rand).astype(np.int64)
    d = np.concatenate([d_all] * len(edges) + [d_rand])
    e1 = np.concatenate(edges + [e_rand])
    k, dn, r = interval_reciprocal(d, plan)
    assert np.array_equal(interval_fraction(e1, k, dn, r, plan), (e1 << shift) // d)
    # the cubic's second quotient: x < d << 8 read as x 2**(shift - 8) / d
    if shift >= CUBIC_T_BITS:
        x = np.concatenate([np.zeros_like(d_all), (d_all << CUBIC_T_BITS) - 1,
                            (rng.random(d_rand.size) * (d_rand << CUBIC_T_BITS)).astype(np.int64)])
        dd = np.concatenate([d_all, d_all, d_rand])
        k, dn, r = interval_reciprocal(dd, plan)
        got = ratio_recip(x << k, CUBIC_T_BITS, shift, dn, r, plan.fix_cubic)
        assert np.array_equal(got, (x << (shift - CUBIC_T_BITS)) // dd)


def test_plans_are_small():
    # The seed table stays small (64 words at most) and two Newton steps reach the exact value within
    # the two corrections on every design the planner makes (the cost the planner charges).
    for bits, shift in CASES:
        plan = recip_plan(bits, shift)
        assert len(plan.seeds) <= 64 and len(plan.steps) <= 2, (bits, shift, plan.steps)
        assert plan.fix_down + plan.fix_up <= 2 and plan.fix_linear == 1 and plan.fix_cubic <= 2


@pytest.mark.parametrize("delta_limit", [1, 100, 4096])
def test_cubic_correction_in_32_bits(delta_limit):
    # The 32-bit correction against its exact value q h INV6 / 2**43 (Fraction): within the bound
    # cubic_shifts proves plus the final rounding's half LSB, and every intermediate inside int32.
    sh, sq, sg, so, bound = cubic_shifts(delta_limit)
    rng = np.random.default_rng(delta_limit)
    one = 4096
    v = rng.integers(0, one, size=20000)
    dl0 = rng.integers(-delta_limit, delta_limit + 1, size=v.size)
    dl1 = rng.integers(-delta_limit, delta_limit + 1, size=v.size)
    v[:4], dl0[:4], dl1[:4] = [2048, 2048, 0, 4095], [delta_limit, -delta_limit, 0, delta_limit], \
        [delta_limit, -delta_limit, delta_limit, -delta_limit]
    for vi, a, b in zip(v.tolist(), dl0.tolist(), dl1.tolist()):
        h = (2 * a + b) * one + (b - a) * vi
        q = vi * (one - vi)
        hs = rshr(h, sh) if sh else h
        g = hs * INV6
        qs, gs = (rshr(q, sq) if sq else q), (rshr(g, sg) if sg else g)
        assert abs(h) < 2**31 and abs(g) < 2**31 and abs(qs * gs) + (1 << (so - 1)) < 2**31
        corr = rshr(qs * gs, so)
        exact = Fraction(q * h * INV6, 1 << CUBIC_CORR_SHIFT)
        assert abs(corr - exact) <= bound + Fraction(1, 2), (vi, a, b, corr, float(exact))
    # the bound itself is small against the timer's one-tick step (256 Q8 units)
    assert bound < 8


HARNESS = r"""
#include <inttypes.h>
#include <stdint.h>
#include <stdio.h>

{defs}

/* Every divisor 1..D_HI: the reciprocal of its scaled form against 0xFFFFFFFF / dn, and the
 * quotients of edge and pseudo-random numerators against the C division they replace. */
int main(void)
{{
    uint32_t d, bad = 0u, checked = 0u, lcg = 12345u;
    for (d = 1u; d <= UINT32_C({d_hi}); d++) {{
        unsigned k = fx_recip_norm(d);
        uint32_t dn = d << k;
        uint32_t r = fx_reciprocal(dn);
        unsigned j;
        if (r != UINT32_C(0xFFFFFFFF) / dn) {{
            bad++;
        }}
        for (j = 0u; j < 12u; j++) {{
            uint32_t e1, x;
            lcg = lcg * 1664525u + 1013904223u;
            e1 = (j == 0u) ? 0u : (j == 1u) ? d - 1u : (j == 2u) ? d / 2u : (uint32_t)(((uint64_t)lcg * d) >> 32);
            if (fx_ratio_recip(e1 << k, 0u, {shift}u, dn, r, {fix_lin}u) != (e1 << {shift}u) / d) {{
                bad++;
            }}
            x = (j == 0u) ? 0u : (j == 1u) ? (d << {tb}u) - 1u : (uint32_t)(((uint64_t)lcg * (d << {tb}u)) >> 32);
            if (fx_ratio_recip(x << k, {tb}u, {shift}u, dn, r, {fix_cub}u) != (x << ({shift}u - {tb}u)) / d) {{
                bad++;
            }}
            checked += 2u;
        }}
    }}
    printf("%" PRIu32 " %" PRIu32 "\n", bad, checked);
    return 0;
}}
"""


@pytest.mark.parametrize("bits,shift", DESIGN_CASES + [(20, 12), (16, 16)])
@pytest.mark.parametrize("ubsan", [False, True])
def test_c_reciprocal_equals_c_division(tmp_path, bits, shift, ubsan):
    cc = host_cc()
    if cc is None:
        pytest.skip("no C compiler found (looked for $CC, cc, gcc)")
    extra = ["-fsanitize=undefined", "-fno-sanitize-recover=all"] if ubsan else []
    if ubsan:
        probe = tmp_path / "probe.c"
        probe.write_text("int main(void) { return 0; }\n", encoding="utf-8")
        if subprocess.run([cc, *extra, str(probe), "-o", str(tmp_path / "probe")], capture_output=True).returncode:
            pytest.skip("the C compiler cannot link -fsanitize=undefined here (no libubsan)")
    plan = recip_plan(bits, shift)
    defs = c_definitions("fx", ["wrap_s32", "reciprocal"], plan)
    src = tmp_path / "recip.c"
    src.write_text(HARNESS.format(defs=defs, d_hi=plan.d_hi, shift=shift, fix_lin=plan.fix_linear,
                                  fix_cub=plan.fix_cubic, tb=CUBIC_T_BITS), encoding="utf-8")
    exe = tmp_path / "recip"
    cmd = [cc, *hostbuild.STRICT_FLAGS, "-O2", *extra, str(src), "-o", str(exe)]
    res = subprocess.run(cmd, capture_output=True, text=True)
    assert res.returncode == 0 and not res.stderr.strip(), f"{' '.join(cmd)}\n{res.stderr}"
    run = subprocess.run([str(exe)], capture_output=True, text=True, timeout=300)
    assert run.returncode == 0 and not run.stderr.strip(), run.stderr
    bad, checked = map(int, run.stdout.split())
    assert checked == 24 * plan.d_hi and bad == 0
