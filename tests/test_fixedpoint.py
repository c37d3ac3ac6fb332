"""The fixed-point operations: the C text of edgetally.fixedpoint, compiled with the project's strict
flags, against the Python functions of the same module, on random and extreme inputs.

Outside references used here:
- the C compiler (gcc/cc) and the C99 standard's exact-width types (7.18.1.1: int32_t is two's
  complement) as the arithmetic being matched;
- Python's struct module (reading a 32-bit pattern as a signed int32) for wrap_s32;
- exact rational arithmetic (fractions.Fraction) for the definitions of round-half-up, floor division
  and clamping, written out independently of the module.
All comparisons are of integers: exact equality, no tolerance.
"""

from __future__ import annotations

import math
import struct
import subprocess
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

import edgetally
from edgetally.check import hostbuild

from conftest import host_cc
from edgetally.fixedpoint import c_definitions, ratio_floor, rshr, sat, split_scale, squelch_level, wrap_s32

ROOT = Path(__file__).resolve().parents[1]
I64_MIN, I64_MAX = -(1 << 63), (1 << 63) - 1


HARNESS = r"""
#include <inttypes.h>
#include <stdint.h>
#include <stdio.h>

{defs}

/* One operation per input line: "w x" | "r x s" | "s x lo hi" | "q num shift den" | "p y mult shift"
 * | "l lvl a shift cap"; one result per line. */
int main(void)
{{
    char op;
    while (scanf(" %c", &op) == 1) {{
        if (op == 'w') {{
            uint32_t x;
            if (scanf("%" SCNu32, &x) != 1) return 2;
            printf("%" PRId32 "\n", fx_wrap_s32(x));
        }} else if (op == 'r') {{
            int64_t x;
            unsigned s;
            if (scanf("%" SCNd64 " %u", &x, &s) != 2) return 2;
            printf("%" PRId64 "\n", fx_rshr(x, s));
        }} else if (op == 's') {{
            int64_t x, lo, hi;
            if (scanf("%" SCNd64 " %" SCNd64 " %" SCNd64, &x, &lo, &hi) != 3) return 2;
            printf("%" PRId64 "\n", fx_sat(x, lo, hi));
        }} else if (op == 'q') {{
            uint32_t num, den;
            unsigned shift;
            if (scanf("%" SCNu32 " %u %" SCNu32, &num, &shift, &den) != 3) return 2;
            printf("%" PRIu32 "\n", fx_ratio_floor(num, shift, den));
        }} else if (op == 'p') {{
            int32_t y, mult;
            unsigned shift;
            if (scanf("%" SCNd32 " %" SCNd32 " %u", &y, &mult, &shift) != 3) return 2;
            printf("%" PRId32 "\n", (shift >= 16u) ? fx_split_scale(y, mult, shift) : fx_split_scale_low(y, mult, shift));
        }} else if (op == 'l') {{
            uint32_t lvl, a, cap;
            unsigned shift;
            if (scanf("%" SCNu32 " %" SCNu32 " %u %" SCNu32, &lvl, &a, &shift, &cap) != 4) return 2;
            printf("%" PRIu32 "\n", fx_squelch_level32(lvl, a, shift, cap));
        }} else {{
            return 3;
        }}
    }}
    return 0;
}}
"""


# --- independent definitions (the references) ----------------------------------------------------

def ref_wrap_s32(x: int) -> int:
    return struct.unpack("<i", struct.pack("<I", x))[0]       # Python struct: uint32 pattern as int32


def ref_rshr(x: int, s: int) -> int:
    return math.floor(Fraction(x, 1 << s) + Fraction(1, 2))   # round half up = floor(v + 1/2), exact


def ref_sat(x: int, lo: int, hi: int) -> int:
    return min(max(x, lo), hi)                                 # clamp to [lo, hi]


def ref_ratio_floor(num: int, shift: int, den: int) -> int:
    return math.floor(Fraction(num << shift, den))             # floor(num 2^shift / den), exact


# --- the input table ------------------------------------------------------------------------------

