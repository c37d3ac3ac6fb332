"""The one definition of every fixed-point operation used by edgetally.

Each operation is written here twice, side by side: as a Python function (used by the integer
model, for Python ints and numpy int64 arrays alike) and as the C text of a ``static inline``
function (emitted verbatim into the generated source, with the design's name as prefix). Nothing
else in the project spells out wrapping, rounding or saturation; the model calls these functions
and the templates print ``C_DEFINITIONS``. ``tests/test_fixedpoint.py`` compiles the C text and
checks it against the Python on random and extreme values.

Conventions (the emitted C checks the build assumptions they rest on at compile time):
- two's complement integers; ``>>`` of a negative signed value is an arithmetic shift;
- ``rshr`` rounds half up: add 2**(s-1), then shift right arithmetically (floor);
- saturation clamps to a closed range [lo, hi];
- 32-bit wrap-around is done in unsigned arithmetic (defined in C), then mapped back to signed
  without implementation-defined conversions.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np


def wrap_bits(x, bits: int):
    """Reduce modulo 2**bits into [0, 2**bits): what a ``bits``-wide unsigned register holds (a timer,
    a counter, uint32_t arithmetic; the difference of two such values in modular arithmetic).
    In C: unsigned arithmetic on the register's own type, then ``& (2**bits - 1)`` (the emitted
    source's INPUT_MASK); for 32 bits uint32_t arithmetic does it alone."""
    return x & ((1 << bits) - 1)


def wrap_s32(x):
    """Reduce modulo 2**32 into [-2**31, 2**31): a uint32_t pattern read as int32_t."""
    return wrap_bits(x + 0x80000000, 32) - 0x80000000


def rshr(x, s: int):
    """Round half up, then arithmetic shift right by s >= 1 bits: floor((x + 2**(s-1)) / 2**s)."""
    return (x + (1 << (s - 1))) >> s


def sat(x, lo: int, hi: int):
    """Clamp to the closed range [lo, hi]."""
    if isinstance(x, np.ndarray):
        return np.clip(x, lo, hi)
    return lo if x < lo else hi if x > hi else x


def ratio_floor(num, shift: int, den):
    """floor((num * 2**shift) / den) for 0 <= num < den; the phase fraction between two stamps.

    In C: an unsigned 32-bit shift then an unsigned 32-bit division (the design guarantees that
    ``num << shift`` fits in 32 bits)."""
    return (num << shift) // den


def section_step(
    coefs, z: list, x: int, coef_bits: int, limit: int, narrow: bool, split: bool = False
) -> tuple[int, bool]:
    """One direct form I IIR section on Python ints, the output chain's only recursion:
    acc = b0 x + b1 x1 + b2 x2 - a1 y1 - a2 y2 (coefs = (b0, b1, b2, a1, a2), z = [x1, x2, y1, y2],
    updated in place), summed modulo 2**32 when ``narrow`` (exact 32-bit products whose final sum
    fits, see the certificate), or as the three sums of ``split_mac`` when ``split`` (rounded by
    ``split_round``, equal to the exact sum's rounding), y = sat(rshr(acc, coef_bits), -limit, limit).
    Returns (y, whether the saturation engaged). Its C twin is the section loop of the emitted
    ``_post`` function."""
    b0, b1, b2, a1, a2 = coefs
    if split:
        acc3 = (0, 0, 0)
        for c, w in ((b0, x), (b1, z[0]), (b2, z[1]), (-a1, z[2]), (-a2, z[3])):
            acc3 = split_mac(acc3, c, w)
        yr = split_round(acc3, coef_bits)
    else:
        acc = b0 * x + b1 * z[0] + b2 * z[1] - a1 * z[2] - a2 * z[3]
        if narrow:
            acc = wrap_s32(acc)
        yr = rshr(acc, coef_bits)
    y = sat(yr, -limit, limit)
    z[1], z[0], z[3], z[2] = z[0], x, z[2], y
    return y, y != yr


def shaped_step(coefs, z: list, e: list, x: int, coef_bits: int, limit: int, wrap: bool = True) -> tuple[int, bool]:
    """One section of the "shaped" output arithmetic (one 32-bit product per term, 32-bit sums: data
    and coefficient widths whose sum the certificate keeps inside 32 bits) with error feedback of
    its own rounding (error spectrum shaping: Higgins & Munson, IEEE Trans. ASSP 30(6), 1982;
    Dattorro, JAES 36(11), 1988). coefs = (b0, b1, b2, a1, a2,
    k1, k2), z = [x1, x2, y1, y2] and e = [e1, e2] (the last two roundings' shifted-off bits) are
    updated in place:
    acc = b0 x + b1 x1 + b2 x2 - a1 y1 - a2 y2 - k1 e1 - k2 e2, summed modulo 2**32 (the final sum
    fits: see the certificate), yr = rshr(acc, coef_bits),
    e0 = acc - yr 2**coef_bits (in [-2**(coef_bits-1), 2**(coef_bits-1))), y = sat(yr, -limit, limit).
    Each product is taken modulo 2**32 (unsigned in C, as a 32-bit MULS gives it); only the final
    sum must fit. The rounding error then reaches the output through
    (1 + k1 z^-1 + k2 z^-2) / A(z) instead of 1 / A(z). A FIR section (a1 = a2 = k1 = k2 = 0, the
    droop compensator) is the same step without the recursion, and its C twin (``fir_section``)
    skips those products. Returns (y, whether the saturation engaged); C: ``shaped_section``.
    ``wrap=False`` keeps the exact sum: for analyses from states no legal input reaches (the
    zero-input limit cycles), where a wrapped sum would start an overflow oscillation instead."""
    b0, b1, b2, a1, a2, k1, k2 = coefs
    acc = b0 * x + b1 * z[0] + b2 * z[1] - a1 * z[2] - a2 * z[3] - k1 * e[0] - k2 * e[1]
    if wrap:
        acc = wrap_s32(acc)
    yr = rshr(acc, coef_bits)
    e[1], e[0] = e[0], acc - (yr << coef_bits)
    y = sat(yr, -limit, limit)
    z[1], z[0], z[3], z[2] = z[0], x, z[2], y
    return y, y != yr


