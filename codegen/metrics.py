"""Quality figures of demodulated audio.

SINAD of a tone (method): the known tone frequency, a DC term and the tone's cosine and sine are
fitted by least squares and removed; the residual is Hann-windowed and its power spectrum (scaled
by the window's energy so that white noise keeps its power) is summed over [band_lo, band_hi].
SINAD = tone power / that in-band residual power. Harmonics inside the band count as distortion,
DC does not count (it is the tuning offset).
"""

from __future__ import annotations

import numpy as np


def tone_fit(x: np.ndarray, fs: float, tone_hz: float) -> tuple[float, np.ndarray]:
    """Least-squares fit of DC + a cos + b sin at tone_hz. Returns (tone power, residual)."""
    x = np.asarray(x, dtype=np.float64)
    n = np.arange(x.size)
    w = 2 * np.pi * tone_hz / fs
    basis = np.column_stack([np.ones(x.size), np.cos(w * n), np.sin(w * n)])
    coef, *_ = np.linalg.lstsq(basis, x, rcond=None)
    resid = x - basis @ coef
    return float((coef[1] ** 2 + coef[2] ** 2) / 2), resid


def band_power(x: np.ndarray, fs: float, lo: float, hi: float) -> float:
    """Mean power of x within [lo, hi] Hz from a Hann-windowed periodogram."""
    x = np.asarray(x, dtype=np.float64)
    win = np.hanning(x.size)
    spec = np.abs(np.fft.rfft(x * win)) ** 2
    f = np.fft.rfftfreq(x.size, 1 / fs)
    sel = (f >= lo) & (f <= hi)
    # one-sided: double every bin but DC and Nyquist; normalise by the window energy
    scale = 2.0 / (x.size * np.sum(win ** 2))
    return float(np.sum(spec[sel]) * scale)


def sinad_db(x: np.ndarray, fs: float, tone_hz: float, band_lo: float, band_hi: float) -> float:
    """SINAD in dB of a tone at tone_hz, noise and distortion counted over [band_lo, band_hi]."""
    p_tone, resid = tone_fit(x, fs, tone_hz)
    p_noise = band_power(resid, fs, band_lo, band_hi)
    return float(10 * np.log10(p_tone / p_noise))