def _cases():
    rng = np.random.default_rng(20240607)
    w = [0, 1, 2, 0x7FFFFFFE, 0x7FFFFFFF, 0x80000000, 0x80000001, 0xFFFFFFFE, 0xFFFFFFFF]
    w += [int(v) for v in rng.integers(0, 1 << 32, size=3000, dtype=np.uint64)]

    r = []
    for s in (1, 2, 3, 8, 20, 29, 31, 32, 33, 62):
        h = 1 << (s - 1)
        for x in (0, 1, -1, 2, -2, 3, -3, h, -h, h - 1, -h + 1, h + 1, -h - 1, 3 * h, -3 * h, 5 * h, -5 * h,
                  I64_MIN, I64_MIN + 1, I64_MAX - h):
            if I64_MIN <= x <= I64_MAX - h:                    # domain: x + 2^(s-1) must not overflow int64 in C
                r.append((x, s))
    for _ in range(2000):                                          # small values: many exact halves
        r.append((int(rng.integers(-1000, 1001)), int(rng.integers(1, 5))))
    for _ in range(2000):                                          # wide values, any legal shift
        s = int(rng.integers(1, 63))
        r.append((int(rng.integers(-(1 << 62), (1 << 62) + 1)), s))
    for _ in range(1000):                                          # filter-accumulator-like: Q29, 64-bit range
        r.append((int(rng.integers(-(1 << 61), 1 << 61)), 29))

    sa = []
    bounds = [(-(1 << 30) + 1, (1 << 30) - 1), (-32768, 32767), (0, 1179648), (I64_MIN, I64_MAX), (5, 5), (-7, -3)]
    for lo, hi in bounds:
        for x in (lo - 1, lo, lo + 1, hi - 1, hi, hi + 1, 0, I64_MIN, I64_MAX, -1, 1):
            if I64_MIN <= x <= I64_MAX:
                sa.append((x, lo, hi))
        for x in rng.integers(-(1 << 40), 1 << 40, size=300):
            sa.append((int(x), lo, hi))

    q = []
    for shift in (0, 1, 8, 19, 22, 31):
        top = (1 << (32 - shift)) - 1 if shift else (1 << 32) - 1   # num << shift must fit 32 bits
        for den in (1, 2, 3, top, top + 1 if shift else top, 5334, 747, 0xFFFFFFFF):
            for num in (0, 1, den - 1, min(den - 1, top)):
                if 0 <= num < den and (num << shift) < (1 << 32) and den < (1 << 32):
                    q.append((num, shift, den))
    for _ in range(3000):
        shift = int(rng.integers(0, 32))
        den = int(rng.integers(1, 1 << 32))
        cap = min(den - 1, ((1 << 32) - 1) >> shift)
        num = int(rng.integers(0, cap + 1))
        q.append((num, shift, den))
    sp = []                                                        # split_scale: its stated domain
    for shift in (16, 17, 18, 24, 30, 31):
        for mult in (0, 1, 21845, (1 << 15) - 1):
            for y in (0, 1, -1, 0xFFFF, -0x10000, (1 << 31) - 1, -(1 << 31), 1 << 16, -(1 << 16) - 1):
                sp.append((y, mult, shift))
    for _ in range(3000):
        sp.append((int(rng.integers(-(1 << 31), 1 << 31)), int(rng.integers(0, 1 << 15)), int(rng.integers(16, 32))))
    for shift in (1, 2, 8, 13, 15):                                # below 16: where the result fits int32
        for mult in (0, 1, 21845, (1 << 15) - 1):
            top = ((1 << 31) - 2 - 2 * (mult << (16 - shift))) << shift
            y_lim = min((1 << 31) - 1, top // mult if mult else (1 << 31) - 1)
            if y_lim > 0:
                for y in (0, 1, -1, 0xFFFF, -0x10000, y_lim, -y_lim, y_lim // 3, -(y_lim // 7)):
                    sp.append((y, mult, shift))
    for _ in range(3000):
        shift, mult = int(rng.integers(1, 16)), int(rng.integers(1, 1 << 15))
        y_lim = min((1 << 31) - 1, (((1 << 31) - 2 - 2 * (mult << (16 - shift))) << shift) // mult)
        if y_lim > 0:
            sp.append((int(rng.integers(-y_lim, y_lim + 1)), mult, shift))

    lv = []                                                        # squelch_level32: lvl <= cap, cap + a < 2^32
    for _ in range(2000):
        cap = int(rng.integers(1, 1 << 31))
        a = int(rng.integers(0, (1 << 32) - cap))
        lv.append((int(rng.integers(0, cap + 1)), a, int(rng.integers(1, 20)), cap))
    lv += [(0, 0, 1, 1), ((1 << 31) - 1, (1 << 31), 3, (1 << 31) - 1), (5, 0, 1, 5)]
    return w, r, sa, q, sp, lv


def _run_harness(tmp_path, extra_flags):
    cc = host_cc()
    if cc is None:
        pytest.skip("no C compiler found (looked for $CC, cc, gcc)")
    src = tmp_path / "fx_harness.c"
    exe = tmp_path / "fx_harness"
    src.write_text(HARNESS.format(defs=c_definitions("fx")), encoding="utf-8")
    cmd = [cc, *hostbuild.STRICT_FLAGS, *hostbuild.OPT_FLAGS, *extra_flags, str(src), "-o", str(exe)]
    res = subprocess.run(cmd, capture_output=True, text=True)
    # STRICT_FLAGS contain -Werror: any warning fails the build; the stderr must also be empty.
    assert res.returncode == 0 and not res.stderr.strip(), f"{' '.join(cmd)}\n{res.stderr}"
    w, r, sa, q, sp, lv = _cases()
    lines = ([f"w {x}" for x in w] + [f"r {x} {s}" for x, s in r]
             + [f"s {x} {lo} {hi}" for x, lo, hi in sa] + [f"q {a} {b} {c}" for a, b, c in q]
             + [f"p {a} {b} {c}" for a, b, c in sp] + [f"l {a} {b} {c} {d}" for a, b, c, d in lv])
    run = subprocess.run([str(exe)], input="\n".join(lines) + "\n", capture_output=True, text=True, timeout=60)
    assert run.returncode == 0, run.stderr
    assert not run.stderr.strip(), run.stderr                 # UBSan reports go to stderr
    out = [int(v) for v in run.stdout.split()]
    assert len(out) == len(lines)
    parts, i = [], 0
    for table in (w, r, sa, q, sp, lv):
        parts.append(out[i:i + len(table)])
        i += len(table)
    return (w, r, sa, q, sp, lv), tuple(parts)


def _compare(inputs, c_out):
    w, r, sa, q, sp, lv = inputs
    c_w, c_r, c_s, c_q, c_p, c_l = c_out
    for x, got in zip(w, c_w):
        assert got == wrap_s32(x) == ref_wrap_s32(x), ("wrap_s32", x, got, wrap_s32(x))
    for (x, s), got in zip(r, c_r):
        assert got == rshr(x, s) == ref_rshr(x, s), ("rshr", x, s, got, rshr(x, s))
    for (x, lo, hi), got in zip(sa, c_s):
        assert got == sat(x, lo, hi) == ref_sat(x, lo, hi), ("sat", x, lo, hi, got)
    for (num, shift, den), got in zip(q, c_q):
        assert got == ratio_floor(num, shift, den) == ref_ratio_floor(num, shift, den), ("ratio_floor", num, shift, den, got)
    for (y, mult, shift), got in zip(sp, c_p):                 # the split product loses no bit of y mult
        assert got == split_scale(y, mult, shift) == ref_rshr(y * mult, shift), ("split_scale", y, mult, shift, got)
    for (lvl, a, shift, cap), got in zip(lv, c_l):             # min(lvl - floor(lvl / 2^shift) + a, cap)
        assert got == squelch_level(lvl, a, shift, cap) == min(lvl - lvl // (1 << shift) + a, cap), ("level32", lvl, got)


def test_c_matches_python(tmp_path):
    inputs, c_out = _run_harness(tmp_path, [])
    _compare(inputs, c_out)


def test_c_matches_python_under_ubsan(tmp_path):
    # Same table with GCC's undefined-behaviour sanitizer: no signed overflow, no bad shift on any input
    # in the functions' stated domains.
    cc = host_cc()
    if cc is None:
        pytest.skip("no C compiler found (looked for $CC, cc, gcc)")
    probe = tmp_path / "probe.c"
    probe.write_text("int main(void) { return 0; }\n", encoding="utf-8")
    ok = subprocess.run([cc, "-fsanitize=undefined", str(probe), "-o", str(tmp_path / "probe")],
                        capture_output=True, text=True)
    if ok.returncode != 0:
        pytest.skip("the C compiler cannot link -fsanitize=undefined here (no libubsan)")
    inputs, c_out = _run_harness(tmp_path, ["-fsanitize=undefined", "-fno-sanitize-recover=all"])
    _compare(inputs, c_out)


# --- hand-worked values (from the definitions, so they can be read off directly) -------------------

@pytest.mark.parametrize("x,expected", [(0, 0), (1, 1), (0x7FFFFFFF, 2147483647), (0x80000000, -2147483648),
                                        (0xFFFFFFFF, -1), (0x80000001, -2147483647), (1 << 32, 0), (-1, -1)])
def test_wrap_s32_values(x, expected):
    # Two's-complement reading of a 32-bit pattern (C99 7.18.1.1), hand-worked.
    assert wrap_s32(x) == expected


@pytest.mark.parametrize("x,s,expected", [(-3, 1, -1), (-1, 1, 0), (1, 1, 1), (3, 1, 2), (-5, 2, -1),
                                          (-6, 2, -1), (-7, 2, -2), (6, 2, 2), (-2, 2, 0), (2, 2, 1)])
def test_rshr_rounds_half_up(x, s, expected):
    # Round half up, hand-worked: -3/2 = -1.5 -> -1, -1/2 -> 0, 1/2 -> 1, 3/2 -> 2, -5/4 -> -1,
    # -6/4 = -1.5 -> -1, -7/4 -> -2, 6/4 = 1.5 -> 2, -2/4 = -0.5 -> 0, 2/4 = 0.5 -> 1.
    assert rshr(x, s) == expected
    assert int(rshr(np.array([x], dtype=np.int64), s)[0]) == expected   # the numpy path the model uses


def test_numpy_paths_equal_python_int_paths():
    # The integer model calls these functions on numpy int64 arrays: same results as Python ints.
    w, r, sa, q, sp, _ = _cases()
    wa = np.array(w, dtype=np.int64)
    assert [int(v) for v in wrap_s32(wa)] == [wrap_s32(x) for x in w]
    for s in (1, 2, 19, 29):
        xs = [x for x, _ in r if abs(x) < (1 << 62)]
        assert [int(v) for v in rshr(np.array(xs, dtype=np.int64), s)] == [rshr(x, s) for x in xs]
    for lo, hi in [(-(1 << 30) + 1, (1 << 30) - 1), (0, 1179648)]:
        xs = [x for x, _, _ in sa]
        assert [int(v) for v in sat(np.array(xs, dtype=np.int64), lo, hi)] == [sat(x, lo, hi) for x in xs]
    for shift in (19, 22):
        qs = [(a, c) for a, b, c in q if b == shift]
        nums = np.array([a for a, _ in qs], dtype=np.int64)
        dens = np.array([c for _, c in qs], dtype=np.int64)
        assert [int(v) for v in ratio_floor(nums, shift, dens)] == [ratio_floor(a, shift, c) for a, c in qs]
    for shift in (16, 18, 31):                                  # the model's split scale on arrays (shift >= 16)
        ys = np.array([y for y, _, _ in sp], dtype=np.int64)
        assert [int(v) for v in split_scale(ys, 21845, shift)] == [split_scale(int(y), 21845, shift) for y in ys]


@pytest.mark.parametrize("example", ["orchard_link.toml", "campus_fm.toml"])
def test_designs_keep_ratio_floor_in_32_bits(example):
    # The module's own contract for ratio_floor (not an outside reference): num < den <= gap_ticks, and
    # num << phase_shift must fit 32 bits, so (gap_ticks - 1) << phase_shift < 2^32.
    d = edgetally.design(edgetally.load_spec(ROOT / "examples" / example))
    assert (d.front.gap_ticks - 1) << d.front.phase_shift < (1 << 32)