def split_mac(acc: tuple[int, int, int], c: int, x: int) -> tuple[int, int, int]:
    """One 27 x 16 product c x of the "mid" output arithmetic, kept as three 16 x 16 -> 32 products of
    the word's top, middle and low bytes (x = (x >> 16) 2**16 + ((x >> 8) & 255) 2**8 + (x & 255),
    exact for negative x with an arithmetic shift) added to the three sums (hi, mid, lo); c x =
    hi 2**16 + mid 2**8 + lo. The section's rounding of the full sum A, rshr(A, C) for 8 <= C <= 16,
    is then hi 2**(16-C) + ((mid + ((lo + 2**(C-1)) >> 8)) >> (C - 8)) exactly (``split_round``)."""
    hi, mid, lo = acc
    return hi + c * (x >> 16), mid + c * ((x >> 8) & 0xFF), lo + c * (x & 0xFF)


def split_round(acc: tuple[int, int, int], shift: int) -> int:
    """rshr(hi 2**16 + mid 2**8 + lo, shift) from the three sums, for 8 <= shift <= 16."""
    hi, mid, lo = acc
    return hi * (1 << (16 - shift)) + ((mid + ((lo + (1 << (shift - 1))) >> 8)) >> (shift - 8))


INV6_BITS = 15
INV6 = round((1 << INV6_BITS) / 6)  # 1/6 in Q15 for the cubic correction
CUBIC_U_BITS = 12  # the cubic correction reads the fraction in Q12
CUBIC_T_BITS = 8  # and corrects the time offset in Q8 ticks
CUBIC_CORR_SHIFT = 3 * CUBIC_U_BITS + INV6_BITS - CUBIC_T_BITS  # Q24 * Q12 * Q15 -> Q8: 43


# --- division-free interpolation: one reciprocal per stamp interval -------------------------------
#
# Every grid instant inside one stamp interval divides by the same interval d. Instead of a 32-bit
# division per instant (a libgcc helper on cores without a divide instruction), the C computes
# r = floor((2**32 - 1) / d) once per interval: a seed from a small table over the design's legal
# range of d, Newton-Raphson steps r <- r + r (2**32 - d r) / 2**32 in 32x32->32 multiplies (the
# product split by design-time shifts so that it fits 31 bits), and a final remainder check that
# makes r exact. Each quotient is then a multiply and a shift, plus one (rarely more) correction
# step against the remainder, equal to floor division bit for bit (see ``ratio_recip``). Newton's
# iteration for the reciprocal doubles the correct bits per step (common practice, e.g. computer
# arithmetic texts; DESIGN.md section 4). Intervals shorter than the legal range (not this carrier:
# a noise burst) are first scaled up by a power of two, numerator and divisor alike, which leaves
# the quotient unchanged.

RECIP_ONE = (1 << 32) - 1
RECIP_TABLE_BITS = 6  # at most 64 seeds; two Newton steps then reach the exact value +-2
RECIP_MAX_STEPS = 3
RECIP_MAX_FIX = 2  # remainder corrections per direction the exact reciprocal may need


@dataclass(frozen=True)
class RecipPlan:
    """How ``reciprocal`` reaches floor((2**32 - 1) / d) for d in [d_lo, d_hi] = [2**(b-1), 2**b):
    seeds indexed by (d - d_lo) >> index_shift, Newton steps with the pre-shifts (a, b) of r and of
    the error term, then fix_down / fix_up remainder corrections; fix_linear / fix_cubic remainder
    corrections make each quotient of ``ratio_recip`` exact for the design's phase shift."""

    d_lo: int
    d_hi: int
    shift: int
    index_shift: int
    seeds: tuple[int, ...]
    steps: tuple[tuple[int, int], ...]
    fix_down: int
    fix_up: int
    fix_linear: int  # quotient corrections with lbits = 0 (the linear fraction)
    fix_cubic: int  # and with lbits = CUBIC_T_BITS (the cubic's corrected fraction)
    error_max: int = 0  # the largest |2**32 - d r| a Newton step reads (an int32)
    product_max: int = 0  # the largest |(r >> a) (e >> b)| a Newton step forms (an int32)


def _select(cond, a, b):
    return np.where(cond, a, b) if isinstance(cond, np.ndarray) else (a if cond else b)


def recip_norm(d, d_lo: int):
    """The smallest k >= 0 with d << k >= d_lo (at most 31): intervals below the legal range are
    scaled up by 2**k before the reciprocal. In C: a short loop, run only for such intervals."""
    if isinstance(d, np.ndarray):
        k = np.zeros(d.shape, dtype=np.int64)
        for _ in range(31):
            low = (d << k) < d_lo
            if not low.any():
                break
            k = k + low
        return k
    k = 0  # type: ignore[assignment]   # a scalar d: the plain loop
    while k < 31 and (d << k) < d_lo:
        k += 1
    return k


def _newton(d, r, a: int, b: int):
    e = wrap_s32(-(d * r))  # 2**32 - d r, an int32 by the plan's proof
    return r + (((r >> a) * (e >> b)) >> (32 - a - b))


