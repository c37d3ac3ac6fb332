"""Bit-exact integer model of a Design: the same arithmetic as the emitted C, stage by stage.

Every wrap, rounding and saturation goes through ``edgetally.fixedpoint``. The stamp front end and
the CIC are vectorised with numpy int64 (values stay far from 2**63: phase steps are below 2**31
and each integrator is reduced modulo 2**32 before the next); the recursive filters run sample by
sample on Python integers.

Contract shared with the C: stamps arrive in capture order; two consecutive stamps are less than
2**31 ticks apart once unwrapped (always true of 16-bit timers); counts are read once per grid
instant. Output samples do not depend on how the inputs are split into blocks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .ir import Design
from .fixedpoint import MASK32, cubic_fraction, ratio_floor, rshr, sat, wrap_s32


@dataclass(frozen=True)
class ModelRun:
    out: np.ndarray          # output samples, int16 (or the output format's type)
    gaps: int                # grid instants that fell in a gap (carrier lost)
    clamps: int              # phase steps clamped to [0, x_limit]
    steps: np.ndarray        # the phase step per grid instant (CIC input), int64


def unwrap(stamps: np.ndarray, timer_bits: int) -> np.ndarray:
    """Stamps -> exact tick times, the first stamp's value as origin (the C keeps these mod 2**32)."""
    c = np.asarray(stamps, dtype=np.int64)
    if c.size == 0:
        return c
    delta = np.diff(c) & ((1 << timer_bits) - 1)
    return c[0] + np.concatenate(([0], np.cumsum(delta)))


def phase_steps(design: Design, stamps: np.ndarray) -> tuple[np.ndarray, int, int]:
    """The CIC input x[k] for every grid instant the stamps complete, with the gap and clamp counts."""
    fr = design.front
    t = unwrap(stamps, fr.timer_bits)
    cubic = fr.order == "cubic"
    first = 1 if cubic else 0                              # the grid starts at this stamp
    last = t.size - 2 if cubic else t.size - 1             # instants before this stamp are complete
    if last <= first:
        return np.zeros(0, dtype=np.int64), 0, 0
    count = (t[last] - t[first] - 1) // fr.grid_ticks      # instants strictly before t[last]
    g = t[first] + fr.grid_ticks * np.arange(1, count + 1, dtype=np.int64)
    i = np.searchsorted(t, g, side="right")                # the stamp after each instant
    t1, d = t[i - 1], t[i] - t[i - 1]
    gap = d > fr.gap_ticks
    safe_d = np.where(gap, 1, d)
    e1 = np.where(gap, 0, g - t1)
    if cubic:
        frac = cubic_fraction(e1, safe_d, np.where(gap, 1, t1 - t[i - 2]), np.where(gap, 1, t[i + 1] - t[i]),
                              fr.phase_shift, fr.delta_limit)
    else:
        frac = ratio_floor(e1, fr.phase_shift, safe_d)
    p = (i - 1).astype(np.int64) * (1 << fr.phase_shift) + np.where(gap, 0, frac)
    p_start = first * (1 << fr.phase_shift)                # the phase at the grid's first stamp
    step = wrap_s32(np.diff(np.concatenate(([p_start], p))))
    clamped = sat(step, 0, fr.x_limit)
    clamps = int(np.count_nonzero((clamped != step) & ~gap))
    x = np.where(gap, fr.x_centre, clamped)
    return x.astype(np.int64), int(np.count_nonzero(gap)), clamps


def count_steps(design: Design, counts: np.ndarray) -> tuple[np.ndarray, int, int]:
    """The CIC input for each count read after the first, with the gap and clamp counts."""
    fr = design.front
    c = np.asarray(counts, dtype=np.int64)
    if c.size < 2:
        return np.zeros(0, dtype=np.int64), 0, 0
    d = np.diff(c) & ((1 << fr.counter_bits) - 1)
    k = np.arange(d.size)
    last_nonzero = np.maximum.accumulate(np.where(d != 0, k, -1))
    gap = (d == 0) & (k - last_nonzero > fr.gap_run)
    clamped = sat(d, 0, fr.diff_limit)
    clamps = int(np.count_nonzero(clamped != d))
    x = np.where(gap, fr.x_centre, clamped << fr.step_shift)
    return x.astype(np.int64), int(np.count_nonzero(gap)), clamps


def cic_decimate(design: Design, x: np.ndarray) -> np.ndarray:
    """Hogenauer CIC with 32-bit wrapping registers; drops the first ``order`` outputs (warm-up)."""
    c = design.cic
    v = x.astype(np.int64)
    for _ in range(c.order):
        v = np.cumsum(v) & MASK32
    v = v[c.ratio - 1::c.ratio]
    for _ in range(c.order):
        v = (v - np.concatenate(([0], v[:-1]))) & MASK32
    return v[c.order:]


def post_chain(design: Design, y: np.ndarray) -> np.ndarray:
    """Centre removal, scaling, the IIR sections and the output format, one sample at a time."""
    sc, of = design.scale, design.output
    u = sat(rshr(wrap_s32(y.astype(np.int64) - sc.centre) * sc.mult, sc.shift), -sc.limit, sc.limit)
    v = [int(s) for s in u]
    for flt in design.filters:
        cb, lim = flt.coef_bits, flt.limit
        for sec in flt.sections:
            b0, b1, b2, a1, a2 = sec.b0, sec.b1, sec.b2, sec.a1, sec.a2
            x1 = x2 = y1 = y2 = 0
            res = []
            for xn in v:
                yn = sat(rshr(b0 * xn + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2, cb), -lim, lim)
                x2, x1, y2, y1 = x1, xn, y1, yn
                res.append(yn)
            v = res
    out = sat(rshr(np.array(v, dtype=np.int64), of.shift), of.lo, of.hi)
    return out.astype(np.int16)


def front_steps(design: Design, inputs: np.ndarray) -> tuple[np.ndarray, int, int]:
    """The front end of the design's kind: stamps or counts -> CIC input."""
    if design.front.kind == "stamp":
        return phase_steps(design, inputs)
    return count_steps(design, inputs)


def run(design: Design, inputs: np.ndarray) -> ModelRun:
    """Everything the emitted C produces for this input sequence (capture stamps, or counts read
    at each grid instant), computed independently."""
    x, gaps, clamps = front_steps(design, inputs)
    return ModelRun(out=post_chain(design, cic_decimate(design, x)), gaps=gaps, clamps=clamps, steps=x)
