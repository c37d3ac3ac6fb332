"""Bit-exact integer model of a Design: the same arithmetic as the emitted C, stage by stage.

Every wrap, rounding and saturation goes through ``edgetally.fixedpoint``. The stamp front end and
the CIC are vectorised with numpy int64 (values stay far from 2**63: phase steps are below 2**31
and each integrator is reduced modulo 2**32 before the next); the recursive filters run sample by
sample on Python integers.

Contract shared with the C: stamps arrive in capture order; two consecutive stamps are less than
2**31 ticks apart once unwrapped (always true of 16-bit timers). Output samples do not depend on
how the stamps are split into blocks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .ir import Design
from .fixedpoint import MASK32, ratio_floor, rshr, sat, wrap_s32


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
    if t.size < 2:
        return np.zeros(0, dtype=np.int64), 0, 0
    count = (t[-1] - t[0] - 1) // fr.grid_ticks            # grid instants strictly before the last stamp
    g = t[0] + fr.grid_ticks * np.arange(1, count + 1, dtype=np.int64)
    i = np.searchsorted(t, g, side="right")                 # first stamp after each instant
    t_prev, d = t[i - 1], t[i] - t[i - 1]
    gap = d > fr.gap_ticks
    safe_d = np.where(gap, 1, d)
    frac = np.where(gap, 0, ratio_floor(np.where(gap, 0, g - t_prev), fr.phase_shift, safe_d))
    p = (i - 1).astype(np.int64) * (1 << fr.phase_shift) + frac
    step = wrap_s32(np.diff(np.concatenate(([0], p))))
    clamped = sat(step, 0, fr.x_limit)
    clamps = int(np.count_nonzero((clamped != step) & ~gap))
    x = np.where(gap, fr.x_centre, clamped)
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


def run(design: Design, stamps: np.ndarray) -> ModelRun:
    """Everything the emitted C produces for this stamp sequence, computed independently."""
    x, gaps, clamps = phase_steps(design, stamps)
    return ModelRun(out=post_chain(design, cic_decimate(design, x)), gaps=gaps, clamps=clamps, steps=x)
