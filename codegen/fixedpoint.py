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

MASK32 = 0xFFFFFFFF  # uint32_t arithmetic in C is arithmetic modulo 2**32: x & MASK32


def wrap_s32(x):
    """Reduce modulo 2**32 into [-2**31, 2**31): a uint32_t pattern read as int32_t."""
    return ((x + 0x80000000) & MASK32) - 0x80000000


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


# C renderings of the same operations. ``{p}`` is replaced by the design's name prefix.
C_DEFINITIONS = """\
/* --- fixed-point operations: the single definition shared with edgetally.fixedpoint --- */
static inline int32_t {p}_wrap_s32(uint32_t x)
{{
    /* uint32 pattern read as int32 without an implementation-defined conversion */
    return (x < UINT32_C(0x80000000)) ? (int32_t)x
                                      : (int32_t)(x - UINT32_C(0x80000000)) - INT32_C(0x7FFFFFFF) - 1;
}}
static inline int64_t {p}_rshr(int64_t x, unsigned s)
{{
    /* round half up, then arithmetic shift right (checked at compile time below) */
    return (x + ((int64_t)1 << (s - 1u))) >> s;
}}
static inline int64_t {p}_sat(int64_t x, int64_t lo, int64_t hi)
{{
    return (x < lo) ? lo : ((x > hi) ? hi : x);
}}
static inline uint32_t {p}_ratio_floor(uint32_t num, unsigned shift, uint32_t den)
{{
    /* floor(num * 2^shift / den), 0 <= num < den; the design keeps num << shift in 32 bits */
    return (uint32_t)(num << shift) / den;
}}
"""


def c_definitions(prefix: str) -> str:
    """The C text of every operation above, with ``prefix`` on each name."""
    return C_DEFINITIONS.format(p=prefix)
