"""How long the demodulator takes to return to normal output after a disturbance: the bound the
plan predicts, and the measurement the hostile scenarios make.

Prediction. After the last disturbed grid instant, the output error is the chain's response to
the error the disturbance put into the CIC's input. Every CIC input lies in [x_low, x_limit] or is
the centre step, so that error is at most E (in full-scale units) per instant, and the output error
n grid instants later is at most E times the tail sum_{j >= n} |h[j]| of the chain's impulse
response h (CIC and IIR sections at the grid rate, unit DC gain). The predicted recovery is the
first time that bound is under the threshold, plus the grid instants the front end needs to anchor
the phase again. The offset tracker is left out: it is a one-pole low-pass with its corner far
below the audio band, so what a disturbance leaves in it is a slow drift of the DC, which the
audio quality (measured from 20 Hz up) does not see; the measurement fits that drift away too.

Measurement. A model of the undisturbed output (a constant, the offset tracker's decay
(1 - 2**-dc_shift)**n from the end of the disturbance, and the test tone with free amplitude and
phase unless the scenario has no tone) is fitted by least squares on a stretch well after the
disturbance; the recovery is the time from the end of the
disturbance to the last output sample whose distance from that model exceeds the threshold.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import signal

from ..dsp import cic
from ..ir import Design

THRESHOLD_FS = 0.01  # "normal" = within 1 % of full scale of the undisturbed output (common practice, no source)
NOISE_SIGMAS = 6.0  # or six noise standard deviations, when the design's own noise is larger


def chain_impulse(design: Design) -> np.ndarray:
    """The CIC and the IIR sections as one impulse response at the grid rate, unit DC gain."""
    c = design.cic
    taps = cic.taps(c.order, c.ratio).astype(np.float64)
    taps /= taps.sum()
    sos = np.array([list(s.float_sos) for s in design.filters.sections])
    n_out = int(design.rates.out_hz * 2.0)  # two seconds: far beyond any design's memory
    imp = np.zeros(n_out)
    imp[0] = 1.0
    h_out = signal.sosfilt(sos, imp)
    up = np.zeros(n_out * c.ratio)
    up[:: c.ratio] = h_out
    return signal.fftconvolve(taps, up)[: up.size]


def step_overshoot(design: Design) -> float:
    """The chain's step response overshoot, a fraction of the step (0 for a monotone response): a
    jump of J in the frequency estimate (a phase jump of the tone after lost inputs, a substituted
    instant) moves the output at most about J times this past its undisturbed course."""
    step = np.cumsum(chain_impulse(design))
    return float(max(np.max(step) - 1.0, -np.min(step), 0.0))


def front_instants(design: Design) -> int:
    """Grid instants after the disturbance before the front end has a valid phase again: the
    stamp interval that ends it (two more for the four-stamp cubic fit) and the resync instant."""
    fr = design.front
    if fr.kind == "count":
        return 1
    f_lo = max(design.if_hz - design.full_scale_hz, design.if_hz / 4)
    per_stamp = fr.prescale * design.rates.grid_hz / f_lo
    stamps = 3 if fr.order == "cubic" else 1
    return math.ceil(stamps * per_stamp) + 1


def input_span_fs(design: Design) -> float:
    """The largest difference between two CIC inputs the front end can feed, in full-scale units."""
    fr = design.front
    low = fr.x_low if fr.kind == "stamp" else fr.diff_low << fr.step_shift
    # one full-scale deviation as a CIC input step: x_centre * full_scale / IF
    fs_step = fr.x_centre * design.full_scale_hz / design.if_hz
    return max(fr.x_limit - low, fr.x_limit - fr.x_centre, fr.x_centre - low) / fs_step


def predicted_recovery_s(design: Design, error_fs: float, threshold_fs: float) -> float:
    """The bound described in the module docstring, in seconds."""
    tail = _tail(design)
    ok = np.flatnonzero(error_fs * tail <= threshold_fs)
    n_grid = int(ok[0]) if ok.size else tail.size
    n_out = math.ceil((n_grid + front_instants(design)) / design.cic.ratio) + 1
    return n_out / design.rates.out_hz


_TAILS: dict = {}


def _tail(design: Design) -> np.ndarray:
    """sum_{j >= n} |h[j]| for every n (cached per design)."""
    key = design.to_json()
    if key not in _TAILS:
        h = np.abs(chain_impulse(design))
        _TAILS[key] = np.cumsum(h[::-1])[::-1]
    return _TAILS[key]


def residual(y: np.ndarray, basis: np.ndarray, fit_from: int) -> tuple[np.ndarray, float]:
    """Least-squares fit of basis columns to y[fit_from:]; returns (y - fit everywhere, rms of the
    residual on the fitted stretch)."""
    coef, *_ = np.linalg.lstsq(basis[fit_from:], y[fit_from:], rcond=None)
    e = y - basis @ coef
    return e, float(np.sqrt(np.mean(e[fit_from:] ** 2)))


def tone_basis(n: int, tone_hz: float, out_hz: float) -> np.ndarray:
    k = np.arange(n)
    w = 2 * np.pi * tone_hz / out_hz
    return np.column_stack([np.ones(n), np.cos(w * k), np.sin(w * k)])


def step_basis(n: int, start: int, dc_shift: int) -> np.ndarray:
    """A constant and the offset tracker's decay (1 - 2**-dc_shift)**(k - start) after ``start``."""
    k = np.arange(n) - start
    r = 1.0 - 2.0**-dc_shift
    return np.column_stack([np.ones(n), np.where(k >= 0, r ** np.maximum(k, 0), 0.0)])


def measured_recovery(e: np.ndarray, end: int, threshold: float, out_hz: float) -> float:
    """Seconds from output sample ``end`` to the last sample at or after it with |e| > threshold."""
    bad = np.flatnonzero(np.abs(e[end:]) > threshold)
    return 0.0 if bad.size == 0 else (int(bad[-1]) + 1) / out_hz
