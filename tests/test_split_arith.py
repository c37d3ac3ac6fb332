"""The "mid" output arithmetic's split products (edgetally.fixedpoint.split_mac, split_round)
against exact rational arithmetic (fractions.Fraction: round half up of the full 48-bit sum), on
random and extreme words and coefficients inside the certificate's ranges (27-bit data, 16-bit
coefficients, Q8..Q16). The emitted C twin is checked bit for bit through the designs that use it
(tests/test_variants.py, tests/test_bitexact.py)."""

import math
from fractions import Fraction

import numpy as np

from edgetally.fixedpoint import split_mac, split_round

LIM = (1 << 26) - 1                  # the 27-bit data limit


def test_split_sum_rounds_like_the_full_sum():
    rng = np.random.default_rng(27)
    edges_x = [0, 1, -1, 255, 256, -256, LIM, -LIM, 1 << 16, -(1 << 16), (1 << 16) - 1]
    edges_c = [0, 1, -1, 32767, -32768, 16384, -16384]
    for n in range(20000):
        if n < 2000:
            xs = [edges_x[(n + j) % len(edges_x)] for j in range(5)]
            cs = [edges_c[(n * 3 + j) % len(edges_c)] for j in range(5)]
        else:
            xs = [int(v) for v in rng.integers(-LIM, LIM + 1, size=5)]
            cs = [int(v) for v in rng.integers(-32768, 32768, size=5)]
        shift = 8 + n % 9
        acc = (0, 0, 0)
        for c, x in zip(cs, xs):
            acc = split_mac(acc, c, x)
        full = sum(c * x for c, x in zip(cs, xs))
        assert acc[0] * 65536 + acc[1] * 256 + acc[2] == full
        want = math.floor(Fraction(full, 1 << shift) + Fraction(1, 2))      # round half up, exact
        assert split_round(acc, shift) == want
        # every partial sum inside an int32 (what the certificate bounds for the designs)
        assert all(abs(v) < 2**31 for v in acc)
