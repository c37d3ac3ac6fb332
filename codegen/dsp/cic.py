"""CIC decimator arithmetic after Hogenauer (IEEE Trans. ASSP-29(2):155-162, 1981).

H(z) = ((1 - z^-RM) / (1 - z^-1))^N at the input rate, DC gain (RM)^N.
"""

from __future__ import annotations

import math
from math import comb

import numpy as np


def full_width(bin_bits: int, n: int, r: int, m: int = 1) -> int:
    """Register width that makes wrap-around harmless: Bin + ceil(N log2(RM)) (Hogenauer eq. 11)."""
    return bin_bits + math.ceil(n * math.log2(r * m) - 1e-12)


def _impulse_from_stage(j: int, n: int, r: int, m: int) -> list[int]:
    """Impulse response from the input of stage j (1..2N) to the output, Hogenauer eq. 9b/9c."""
    rm = r * m
    if j <= n:
        out = []
        for k in range((rm - 1) * n + j):
            out.append(sum((-1) ** i * comb(n, i) * comb(n - j + k - rm * i, k - rm * i) for i in range(k // rm + 1)))
        return out
    return [(-1) ** k * comb(2 * n + 1 - j, k) for k in range(2 * n + 2 - j)]


def pruned_widths(bin_bits: int, bout_bits: int, n: int, r: int, m: int = 1) -> list[int]:
    """Register widths of the 2N stages after Hogenauer's pruning (eq. 21), truncation at each stage.

    Returns 2N+1 widths: the N integrators, the N combs, and the output.
    """
    bmax = full_width(bin_bits, n, r, m)
    b_out_discard = bmax - bout_bits  # B_{2N+1}, bits dropped at the output
    sigma_t = math.sqrt((2.0 ** (2 * b_out_discard)) / 12.0)
    widths = []
    for j in range(1, 2 * n + 1):
        fj = math.sqrt(sum(h * h for h in _impulse_from_stage(j, n, r, m)))
        bj = math.floor(-math.log2(fj) + math.log2(sigma_t) + 0.5 * math.log2(6.0 / n))
        widths.append(bmax - max(bj, 0))
    widths.append(bout_bits)
    return widths


def response_db(f_over_fout, n: int, r: int, m: int = 1):
    """Gain in dB, normalised to 0 dB at DC, at frequencies given as fractions of the output rate."""
    f = np.asarray(f_over_fout, dtype=float)
    num = np.sin(np.pi * m * f)
    den = r * m * np.sin(np.pi * f / r)
    with np.errstate(divide="ignore", invalid="ignore"):
        h = np.where(f == 0, 1.0, num / np.where(den == 0, 1.0, den))
    return 20 * n * np.log10(np.abs(h) + 1e-300)


def taps(n: int, r: int, m: int = 1) -> np.ndarray:
    """The CIC's impulse response at the input rate (N boxcars of length RM convolved), as integers."""
    h = np.ones(1, dtype=np.int64)
    for _ in range(n):
        h = np.convolve(h, np.ones(r * m, dtype=np.int64))
    return h


def droop_db(f_hz: float, fout_hz: float, n: int, r: int) -> float:
    """CIC attenuation (positive dB means loss) at f_hz for output rate fout_hz."""
    return float(-response_db(f_hz / fout_hz, n, r))
