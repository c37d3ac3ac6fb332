"""Quality figures of demodulated audio: SINAD, SNR, THD and the level of a test tone.

Method (least squares at known frequencies, then a Hann periodogram of what is left):

- SINAD (``sinad_db``): a DC term and the tone's cosine and sine at the known tone frequency are
  fitted by least squares and removed; the residual is Hann-windowed and its power spectrum (scaled
  by the window's energy so that white noise keeps its power) is summed over [band_lo, band_hi]
  (``band_power``). SINAD = tone power / that in-band residual power. Harmonics inside the band count
  as distortion, DC does not count (it is the tuning offset).
- ``tone_analysis`` fits, in one least-squares solve, DC + the tone + its harmonics 2..``harmonics``
  (only those strictly below band_hi and below fs/2; a harmonic above Nyquist would alias and is
  not a harmonic of the output record). The fitted cosine and sine amplitudes a, b give each
  component's power (a^2 + b^2) / 2 and the tone's peak amplitude sqrt(a^2 + b^2).
  SNR = tone power / in-band power of the residual of this joint fit (harmonics removed too);
  THD = sum of the harmonic powers / tone power, in dB and as 100 sqrt(ratio) percent.
  Its SINAD is exactly ``sinad_db`` (the DC + tone fit above). The two fits give the same tone when
  the record holds a whole number of tone periods (the sinusoids are then orthogonal); otherwise the
  DC + tone fit also absorbs the harmonics' projection onto the tone, a relative change of order
  (harmonic / tone amplitude) / (N sin(pi f / fs)), which ``tone_power`` and ``level`` (joint fit)
  do not contain.

Float floor: a power below eps^2 times the record's mean square (eps = 2^-52, the spacing of doubles
near 1) is below what the samples themselves resolve, so every power in a dB ratio is raised to that
floor. A noiseless record therefore gives a large finite SINAD (at most about 313 dB, not inf or a
division by zero), and a record with no fitted harmonic a THD at the floor. A record of zeros has no
tone to measure: ``tone_analysis`` refuses it (ValueError), ``sinad_db`` (which verify and the
choice by simulation apply to whatever the C and the model give, a muted output included) returns
-inf.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

EPS = float(np.finfo(np.float64).eps)  # 2^-52


@dataclass(frozen=True)
class ToneFigures:
    """Figures of one test tone in a record (see the module docstring for the method)."""

    tone_power: float  # (a^2 + b^2) / 2 of the tone, joint fit
    level: float  # peak amplitude of the tone, joint fit
    sinad_db: float  # tone / in-band everything but tone and DC (== sinad_db())
    snr_db: float  # tone / in-band residual with the harmonics removed too
    thd_db: float  # sum of harmonic powers / tone power, dB
    thd_percent: float  # 100 sqrt(sum of harmonic powers / tone power)
    noise_power: float  # in-band residual power of the joint fit
    harmonic_power: float  # sum of the fitted harmonics' powers (0 when none fitted)
    harmonic_orders: tuple[int, ...]  # the harmonic orders that were fitted


def _sinusoids(n: int, fs: float, freqs: list[float]) -> np.ndarray:
    """Columns 1, cos(w n), sin(w n) for each frequency in turn."""
    k = np.arange(n)
    cols = [np.ones(n)]
    for f in freqs:
        w = 2 * np.pi * f / fs
        cols += [np.cos(w * k), np.sin(w * k)]
    return np.column_stack(cols)


def tone_fit(x: np.ndarray, fs: float, tone_hz: float) -> tuple[float, np.ndarray]:
    """Least-squares fit of DC + a cos + b sin at tone_hz. Returns (tone power, residual)."""
    x = np.asarray(x, dtype=np.float64)
    basis = _sinusoids(x.size, fs, [tone_hz])
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
    # one-sided: every selected bin is doubled, DC and Nyquist included (so a band reaching 0 Hz or
    # fs/2 counts those two bins twice; the audio bands used start above DC and end below fs/2);
    # normalised by the window energy so that white noise keeps its power
    scale = 2.0 / (x.size * np.sum(win**2))
    return float(np.sum(spec[sel]) * scale)


def sinad_db(x: np.ndarray, fs: float, tone_hz: float, band_lo: float, band_hi: float) -> float:
    """SINAD in dB of a tone at tone_hz, noise and distortion counted over [band_lo, band_hi]."""
    x = np.asarray(x, dtype=np.float64)
    floor = EPS**2 * (float(np.mean(x**2)) if x.size else 0.0)  # the float floor (module docstring)
    if floor == 0.0:  # a record of zeros (a muted output): no tone at all
        return -math.inf
    p_tone, resid = tone_fit(x, fs, tone_hz)
    p_noise = band_power(resid, fs, band_lo, band_hi)
    return float(10 * np.log10(max(p_tone, floor) / max(p_noise, floor)))


def _check_tone(fs: float, tone_hz: float) -> None:
    if not 0.0 < tone_hz < fs / 2:
        raise ValueError(f"tone_hz {tone_hz} must lie strictly between 0 and fs/2 = {fs / 2}")


def tone_analysis(
    x: np.ndarray, fs: float, tone_hz: float, band_lo: float, band_hi: float, harmonics: int = 5
) -> ToneFigures:
    """SINAD, SNR, THD and level of the tone at tone_hz, counted over [band_lo, band_hi]."""
    _check_tone(fs, tone_hz)
    if harmonics < 1:
        raise ValueError(f"harmonics must be >= 1 (1 = the tone alone), got {harmonics}")
    x = np.asarray(x, dtype=np.float64)
    mean_square = float(np.mean(x**2)) if x.size else 0.0
    if mean_square == 0.0:
        raise ValueError("the record is all zeros: there is no tone to measure")
    floor = EPS**2 * mean_square

    orders = tuple(k for k in range(2, harmonics + 1) if k * tone_hz < band_hi and k * tone_hz < fs / 2)
    basis = _sinusoids(x.size, fs, [tone_hz] + [k * tone_hz for k in orders])
    coef, *_ = np.linalg.lstsq(basis, x, rcond=None)
    powers = (coef[1::2] ** 2 + coef[2::2] ** 2) / 2  # tone, then each harmonic
    p_tone, p_harm = float(powers[0]), float(np.sum(powers[1:]))
    p_noise = band_power(x - basis @ coef, fs, band_lo, band_hi)

    p_tone1, resid1 = tone_fit(x, fs, tone_hz)  # the SINAD of sinad_db, floored
    p_nad = band_power(resid1, fs, band_lo, band_hi)
    return ToneFigures(
        tone_power=p_tone,
        level=math.sqrt(2 * p_tone),
        sinad_db=float(10 * np.log10(max(p_tone1, floor) / max(p_nad, floor))),
        snr_db=float(10 * np.log10(max(p_tone, floor) / max(p_noise, floor))),
        thd_db=float(10 * np.log10(max(p_harm, floor) / max(p_tone, floor))),
        thd_percent=100 * math.sqrt(p_harm / max(p_tone, floor)),
        noise_power=p_noise,
        harmonic_power=p_harm,
        harmonic_orders=orders,
    )
