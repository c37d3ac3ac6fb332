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


def section_step(coefs, z: list, x: int, coef_bits: int, limit: int, narrow: bool) -> tuple[int, bool]:
    """One direct form I IIR section on Python ints, the output chain's only recursion:
    acc = b0 x + b1 x1 + b2 x2 - a1 y1 - a2 y2 (coefs = (b0, b1, b2, a1, a2), z = [x1, x2, y1, y2],
    updated in place), summed modulo 2**32 when ``narrow`` (exact 32-bit products whose final sum
    fits, see the certificate), y = sat(rshr(acc, coef_bits), -limit, limit). Returns (y, whether
    the saturation engaged). Its C twin is the section loop of the emitted ``_post`` function."""
    b0, b1, b2, a1, a2 = coefs
    acc = b0 * x + b1 * z[0] + b2 * z[1] - a1 * z[2] - a2 * z[3]
    if narrow:
        acc = wrap_s32(acc)
    yr = rshr(acc, coef_bits)
    y = sat(yr, -limit, limit)
    z[1], z[0], z[3], z[2] = z[0], x, z[2], y
    return y, y != yr


INV6_BITS = 15
INV6 = round((1 << INV6_BITS) / 6)  # 1/6 in Q15 for the cubic correction
CUBIC_U_BITS = 12  # the cubic correction reads the fraction in Q12
CUBIC_T_BITS = 8  # and corrects the time offset in Q8 ticks
CUBIC_CORR_SHIFT = 3 * CUBIC_U_BITS + INV6_BITS - CUBIC_T_BITS  # Q24 * Q12 * Q15 -> Q8: 43


def cubic_fraction(e1, d, d_prev, d_next, shift: int, delta_limit: int):
    """Phase fraction (Q shift) at offset e1 into a stamp interval d, corrected for the curvature of
    time as a function of phase through four stamps (intervals d_prev, d, d_next).

    With u the linear fraction and the second differences delta0 = d - d_prev, delta1 = d_next - d
    (clamped to +-delta_limit), the cubic through the four stamps lies below the chord by
    u (1 - u) (A + B u) ticks, A = (2 delta0 + delta1) / 6, B = (delta1 - delta0) / 6; the fraction
    is then (e1 + that) / d. Integer form:
      u0 = ratio_floor(e1, shift, d); v = u0 >> (shift - 12)                 (Q12)
      h = (2 delta0 + delta1) * 4096 + (delta1 - delta0) * v; q = v * (4096 - v)
      corr = rshr(q * h * INV6, 43)                                           (Q8 ticks)
    Bounds: v < 2**12, |delta| <= delta_limit <= 2**12, so |h| < 5 * 2**24, q <= 2**22 and
    |q * h * INV6| < 2**62: inside int64. e1 < d and d << 8 < 2**32 (d <= the gap limit).
      u = ratio_floor(sat((e1 << 8) + corr, 0, (d << 8) - 1), shift - 8, d)
    """
    one = 1 << CUBIC_U_BITS
    u0 = ratio_floor(e1, shift, d)
    v = u0 >> (shift - CUBIC_U_BITS)
    dl0 = sat(d - d_prev, -delta_limit, delta_limit)
    dl1 = sat(d_next - d, -delta_limit, delta_limit)
    h = (2 * dl0 + dl1) * one + (dl1 - dl0) * v
    q = v * (one - v)
    corr = rshr(q * h * INV6, CUBIC_CORR_SHIFT)
    num = sat((e1 << CUBIC_T_BITS) + corr, 0, (d << CUBIC_T_BITS) - 1)
    return ratio_floor(num, shift - CUBIC_T_BITS, d)


# C renderings of the same operations. ``{p}`` is replaced by the design's name prefix.
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
    "cubic_fraction": """\
static inline uint32_t {p}_cubic_fraction(uint32_t e1, unsigned shift, const uint32_t iv[3], int64_t delta_limit)
{{
    /* phase fraction through four stamps (see edgetally.fixedpoint.cubic_fraction): at offset e1 into
     * the interval iv[1] = d, with the intervals iv[0] = d_prev before it and iv[2] = d_next after it */
    const uint32_t d = iv[1];
    const int64_t one = INT64_C({one});
    uint32_t u0 = {p}_ratio_floor(e1, shift, d) >> (shift - {ub}u);
    int64_t v = (int64_t)u0;
    int64_t dl0 = {p}_sat((int64_t){p}_wrap_s32(d - iv[0]), -delta_limit, delta_limit);
    int64_t dl1 = {p}_sat((int64_t){p}_wrap_s32(iv[2] - d), -delta_limit, delta_limit);
    int64_t h = (((INT64_C(2) * dl0) + dl1) * one) + ((dl1 - dl0) * v);
    int64_t q = v * (one - v);
    int64_t corr = {p}_rshr(q * h * INT64_C({inv6}), {corr_shift}u);
    int64_t num = {p}_sat(((int64_t)e1 * INT64_C({tscale})) + corr, INT64_C(0), ((int64_t)d * INT64_C({tscale})) - INT64_C(1));
    return {p}_ratio_floor((uint32_t)num, shift - {tb}u, d);
}}
""",
}


def c_definitions(prefix: str, names=None) -> str:
    """The C text of the named operations (all when ``names`` is None), in definition order, with
    ``prefix`` on each name. Emit only what a design calls: unused static functions draw warnings."""
    chosen = [n for n in C_DEFINITIONS if names is None or n in names]
    text = "".join(C_DEFINITIONS[n] for n in chosen)
    return (
        "/* --- fixed-point operations: the single definition shared with edgetally.fixedpoint --- */\n"
        + text.format(
            p=prefix,
            ub=CUBIC_U_BITS,
            tb=CUBIC_T_BITS,
            one=1 << CUBIC_U_BITS,
            tscale=1 << CUBIC_T_BITS,
            inv6=INV6,
            corr_shift=CUBIC_CORR_SHIFT,
        )
    )
