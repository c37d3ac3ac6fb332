"""Counting schemes: noise prediction and CPU load. Only the timestamp scheme exists so far.

Noise model (white-quantiser, see DESIGN.md section 4): the phase reconstructed at each grid
instant carries a white error of variance sigma^2 (cycles^2). Differencing turns it into a
frequency error with the two-sided PSD 2 sigma^2 fs (1 - cos(2 pi f / fs)) Hz^2/Hz at the grid
rate fs; the CIC shapes it and folds it to the output rate; what lands in the audio band is the
noise. Two sources are modelled:

- timer quantisation: each stamp is off by a uniform error of one tick, so the interpolated phase
  error has variance (2/3) E[f^2] / (12 f_timer^2) (two stamps, interpolation weights w, 1-w with
  E[w^2 + (1-w)^2] = 2/3). Measured on the examples, this is 1.5 to 2.5 dB pessimistic (the
  stamp errors of a slowly swept period are not independent) and still fair a little above the
  edge rate.
- interpolation curvature: linear interpolation of a phase whose slope changes within one stamp
  interval D errs by (f'/2) tau (D - tau) at offset tau; for tau uniform on [0, D) its standard
  deviation is D^2 / sqrt(180) * f' / 2 (our derivation; it limits narrowband, low-IF links).
  The offsets of successive grid instants are not independent, and measured noise stops falling
  with the grid rate beyond about 2/3 of the edge rate, so the level is held there.

These are planning figures; verify measures the truth by simulation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from . import cic
from .cores import Core

TEST_TONE_HZ = 1000.0
TEST_LEVEL = 0.7           # fraction of full-scale deviation for the standard test tone
BAND_LOW_HZ = 20.0         # SINAD band starts here: below is DC, which carries the tuning offset


@dataclass(frozen=True)
class Prediction:
    sinad_db: float            # all modelled sources together
    timer_sinad_db: float      # timer quantisation alone
    curvature_sinad_db: float  # interpolation curvature alone
    output_sinad_db: float     # the 16-bit output word alone


def _post_gain2(sos_list, f: np.ndarray, out_hz: float) -> np.ndarray:
    """|H(f)|^2 of the output-rate filters (float designs) in cascade."""
    g = np.ones_like(f, dtype=float)
    for sos in sos_list:
        _, h = signal.sosfreqz(np.asarray(sos), worN=f, fs=out_hz)
        g = g * np.abs(h) ** 2
    return g


def _band_noise(sigma2: float, grid_hz: float, out_hz: float, r: int, n: int, band_hz: float,
                post_sos=()) -> float:
    """In-band noise power (Hz^2) at the output from white phase noise sigma2 per grid sample.

    After decimation by R the output PSD at fo is the sum of the CIC-shaped input PSD over the R
    images fo + m * out_hz, m = 0..R-1 (one period of the grid-rate spectrum); the band power is
    twice the integral over [BAND_LOW_HZ, band_hz] (two-sided PSD)."""
    f = np.linspace(BAND_LOW_HZ, band_hz, 2001)
    total = np.zeros_like(f)
    for m in range(r):
        fa = f + m * out_hz
        h2 = 10 ** (cic.response_db(fa / out_hz, n, r) / 10)
        total += h2 * 2 * sigma2 * grid_hz * (1 - np.cos(2 * np.pi * fa / grid_hz))
    return 2.0 * float(np.trapezoid(total * _post_gain2(post_sos, f, out_hz), f))


def predict_timestamp(*, if_hz: float, full_scale_hz: float, timer_hz: float, grid_hz: float, out_hz: float,
                      r: int, n: int, band_hz: float, prescale: int = 1, post_sos=()) -> Prediction:
    """Predicted SINAD of the standard test (1 kHz tone at 70 % of full-scale deviation)."""
    dev = TEST_LEVEL * full_scale_hz
    ef2 = if_hz ** 2 + 0.5 * dev ** 2                        # E[f^2] for a sinusoidal deviation
    edge_hz = if_hz / prescale
    sigma_t2 = ef2 / (12.0 * timer_hz ** 2)                  # one stamp, in cycles^2
    sig_timer = (2.0 / 3.0) * sigma_t2
    d = prescale / if_hz                                     # stamp interval (s)
    fdot_rms2 = (2 * math.pi * TEST_TONE_HZ * dev) ** 2 / 2  # mean square of f' (Hz/s)^2
    sig_curv = fdot_rms2 * d ** 4 / 180.0 / 4.0
    sig_curv *= max(1.0, grid_hz / ((2.0 / 3.0) * edge_hz))
    tone = np.array([TEST_TONE_HZ])
    s_pow = dev ** 2 / 2 * 10 ** (cic.response_db(TEST_TONE_HZ / out_hz, n, r) / 10) \
        * float(_post_gain2(post_sos, tone, out_hz)[0])
    lsb = full_scale_hz / 32768.0
    n_out = lsb ** 2 / 12.0 * (band_hz - BAND_LOW_HZ) / (out_hz / 2)
    n_timer = _band_noise(sig_timer, grid_hz, out_hz, r, n, band_hz, post_sos)
    n_curv = _band_noise(sig_curv, grid_hz, out_hz, r, n, band_hz, post_sos)

    def db(noise):
        return 10 * math.log10(s_pow / noise) if noise > 0 else float("inf")

    return Prediction(db(n_timer + n_curv + n_out), db(n_timer), db(n_curv), db(n_out))


@dataclass(frozen=True)
class Load:
    per_stamp: int       # cycles for each stamp (ISR share included when there is no DMA)
    per_grid: int        # cycles per grid instant
    per_output: int      # cycles per output sample
    fraction: float      # of the CPU at the spec's clock, at the highest edge rate


def timestamp_load(core: Core, *, cpu_hz: float, isr_cycles: int, dma: bool, edge_hz_max: float,
                   grid_hz: float, out_hz: float, n: int, sections: int) -> Load:
    """Estimated cycles of the timestamp scheme (figures from the core profile: estimates)."""
    op = core.op_cycles
    per_stamp = 10 * op + (0 if dma else isr_cycles + 8 * op)   # unwrap + bracket test (+ ISR queue)
    per_grid = core.div32_cycles + (14 + 2 * n) * op            # interpolation, clamp, integrators
    per_output = (4 * n + 12) * op + core.mac64_cycles * (1 + 5 * sections) + 10 * op * sections
    cycles = edge_hz_max * per_stamp + grid_hz * per_grid + out_hz * per_output
    return Load(per_stamp, per_grid, per_output, cycles / cpu_hz)