def reciprocal(d, plan: RecipPlan):
    """floor((2**32 - 1) / d) for d_lo <= d <= d_hi, without a division: table seed, Newton steps in
    32-bit multiplies, remainder corrections (``recip_plan`` proves each step on every legal d)."""
    seeds = np.asarray(plan.seeds, dtype=np.int64) if isinstance(d, np.ndarray) else plan.seeds
    r = seeds[(d - plan.d_lo) >> plan.index_shift]
    for a, b in plan.steps:
        r = _newton(d, r, a, b)
    rem = wrap_bits(RECIP_ONE - d * r, 32)
    for _ in range(plan.fix_down):  # r too large: the remainder went negative
        neg = wrap_s32(rem) < 0
        r, rem = _select(neg, r - 1, r), _select(neg, wrap_bits(rem + d, 32), rem)
    for _ in range(plan.fix_up):  # r too small: a whole d is left over
        big = rem >= d
        r, rem = _select(big, r + 1, r), _select(big, rem - d, rem)
    return r


def ratio_recip(x, lbits: int, shift: int, d, r, fix: int):
    """floor(x * 2**(shift - lbits) / d) for 0 <= x < d << lbits, with r = floor((2**32 - 1) / d):
    the interpolation fraction without a division.

    With hi = x >> lbits, lo = x mod 2**lbits, P = hi r + lo (r >> lbits) < r d < 2**32 and
    q = P >> (32 - shift). Since (2**32 - d) / d <= r < 2**32 / d, the true quotient Q exceeds q by
    less than (d + 2**lbits) / 2**(32 - shift) + 1, so ``fix`` = ceil((d_hi + 2**lbits) /
    2**(32 - shift)) steps of "if the remainder x 2**(shift - lbits) - q d is >= d, q += 1" make it
    exact (the remainder is taken modulo 2**32; its true value lies in [0, (fix + 1) d))."""
    hi, lo = x >> lbits, x & ((1 << lbits) - 1)
    q = wrap_bits(hi * r + lo * (r >> lbits), 32) >> (32 - shift)
    rem = wrap_bits((x << (shift - lbits)) - q * d, 32)
    for _ in range(fix):
        big = rem >= d
        q, rem = _select(big, q + 1, q), _select(big, rem - d, rem)
    return q


def interval_reciprocal(d, plan: RecipPlan):
    """Once per stamp interval d >= 1: (k, d << k, reciprocal of d << k), the scale and reciprocal
    every quotient in the interval uses."""
    k = recip_norm(d, plan.d_lo)
    dn = d << k
    return k, dn, reciprocal(dn, plan)


def interval_fraction(e1, k, dn, r, plan: RecipPlan):
    """floor(e1 * 2**shift / d) for 0 <= e1 < d, through the interval's reciprocal: the linear
    interpolation fraction (equal to ``ratio_floor(e1, shift, d)``)."""
    return ratio_recip(e1 << k, 0, plan.shift, dn, r, plan.fix_linear)


def _fits_i32(v) -> bool:
    return bool(np.all(np.abs(v) < (1 << 31)))


