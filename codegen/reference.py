"""Floating-point reference of the same chain, on the same stamps: exact division in the
interpolation, the CIC as its FIR taps in double precision, the unquantised IIR design, no
saturation. Its output is in output LSB (full-scale deviation = 2**15), so it compares directly
with the integer output; the difference of their SINADs is the implementation loss."""

from __future__ import annotations

import numpy as np
from scipy import signal

from . import cic
from .ir import Design
from .model import unwrap


def run(design: Design, stamps: np.ndarray) -> np.ndarray:
    fr, c = design.front, design.cic
    t = unwrap(stamps, fr.timer_bits).astype(np.float64)
    if t.size < 2:
        return np.zeros(0)
    t0 = t[0]
    t = t - t0
    count = int((t[-1] - 1) // fr.grid_ticks)
    g = fr.grid_ticks * np.arange(1, count + 1, dtype=np.float64)
    i = np.searchsorted(t, g, side="right")
    d = t[i] - t[i - 1]
    gap = d > fr.gap_ticks
    phase = (i - 1) + np.where(gap, 0.0, (g - t[i - 1]) / np.where(gap, 1.0, d))   # stamp intervals
    centre_step = design.if_hz / fr.prescale / design.rates.grid_hz
    x = np.where(gap, centre_step, np.diff(np.concatenate(([0.0], phase))))
    taps = cic.taps(c.order, c.ratio).astype(np.float64) / float(c.ratio) ** c.order
    y = signal.lfilter(taps, [1.0], x)[c.ratio - 1::c.ratio][c.order:]
    dev = y * fr.prescale * design.rates.grid_hz - design.if_hz
    v = dev / design.full_scale_hz
    for flt in design.filters:
        v = signal.sosfilt(np.array(flt.float_sos), v)
    return v * 32768.0
