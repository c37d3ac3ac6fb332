"""Floating-point reference of the same chain, on the same inputs: exact division in the
interpolation (and the same cubic correction, unrounded), the CIC as its FIR taps in double
precision, the unquantised IIR design, no saturation. Its output is in output LSB (full-scale
deviation = 2**15), so it compares directly with the integer output. ``output_word`` rounds it to
the output word as the C's format does: the SINAD of that minus the C's is the implementation loss
(the format's own rounding is the user's choice, in both, not a loss of the arithmetic)."""

from __future__ import annotations

import numpy as np
from scipy import signal

from ..dsp import cic
from ..fixedpoint import wrap_bits
from ..ir import Design
from .model import unwrap, zero_run_gaps


def _stamp_steps(design: Design, stamps: np.ndarray) -> np.ndarray:
    """Phase steps (stamp intervals per grid period) for every grid instant the stamps complete."""
    fr = design.front
    t = unwrap(stamps, fr.timer_bits, fr.max_delta).astype(np.float64)
    cubic = fr.order == "cubic"
    first = 1 if cubic else 0
    last = t.size - 2 if cubic else t.size - 1
    if last <= first:
        return np.zeros(0)
    count = int((t[last] - t[first] - 1) // fr.grid_ticks)
    g = t[first] + fr.grid_ticks * np.arange(1, count + 1, dtype=np.float64)
    i = np.searchsorted(t, g, side="right")
    d = t[i] - t[i - 1]
    gap = d > fr.gap_ticks
    d = np.where(gap, 1.0, d)
    u = np.where(gap, 0.0, (g - t[i - 1]) / d)
    if cubic:
        dl0 = np.clip(d - (t[i - 1] - t[i - 2]), -fr.delta_limit, fr.delta_limit)
        dl1 = np.clip((t[i + 1] - t[i]) - d, -fr.delta_limit, fr.delta_limit)
        corr = u * (1 - u) * ((2 * dl0 + dl1) + (dl1 - dl0) * u) / 6.0
        u = np.where(gap, 0.0, np.clip((g - t[i - 1]) + corr, 0.0, d) / d)
    phase = (i - 1) + u
    step = np.diff(np.concatenate(([float(first)], phase)))
    return np.where(gap, design.if_hz / fr.prescale / design.rates.grid_hz, step)


def _count_steps(design: Design, counts: np.ndarray) -> np.ndarray:
    fr = design.front
    c = np.asarray(counts, dtype=np.int64)
    d = wrap_bits(np.diff(c), fr.counter_bits)
    gap = zero_run_gaps(d, fr.gap_run)
    return np.where(gap, design.if_hz / design.rates.grid_hz, d.astype(np.float64))


def run(design: Design, inputs: np.ndarray) -> np.ndarray:
    fr, c = design.front, design.cic
    x = _stamp_steps(design, inputs) if fr.kind == "stamp" else _count_steps(design, inputs)
    taps = cic.taps(c.order, c.ratio).astype(np.float64) / float(c.ratio) ** c.order
    y = signal.lfilter(taps, [1.0], x)[c.ratio - 1 :: c.ratio][c.order :]
    dev = y * fr.prescale * design.rates.grid_hz - design.if_hz
    u = dev / design.full_scale_hz
    # the offset tracker: dc[n+1] = dc[n] + (u[n] - dc[n]) / 2**dc_shift, audio u - dc
    alpha = 2.0**-design.scale.dc_shift
    dc = signal.lfilter([0.0, alpha], [1.0, alpha - 1.0], u)
    v = signal.sosfilt(np.array([list(s.float_sos) for s in design.filters.sections]), u - dc)
    return v * 2.0 ** (design.output.bits - 1) + design.output.mid


def output_word(design: Design, y: np.ndarray) -> np.ndarray:
    """The reference output rounded half up to the output word and held to its range (ir.OutputFormat)."""
    return np.clip(np.floor(np.asarray(y, dtype=np.float64) + 0.5), design.output.lo, design.output.hi)