@functools.lru_cache(maxsize=64)
def recip_plan(bits: int, shift: int) -> RecipPlan:
    """Design-time plan of the reciprocal for a phase shift and stamp intervals of at most ``bits``
    bits: every interval d >= 1 is scaled up into [2**(bits-1), 2**bits) (``recip_norm``), where the
    seed table, the Newton shifts and the corrections are chosen and each step is checked on every d
    (exhaustive, numpy). Raises ValueError when that range cannot be served in 32 bits."""
    if bits < 3 or bits + shift > 32 or bits > 30:
        raise ValueError(f"stamp intervals of {bits} bits with a {shift}-bit fraction do not fit 32 bits")
    d_lo, d_hi = 1 << (bits - 1), (1 << bits) - 1
    d = np.arange(d_lo, d_hi + 1, dtype=np.int64)
    exact = RECIP_ONE // d
    span = d_hi - d_lo + 1
    ts = max(0, (span - 1).bit_length() - RECIP_TABLE_BITS)
    n = ((span - 1) >> ts) + 1
    lo_b = d_lo + (np.arange(n, dtype=np.int64) << ts)
    hi_b = np.minimum(lo_b + (1 << ts) - 1, d_hi)
    seeds = tuple(int(v) for v in np.round((1 << 32) / np.sqrt(lo_b * hi_b.astype(np.float64))))
    r = np.asarray(seeds, dtype=np.int64)[(d - d_lo) >> ts]
    steps: list[tuple[int, int]] = []
    error_max = product_max = 0
    while True:
        err = r - exact
        if int(np.max(np.abs(err))) <= RECIP_MAX_FIX:
            break
        if len(steps) == RECIP_MAX_STEPS:
            raise ValueError(f"the reciprocal of {d_lo}..{d_hi} does not converge in {RECIP_MAX_STEPS} steps")
        e = wrap_s32(-(d * r))
        if not (_fits_i32(2**32 - d * r) and np.all(r > 0) and np.all(r < (1 << 31))):
            raise ValueError(f"the reciprocal seed of {d_lo}..{d_hi} is too coarse for 32 bits")
        need = max(0, int(np.max(r)).bit_length() + int(np.max(np.abs(e))).bit_length() + 1 - 31)
        best = None
        for a in range(need + 1):
            b = need - a
            if not _fits_i32((r >> a) * (e >> b)):
                continue
            nr = _newton(d, r, a, b)
            worst = int(np.max(np.abs(nr - exact)))
            if best is None or worst < best[0]:
                best = (worst, a, b, nr)
        if best is None:
            raise ValueError(f"no 32-bit Newton step for the reciprocal of {d_lo}..{d_hi}")
        steps.append(best[1:3])
        error_max = max(error_max, int(np.max(np.abs(e))))
        product_max = max(product_max, int(np.max(np.abs((r >> best[1]) * (e >> best[2])))))
        r = best[3]
    err = r - exact
    fix_down, fix_up = max(0, int(np.max(err))), max(0, -int(np.min(err)))
    fix_linear = -(-(d_hi + 1) // (1 << (32 - shift)))
    fix_cubic = -(-(d_hi + (1 << CUBIC_T_BITS)) // (1 << (32 - shift)))
    plan = RecipPlan(
        d_lo, d_hi, shift, ts, seeds, tuple(steps), fix_down, fix_up, fix_linear, fix_cubic, error_max, product_max
    )
    if not np.array_equal(reciprocal(d, plan), exact):  # the whole chain, as the C runs it
        raise ValueError(f"the reciprocal plan of {d_lo}..{d_hi} is not exact")
    return plan


def recip_c_text(prefix: str, plan: RecipPlan) -> str:
    """The C of ``reciprocal``, ``recip_norm`` and ``ratio_recip`` for one plan (its seed table and
    shifts printed in), the twins of the Python functions above."""
    p = prefix
    rows = ",\n        ".join(
        ", ".join(f"UINT32_C({v})" for v in plan.seeds[i : i + 4]) for i in range(0, len(plan.seeds), 4)
    )
    newton = "".join(
        f"    e = {p}_wrap_s32(0u - (d * r));                   /* 2^32 - d r */\n"
        f"    ra = r >> {a}u;\n"
        f"    e = {p}_asr32((int32_t)ra * {p}_asr32(e, {b}u), {32 - a - b}u);   /* the step, signed */\n"
        f"    r += (uint32_t)e;\n"
        for a, b in plan.steps
    )
    # each correction but the last updates the remainder for the next one (the last's would be unread)
    fixes = [
        (f"    if ({p}_wrap_s32(rem) < 0) {{         /* r one too large */\n        r--;\n", "        rem += d;\n")
    ] * plan.fix_down + [
        ("    if (rem >= d) {                      /* r one too small */\n        r++;\n", "        rem -= d;\n")
    ] * plan.fix_up
    fix = "".join(head + (upd if i < len(fixes) - 1 else "") + "    }\n" for i, (head, upd) in enumerate(fixes))
    decl = ("    uint32_t rem;\n" if fixes else "") + ("    int32_t e;\n    uint32_t ra;\n" if plan.steps else "")
    fix = "    rem = 0xFFFFFFFFu - (d * r);\n" + fix if fixes else ""
    return f"""\
static inline unsigned {p}_recip_norm(uint32_t d)
{{
    /* smallest k with d << k >= {plan.d_lo}: every interval is scaled into [{plan.d_lo}, {plan.d_hi}] */
    unsigned k = 0u;
    while ((k < 31u) && ((d << k) < UINT32_C({plan.d_lo}))) {{
        k++;
    }}
    return k;
}}

static inline uint32_t {p}_reciprocal(uint32_t d)
{{
    /* floor((2^32 - 1) / d) for d in [{plan.d_lo}, {plan.d_hi}]: table seed, Newton-Raphson steps in
     * 32-bit multiplies, remainder corrections (see edgetally.fixedpoint.reciprocal) */
    /* seeds of floor((2^32 - 1) / d) for d in [{plan.d_lo}, {plan.d_hi}], one per {1 << plan.index_shift} ticks */
    static const uint32_t {p}_recip_seed[{len(plan.seeds)}] = {{
        {rows}
    }};
    uint32_t r = {p}_recip_seed[(d - UINT32_C({plan.d_lo})) >> {plan.index_shift}u];
{decl}{newton}{fix}    return r;
}}

{_NOLINT_BEGIN}static inline uint32_t {p}_ratio_recip(uint32_t x, unsigned lbits, unsigned shift, uint32_t d, uint32_t r,
                                       unsigned fix)
{_NOLINT_END}{{
    /* floor(x 2^(shift - lbits) / d) for x < d << lbits, r = floor((2^32 - 1) / d): a multiply,
     * a shift and ``fix`` remainder corrections (see edgetally.fixedpoint.ratio_recip) */
    uint32_t q = (((x >> lbits) * r) + ((x & ((UINT32_C(1) << lbits) - 1u)) * (r >> lbits))) >> (32u - shift);
    uint32_t rem = (x << (shift - lbits)) - (q * d);
    unsigned k;
    for (k = 0u; k < fix; k++) {{
        if (rem >= d) {{
            q++;
            rem -= d;
        }}
    }}
    return q;
}}
"""


# --- the cubic's curvature correction, in 32-bit words -------------------------------------------


def _rshr0(x, s: int):
    return rshr(x, s) if s > 0 else x


@functools.lru_cache(maxsize=16)
def cubic_shifts(delta_limit: int) -> tuple[int, int, int, int, float]:
    """The pre-shifts (sh, sq, sg) and final shift of the cubic correction for second differences
    clamped to +-delta_limit, sized from the bounds so that every intermediate fits an int32, and
    the worst error they add to the correction, in Q8 ticks (before its own final rounding).

    Exact value: q h INV6 / 2**43 (q = v (4096 - v) <= 2**22, |h| <= hmax = 3 dl 4096 + 2 dl 4095).
    32-bit form: g = rshr(h, sh) INV6 (|g| < 2**31), corr = rshr(rshr(q, sq) rshr(g, sg), so) with
    sh + sq + sg + so = 43 and |rshr(q, sq) rshr(g, sg)| + 2**(so-1) < 2**31. Each rounding errs by
    at most half its step: the three add at most q_max INV6 2**(sh-1) / 2**43 + g_max 2**(sh+sq-1) /
    2**43 + q_max 2**(sh+sg-1) / 2**43 Q8 ticks; (sq, sg) is the split with the least bound."""
    one = 1 << CUBIC_U_BITS
    hmax = 3 * delta_limit * one + 2 * delta_limit * (one - 1)
    qmax = (one // 2) ** 2
    if hmax >= (1 << 31):
        raise ValueError(f"second differences up to {delta_limit} ticks do not fit the 32-bit cubic")
    sh = max(0, (hmax * INV6).bit_length() - 31)
    gmax = _rshr0(hmax, sh) * INV6
    best = None
    for sq in range(0, CUBIC_CORR_SHIFT - sh):
        for sg in range(0, CUBIC_CORR_SHIFT - sh - sq):
            so = CUBIC_CORR_SHIFT - sh - sq - sg
            if _rshr0(qmax, sq) * _rshr0(gmax, sg) + (1 << (so - 1)) < (1 << 31):
                err = (
                    qmax * INV6 * (2 ** (sh - 1) if sh else 0)
                    + gmax * 2 ** (sh + sq - 1) * (sq > 0)
                    + qmax * 2 ** (sh + sg - 1) * (sg > 0)
                ) / 2**CUBIC_CORR_SHIFT
                if best is None or err < best[4]:
                    best = (sh, sq, sg, so, err)
                break  # a larger sg only adds error
    if best is None:
        raise ValueError(f"no 32-bit shift split holds the cubic correction for second differences up to {delta_limit}")
    return best


def cubic_fraction(e1, d, d_prev, d_next, delta_limit: int, shift: int, quot):
    """Phase fraction (Q plan.shift) at offset e1 into a stamp interval d, corrected for the
    curvature of time as a function of phase through four stamps (intervals d_prev, d, d_next),
    in 32-bit words; ``quot(x, lbits)`` is floor(x 2**(shift - lbits) / d) for x < d << lbits, by the
    interval's reciprocal (``reciprocal_quotient``) or by division (``division_quotient``).

    With u the linear fraction and the second differences delta0 = d - d_prev, delta1 = d_next - d
    (clamped to +-delta_limit), the cubic through the four stamps lies below the chord by
    u (1 - u) (A + B u) ticks, A = (2 delta0 + delta1) / 6, B = (delta1 - delta0) / 6; the fraction
    is then (e1 + that) / d. Integer form:
      u0 = floor(e1 2**shift / d); v = u0 >> (shift - 12)                      (Q12)
      h = (2 delta0 + delta1) * 4096 + (delta1 - delta0) * v; q = v * (4096 - v)
      corr = rshr(rshr(q, sq) * rshr(rshr(h, sh) * INV6, sg), so)                (Q8 ticks)
    with the shifts of ``cubic_shifts`` (every word fits an int32; the roundings err by at most the
    bound it returns, a few Q8 units: under 0.03 tick, against the timer's own 1-tick step).
    e1 < d and d << 8 < 2**32 (d <= the gap limit, whose bits plus the shift are at most 32).
      u = floor(sat((e1 << 8) + corr, 0, (d << 8) - 1) 2**(shift - 8) / d)
    Both quotients are exact floor divisions, whichever way ``quot`` computes them."""
    one = 1 << CUBIC_U_BITS
    u0 = quot(e1, 0)
    v = u0 >> (shift - CUBIC_U_BITS)
    dl0 = sat(d - d_prev, -delta_limit, delta_limit)
    dl1 = sat(d_next - d, -delta_limit, delta_limit)
    h = (2 * dl0 + dl1) * one + (dl1 - dl0) * v
    q = v * (one - v)
    sh, sq, sg, so, _ = cubic_shifts(delta_limit)
    corr = rshr(_rshr0(q, sq) * _rshr0(_rshr0(h, sh) * INV6, sg), so)
    num = sat((e1 << CUBIC_T_BITS) + corr, 0, (d << CUBIC_T_BITS) - 1)
    return quot(num, CUBIC_T_BITS)


def reciprocal_quotient(k, dn, r, plan: RecipPlan):
    """``quot`` of ``cubic_fraction`` through the interval's reciprocal (``interval_reciprocal``)."""
    return lambda x, lbits: ratio_recip(
        x << k, lbits, plan.shift, dn, r, plan.fix_linear if lbits == 0 else plan.fix_cubic
    )


def division_quotient(d, shift: int):
    """``quot`` of ``cubic_fraction`` by division (``ratio_floor``), for cores that divide."""
    return lambda x, lbits: ratio_floor(x, shift - lbits, d)


def split_scale(y, mult: int, shift: int):
    """rshr(y * mult, shift) for a 32-bit y, 0 <= mult < 2**15 and 1 <= shift <= 31, from two
    32-bit products of the halves of y: y = hi 2**16 + lo (hi = y >> 16, lo = y & 0xFFFF), so
    y mult + 2**(shift-1) = A 2**16 + B with A = hi mult + r, B = lo mult + h (r, h: the halves of
    the rounding constant; r = 0 when shift <= 16). For shift >= 16, floor((A 2**16 + B) / 2**shift)
    = floor((A + floor(B / 2**16)) / 2**(shift-16)); for shift < 16 it is A 2**(16-shift) +
    floor(B / 2**shift), A 2**16 being a multiple of 2**shift. Exact: no bit of the 64-bit product
    is lost. |hi mult| < 2**30, 0 <= B < 2**32 (unsigned), and for shift < 16 the result itself
    must fit int32 (the certificate's scale lines). C: ``split_scale`` (shift >= 16) and
    ``split_scale_low`` (shift < 16)."""
    half = 1 << (shift - 1)
    if shift < 16:
        a = (y >> 16) * mult
        b = (y & 0xFFFF) * mult + half
        return a * (1 << (16 - shift)) + (b >> shift)
    a = (y >> 16) * mult + (half >> 16)
    b = (y & 0xFFFF) * mult + (half & 0xFFFF)
    return (a + (b >> 16)) >> (shift - 16)


def squelch_level(lvl, a, shift: int, cap: int):
    """The noise squelch's level after one CIC output period: min(lvl - (lvl >> shift) + a, cap) on
    unsigned values (lvl <= cap and a < 2**32, so nothing wraps; see the certificate): 64-bit words,
    or 32-bit ones (``squelch_level32``) where cap + a stays below 2**32 (``Squelch.level_bits``)."""
    v = lvl - (lvl >> shift) + a
    return cap if v > cap else v


def bit_errors(a: int, b: int, mask: int) -> int:
    """The number of bits where a and b differ under mask (32-bit words): the sync-word correlator's
    distance (a population count of (a ^ b) & mask)."""
    return bin((a ^ b) & mask & 0xFFFFFFFF).count("1")


# C renderings of the same operations. ``{p}`` is replaced by the design's name prefix.

# clang-tidy's bugprone-easily-swappable-parameters flags helpers that take several words of one
# kind whose order no expression ties together; each emitted call is checked against the integer
# model bit for bit, so the order is held by test, and the signature says so where it is flagged.
_NOLINT_BEGIN = (
    "/* NOLINTBEGIN(bugprone-easily-swappable-parameters): several words of one kind by design;\n"
    " * every call is checked against the integer model bit for bit (tests/test_bitexact.py) */\n"
)
_NOLINT_END = "/* NOLINTEND(bugprone-easily-swappable-parameters) */\n"

# split_mac's five products (b0 v, b1 z0, b2 z1, -a1 z2, -a2 z3): the top byte by an arithmetic
# shift, the middle and low bytes from the word's unsigned bit pattern (the same bits).
_SPLIT_TERMS = "".join(
    f"""\
    x = {x}; k = {k};
    w = (uint32_t)x;
    b = (w >> 8) & 0xFFu;
    hi += k * {{p}}_asr32(x, 16u);
    mid += k * (int32_t)b;
    b = w & 0xFFu;
    lo += k * (int32_t)b;
"""
    for x, k in (
        ("v", "(int32_t)c[0]"),
        ("z[0]", "(int32_t)c[1]"),
        ("z[1]", "(int32_t)c[2]"),
        ("z[2]", "-(int32_t)c[3]"),
        ("z[3]", "-(int32_t)c[4]"),
    )
)
_SPLIT_MAC_C = (
    """\
static inline int32_t {p}_split_section(const int16_t *c, int32_t v, const int32_t *z, unsigned shift)
{{
    /* b0 v + b1 z0 + b2 z1 - a1 z2 - a2 z3, each 27 x 16 product as three 16 x 16 -> 32 products of
     * the word's top, middle and low bytes summed apart, rounded by split_round
     * (edgetally.fixedpoint.split_mac and section_step) */
    int32_t hi = 0;
    int32_t mid = 0;
    int32_t lo = 0;
    int32_t x;
    int32_t k;
    uint32_t w;
    uint32_t b;
"""
    + _SPLIT_TERMS.replace("{", "{{").replace("}", "}}").replace("{{p}}", "{p}")
    + """\
    return {p}_split_round(hi, mid, lo, shift);
}}
"""
)
C_DEFINITIONS = {
    "wrap_s32": """\
static inline int32_t {p}_wrap_s32(uint32_t x)
{{
    /* uint32 pattern read as int32 without an implementation-defined conversion */
    int32_t r;
    if (x < 0x80000000u) {{
        r = (int32_t)x;
    }} else {{
        uint32_t low = x - 0x80000000u;             /* in [0, 2^31): representable */
        r = ((int32_t)low - INT32_MAX) - 1;
    }}
    return r;
}}
""",
    "rshr": """\
static inline int64_t {p}_rshr(int64_t x, unsigned s)
{{
    /* round half up, then arithmetic shift right (the emitted source checks that >> is arithmetic) */
    const unsigned up = s - 1u;
    const uint64_t half = (uint64_t)1u << up;
    return (x + (int64_t)half) >> s;
}}
""",
    "sat": """\
static inline int64_t {p}_sat(int64_t x, int64_t lo, int64_t hi)
{{
    return (x < lo) ? lo : ((x > hi) ? hi : x);
}}
""",
    "ratio_floor": """\
static inline uint32_t {p}_ratio_floor(uint32_t num, unsigned shift, uint32_t den)
{{
    /* floor(num * 2^shift / den), 0 <= num < den; the design keeps num << shift in 32 bits */
    return (uint32_t)(num << shift) / den;
}}
""",
    "squelch_level": _NOLINT_BEGIN
    + """\
static inline uint64_t {p}_squelch_level(uint64_t lvl, uint32_t a, unsigned shift, uint64_t cap)
"""
    + _NOLINT_END
    + """\
{{
    /* min(lvl - (lvl >> shift) + a, cap): the squelch's one-pole average of the noise measure */
    uint64_t v = lvl - (lvl >> shift) + (uint64_t)a;
    return (v > cap) ? cap : v;
}}
""",
    "squelch_level32": _NOLINT_BEGIN
    + """\
static inline uint32_t {p}_squelch_level32(uint32_t lvl, uint32_t a, unsigned shift, uint32_t cap)
"""
    + _NOLINT_END
    + """\
{{
    /* squelch_level in 32-bit words: cap + a < 2^32 (the certificate's squelch.level) */
    uint32_t v = lvl - (lvl >> shift) + a;
    return (v > cap) ? cap : v;
}}
""",
    "asr32": """\
static inline int32_t {p}_asr32(int32_t x, unsigned s)
{{
    /* floor(x / 2^s), s < 32: arithmetic shift right (the emitted source checks that >> is arithmetic) */
    return x >> s;
}}
""",
    "split_scale": _NOLINT_BEGIN
    + """\
static inline int32_t {p}_split_scale(int32_t y, int32_t mult, unsigned shift)
"""
    + _NOLINT_END
    + """\
{{
    /* rshr(y mult, shift), 0 <= mult < 2^15, 16 <= shift <= 31, from two 32-bit products of the
     * halves of y (edgetally.fixedpoint.split_scale: exact) */
    const uint32_t half = UINT32_C(1) << (shift - 1u);
    const uint32_t carry = half >> 16;
    const int32_t a = ({p}_asr32(y, 16u) * mult) + (int32_t)carry;
    const uint32_t b = (((uint32_t)y & 0xFFFFu) * (uint32_t)mult) + (half & 0xFFFFu);
    const uint32_t low = b >> 16;
    return {p}_asr32(a + (int32_t)low, shift - 16u);
}}
""",
    "split_scale_low": _NOLINT_BEGIN
    + """\
static inline int32_t {p}_split_scale_low(int32_t y, int32_t mult, unsigned shift)
"""
    + _NOLINT_END
    + """\
{{
    /* rshr(y mult, shift), 0 <= mult < 2^15, 1 <= shift < 16, the result within int32, from two
     * 32-bit products of the halves of y (edgetally.fixedpoint.split_scale: exact) */
    const int32_t a = {p}_asr32(y, 16u) * mult;
    const uint32_t b = (((uint32_t)y & 0xFFFFu) * (uint32_t)mult) + (UINT32_C(1) << (shift - 1u));
    const uint32_t scale = UINT32_C(1) << (16u - shift);
    const uint32_t low = b >> shift;                  /* < 2^31: shift >= 1 */
    return (a * (int32_t)scale) + (int32_t)low;
}}
""",
    "split_round": """\
static inline int32_t {p}_split_round(int32_t hi, int32_t mid, int32_t lo, unsigned shift)
{{
    /* rshr(hi 2^16 + mid 2^8 + lo, shift), 8 <= shift <= 16 (edgetally.fixedpoint.split_round) */
    const uint32_t scale = UINT32_C(1) << (16u - shift);
    const uint32_t half = UINT32_C(1) << (shift - 1u);
    return (hi * (int32_t)scale) + {p}_asr32(mid + {p}_asr32(lo + (int32_t)half, 8u), shift - 8u);
}}
""",
    "split_mac": _SPLIT_MAC_C,
    "shaped_section": _NOLINT_BEGIN
    + """\
static inline int32_t {p}_shaped_section(const int32_t *c, int32_t v, const int32_t *z, int32_t *e, unsigned shift)
"""
    + _NOLINT_END
    + """\
{{
    /* b0 v + b1 z0 + b2 z1 - a1 z2 - a2 z3 - k1 e1 - k2 e2: 32-bit products summed modulo 2^32 (the
     * certificate bounds the final sum), rounded; the shifted-off bits become e0 (error feedback,
     * edgetally.fixedpoint.shaped_step). Returns the rounded sum before saturation. */
    const uint32_t half = UINT32_C(1) << (shift - 1u);
    uint32_t sum = (((uint32_t)c[0] * (uint32_t)v) + ((uint32_t)c[1] * (uint32_t)z[0])) + ((uint32_t)c[2] * (uint32_t)z[1]);
    int32_t acc;
    int32_t yr;
    sum -= ((uint32_t)c[3] * (uint32_t)z[2]) + ((uint32_t)c[4] * (uint32_t)z[3]);
    sum -= ((uint32_t)c[5] * (uint32_t)e[0]) + ((uint32_t)c[6] * (uint32_t)e[1]);
    acc = {p}_wrap_s32(sum);
    yr = {p}_asr32(acc + (int32_t)half, shift);
    e[1] = e[0];
    e[0] = acc - (yr * (int32_t)(UINT32_C(1) << shift));   /* |e0| <= 2^(shift-1) */
    return yr;
}}
""",
    "fir_section": """\
static inline int32_t {p}_fir_section(const int32_t *c, int32_t v, const int32_t *z, unsigned shift)
{{
    /* b0 v + b1 z0 + b2 z1 summed modulo 2^32, rounded: shaped_section with a1 = a2 = k1 = k2 = 0
     * (edgetally.fixedpoint.shaped_step); returns the rounded sum before saturation */
    const uint32_t half = UINT32_C(1) << (shift - 1u);
    uint32_t sum = (((uint32_t)c[0] * (uint32_t)v) + ((uint32_t)c[1] * (uint32_t)z[0])) + ((uint32_t)c[2] * (uint32_t)z[1]);
    return {p}_asr32({p}_wrap_s32(sum) + (int32_t)half, shift);
}}
""",
    "clip32": """\
static inline int32_t {p}_clip32(int32_t x, int32_t lim, uint32_t *count)
{{
    /* sat(x, -lim, lim), counting every time it engages */
    int32_t r = (x < -lim) ? -lim : ((x > lim) ? lim : x);
    if (r != x) {{
        (*count)++;
    }}
    return r;
}}
""",
    "rshr32": """\
static inline int32_t {p}_rshr32(int32_t x, unsigned s)
{{
    /* rshr on 32-bit words, for |x| + 2^(s-1) < 2^31 (the certificate's cubic lines) */
    const uint32_t half = UINT32_C(1) << (s - 1u);
    return {p}_asr32(x + (int32_t)half, s);
}}
""",
    "bit_errors": """\
static inline uint32_t {p}_bit_errors(uint32_t a, uint32_t b, uint32_t mask)
{{
    /* the bits where a and b differ under mask, counted (edgetally.fixedpoint.bit_errors) */
    uint32_t x = (a ^ b) & mask;
    uint32_t n = 0u;
    while (x != 0u) {{
        x &= x - 1u;
        n++;
    }}
    return n;
}}
""",
    "sat32": """\
static inline int32_t {p}_sat32(int32_t x, int32_t lo, int32_t hi)
{{
    return (x < lo) ? lo : ((x > hi) ? hi : x);
}}
""",
}


def cubic_c_text(prefix: str, delta_limit: int, recip: RecipPlan | None, shift: int) -> str:
    """The C of ``cubic_fraction`` for one delta_limit (its shifts printed in), its quotients through
    the interval's reciprocal (``ratio_recip``) or by division (``ratio_floor``); it also calls
    ``rshr32``, ``sat32`` and ``wrap_s32``."""
    p = prefix
    sh, sq, sg, so, _ = cubic_shifts(delta_limit)

    def r0(x, n):
        return f"{p}_rshr32({x}, {n}u)" if n else x

    if recip is not None:
        args = ",\n                                          unsigned k, uint32_t dn, uint32_t r"
        q0 = f"{p}_ratio_recip(e1 << k, 0u, {shift}u, dn, r, {recip.fix_linear}u)"
        q1 = f"{p}_ratio_recip((uint32_t)num << k, {CUBIC_T_BITS}u, {shift}u, dn, r, {recip.fix_cubic}u)"
    else:
        args = ""
        q0 = f"{p}_ratio_floor(e1, {shift}u, d)"
        q1 = f"{p}_ratio_floor((uint32_t)num, {shift - CUBIC_T_BITS}u, d)"
    return f"""\
{_NOLINT_BEGIN}static inline uint32_t {p}_cubic_fraction(uint32_t e1, uint32_t d, uint32_t d_prev, uint32_t d_next{args})
{_NOLINT_END}{{
    /* phase fraction through four stamps in 32-bit words (see edgetally.fixedpoint.cubic_fraction) */
    const int32_t one = {1 << CUBIC_U_BITS};                  /* 1 in Q{CUBIC_U_BITS} */
    const uint32_t v0 = {q0} >> {shift - CUBIC_U_BITS}u;
    const uint32_t e1t = e1 << {CUBIC_T_BITS}u;                 /* e1 and d in Q{CUBIC_T_BITS} ticks */
    const uint32_t dt = d << {CUBIC_T_BITS}u;
    int32_t v = (int32_t)v0;
    int32_t dl0 = {p}_sat32({p}_wrap_s32(d - d_prev), -{delta_limit}, {delta_limit});
    int32_t dl1 = {p}_sat32({p}_wrap_s32(d_next - d), -{delta_limit}, {delta_limit});
    int32_t h = (((2 * dl0) + dl1) * one) + ((dl1 - dl0) * v);
    int32_t q = v * (one - v);
    int32_t g = {r0("h", sh)} * {INV6};
    int32_t corr = {p}_rshr32({r0("q", sq)} * {r0("g", sg)}, {so}u);
    int32_t num = {p}_sat32((int32_t)e1t + corr, 0, (int32_t)dt - 1);
    return {q1};
}}
"""


_ASR_USERS = {
    "split_scale",
    "split_scale_low",
    "split_round",
    "split_mac",
    "rshr32",
    "cubic_fraction",
    "shaped_section",
    "fir_section",
}


def c_definitions(prefix: str, names=None, recip: RecipPlan | None = None, delta_limit: int = 0, shift: int = 0) -> str:
    """The C text of the named operations (all when ``names`` is None), in definition order, with
    ``prefix`` on each name. Emit only what a design calls: unused static functions draw warnings.
    "reciprocal" (the seed table, ``recip_norm``, ``reciprocal``, ``ratio_recip``) needs its plan;
    "cubic_fraction" its delta_limit and phase shift (and the plan when it divides by reciprocal)."""
    wanted = None if names is None else set(names)
    if (
        wanted is not None
        and wanted & _ASR_USERS
        or (wanted is not None and "reciprocal" in wanted and recip is not None and recip.steps)
    ):
        wanted.add("asr32")  # the one signed shift the others call
    if wanted is not None and wanted & {"shaped_section", "fir_section"}:
        wanted.add("wrap_s32")
    chosen = [n for n in C_DEFINITIONS if wanted is None or n in wanted]
    text = "".join(C_DEFINITIONS[n] for n in chosen).format(p=prefix)
    if recip is not None and (names is None or "reciprocal" in names):
        text += recip_c_text(prefix, recip)
    if names is not None and "cubic_fraction" in names:
        text += cubic_c_text(prefix, delta_limit, recip, shift)
    return "/* --- fixed-point operations: the single definition shared with edgetally.fixedpoint --- */\n" + text
