"""Bit-exact integer model of a Design: the same arithmetic as the emitted C, stage by stage.

Every wrap, rounding and saturation goes through ``edgetally.fixedpoint``. The stamp front end and
the CIC are vectorised with numpy int64 (values stay far from 2**63: phase steps are below 2**31
and each integrator is reduced modulo 2**32 before the next); the recursive filters run sample by
sample on Python integers.

Contract shared with the C: inputs are processed in order; counts are read once per grid instant.
Output samples do not depend on how the inputs are split into blocks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..ir import Design
from .datamodel import DataRun
from . import datamodel
from ..fixedpoint import (
    cubic_fraction,
    division_quotient,
    interval_reciprocal,
    reciprocal_quotient,
    rshr,
    sat,
    section_step,
    shaped_step,
    split_scale,
    squelch_level,
    wrap_bits,
    wrap_s32,
)


@dataclass(frozen=True)
class ModelRun:
    out: np.ndarray  # output samples, int16 or uint16 (the output format's type)
    gaps: int  # grid instants with no carrier (gaps, lost inputs, resyncs)
    clamps: int  # steps outside the legal range, muted (fed the centre step)
    saturations: int  # internal data nodes that saturated
    clips: int  # output samples clipped to the output range
    steps: np.ndarray  # the phase step per grid instant (CIC input), int64
    # run() sets both; None only in results made without the squelch
    squelch_open: np.ndarray = None  # type: ignore[assignment]   # per output sample: the squelch passed it
    unmuted: np.ndarray = None  # type: ignore[assignment]        # the output as it would be with the squelch open
    data: DataRun | None = None  # the FSK data path's bits and frames (data designs)


def unwrap(stamps: np.ndarray, timer_bits: int, max_delta: int) -> np.ndarray:
    """Stamps -> tick times, the first stamp's value as origin (the C keeps these mod 2**32); each
    interval is the timer difference modulo 2**timer_bits, taken as at most max_delta."""
    c = np.asarray(stamps, dtype=np.int64)
    if c.size == 0:
        return c
    delta = np.minimum(wrap_bits(np.diff(c), timer_bits), max_delta)
    return c[0] + np.concatenate(([0], np.cumsum(delta)))


def lost_flags(size: int, lost) -> np.ndarray:
    """Boolean per input: True where inputs were lost just before it (the first input can have no
    loss before it: it starts the stream)."""
    flags = np.zeros(size, dtype=bool)
    if lost is not None and size:
        idx = np.asarray(lost, dtype=np.int64)
        if idx.size and (idx.min() < 0 or idx.max() >= size):
            raise ValueError("a lost-input index lies outside the inputs")
        flags[idx] = True
        flags[0] = False
    return flags


def in_range(step: np.ndarray, low: int, high: int) -> np.ndarray:
    """True where a step is one this carrier can make."""
    return (step >= low) & (step <= high)


def phase_steps(design: Design, stamps: np.ndarray, lost=None) -> tuple[np.ndarray, int, int, np.ndarray]:
    """The CIC input x[k] for every grid instant the stamps complete, with the gap and
    out-of-range counts and which instants were muted. ``lost``: indices of stamps that follow lost stamps (see ``run``)."""
    fr = design.front
    t = unwrap(stamps, fr.timer_bits, fr.max_delta)
    cubic = fr.order == "cubic"
    first = 1 if cubic else 0  # the grid starts at this stamp
    last = t.size - 2 if cubic else t.size - 1  # instants before this stamp are complete
    if last <= first:
        return np.zeros(0, dtype=np.int64), 0, 0, np.zeros(0, dtype=bool)
    count = (t[last] - t[first] - 1) // fr.grid_ticks  # instants strictly before t[last]
    g = t[first] + fr.grid_ticks * np.arange(1, count + 1, dtype=np.int64)
    i = np.searchsorted(t, g, side="right")  # the stamp after each instant
    t1, d = t[i - 1], t[i] - t[i - 1]
    lostf = lost_flags(t.size, lost)
    gap = d > fr.gap_ticks
    if cubic:
        # the four stamps of an instant span the intervals ending at stamps i-1, i and i+1
        gap |= lostf[i - 1] | lostf[i] | lostf[i + 1]
        proc = i + 1  # the stamp whose arrival computes the instant
    else:
        gap |= lostf[i]
        proc = i
    # a resync: the first valid instant after a gap instant, or after a lost stamp consumed since
    # the previous instant was computed (stamps proc[k-1] .. proc[k] - 1)
    cum = np.cumsum(lostf)
    prev_proc = np.concatenate(([1], proc[:-1]))
    lost_between = cum[proc - 1] - cum[prev_proc - 1] > 0
    prev_gap = np.concatenate(([False], gap[:-1]))
    resync = ~gap & (prev_gap | lost_between)
    safe_d = np.where(gap, 1, d)
    e1 = np.where(gap, 0, g - t1)
    plan = design.recip
    if plan is not None:
        k, dn, r = interval_reciprocal(safe_d, plan)  # the C computes it once per interval
        quot = reciprocal_quotient(k, dn, r, plan)
    else:
        quot = division_quotient(safe_d, fr.phase_shift)
    if cubic:
        frac = cubic_fraction(
            e1,
            safe_d,
            np.where(gap, 1, t1 - t[i - 2]),
            np.where(gap, 1, t[i + 1] - t[i]),
            fr.delta_limit,
            fr.phase_shift,
            quot,
        )
    else:
        frac = quot(e1, 0)
    p = (i - 1).astype(np.int64) * (1 << fr.phase_shift) + np.where(gap, 0, frac)
    p_start = first * (1 << fr.phase_shift)  # the phase at the grid's first stamp
    step = wrap_s32(np.diff(np.concatenate(([p_start], p))))
    ok = in_range(step, fr.x_low, fr.x_limit)
    muted = gap | resync | ~ok
    clamps = int(np.count_nonzero(~ok & ~gap & ~resync))
    x = np.where(muted, fr.x_centre, step)
    return x.astype(np.int64), int(np.count_nonzero(gap | resync)), clamps, muted


def zero_run_gaps(d: np.ndarray, gap_run: int) -> np.ndarray:
    """True where a count difference is zero and ends a run of more than gap_run zeros (carrier
    lost): the C's saturating zero-run counter."""
    k = np.arange(d.size)
    last_nonzero = np.maximum.accumulate(np.where(d != 0, k, -1))
    return (d == 0) & (k - last_nonzero > gap_run)


def count_steps(design: Design, counts: np.ndarray, lost=None) -> tuple[np.ndarray, int, int, np.ndarray]:
    """The CIC input for each count read after the first, with the gap and out-of-range counts and
    which instants were muted.
    ``lost``: indices of counts that follow lost counts (their difference spans the loss)."""
    fr = design.front
    c = np.asarray(counts, dtype=np.int64)
    if c.size < 2:
        return np.zeros(0, dtype=np.int64), 0, 0, np.zeros(0, dtype=bool)
    d = wrap_bits(np.diff(c), fr.counter_bits)
    gap = zero_run_gaps(d, fr.gap_run) | lost_flags(c.size, lost)[1:]
    ok = in_range(d, fr.diff_low, fr.diff_limit)
    clamps = int(np.count_nonzero(~ok & ~gap))
    x = np.where(gap | ~ok, fr.x_centre, d << fr.step_shift)
    return x.astype(np.int64), int(np.count_nonzero(gap)), clamps, gap | ~ok


def squelch_gates(design: Design, x: np.ndarray, muted: np.ndarray) -> np.ndarray:
    """Whether the noise squelch is open after each CIC output (the warm-up ones included), from the
    CIC input and its muted instants (see ``ir.Squelch``)."""
    sq, r = design.squelch, design.cic.ratio
    c = design.front.x_centre
    xs = np.concatenate(([c, c], np.asarray(x, dtype=np.int64)))
    h = wrap_s32(xs[2:] - 2 * xs[1:-1] + xs[:-2])
    e = np.where(muted, sq.penalty, np.abs(h))
    n = e.size // r
    sums = wrap_bits(e[: n * r].reshape(n, r).sum(axis=1), 32)
    gates = np.zeros(n, dtype=bool)
    lvl, is_open = sq.cap, False
    for j, a in enumerate(sums.tolist()):
        lvl = squelch_level(lvl, a, sq.shift, sq.cap)
        if is_open:
            is_open = not lvl > sq.close_level
        else:
            is_open = lvl < sq.open_level
        gates[j] = is_open
    return gates


def cic_decimate(design: Design, x: np.ndarray) -> np.ndarray:
    """Hogenauer CIC with 32-bit wrapping registers; drops the first ``order`` outputs (warm-up)."""
    c = design.cic
    v = x.astype(np.int64)
    for _ in range(c.order):
        v = wrap_bits(np.cumsum(v), 32)
    v = v[c.ratio - 1 :: c.ratio]
    for _ in range(c.order):
        v = wrap_bits(v - np.concatenate(([0], v[:-1])), 32)
    return v[c.order :]


def post_chain(design: Design, y: np.ndarray, taps: list | None = None) -> tuple[np.ndarray, int, int]:
    """Centre removal, scaling, the offset tracker, the IIR sections and the output format, one
    sample at a time. Returns (output samples, saturations at internal nodes, clipped outputs).
    ``taps``: a list that gets the data word after the offset tracker, per sample (the data path's input)."""
    sc, f, of = design.scale, design.filters, design.output
    lim, cb = f.limit, f.coef_bits
    yc = wrap_s32(y.astype(np.int64) - sc.centre)
    raw = split_scale(yc, sc.mult, sc.shift) if sc.product in ("split", "split_low") else rshr(yc * sc.mult, sc.shift)
    u_all = sat(raw, -lim, lim)
    sats = int(np.count_nonzero(u_all != raw))
    coefs = [(s.b0, s.b1, s.b2, s.a1, s.a2) for s in f.sections]
    fb = [(*c, s.k1, s.k2) for c, s in zip(coefs, f.sections, strict=True)]
    state = [[0, 0, 0, 0] for _ in coefs]
    errors = [[0, 0] for _ in coefs]
    narrow_acc, split = f.acc_bits == 32, f.acc_bits == 48
    dc_acc = 0
    out = np.empty(u_all.size, dtype=np.int64)
    clips = 0
    for n, u in enumerate(u_all.tolist()):
        dc = rshr(dc_acc, sc.dc_shift)
        dc_acc += u - dc
        v = u - dc
        if v > lim or v < -lim:
            sats += 1
            v = sat(v, -lim, lim)
        if taps is not None:
            taps.append(v)
        for c, cf, z, e in zip(coefs, fb, state, errors, strict=True):
            if f.shaped:
                v, saturated = shaped_step(cf, z, e, v, cb, lim)
            else:
                v, saturated = section_step(c, z, v, cb, lim, narrow_acc, split)
            sats += saturated
        o = v * of.lmul
        if of.rshift:
            o = rshr(o, of.rshift)
        o += of.mid
        if o < of.lo or o > of.hi:
            clips += 1
        out[n] = sat(o, of.lo, of.hi)
    return out.astype(np.int16 if of.ctype == "int16_t" else np.uint16), sats, clips


def front_steps(design: Design, inputs: np.ndarray, lost=None) -> tuple[np.ndarray, int, int, np.ndarray]:
    """The front end of the design's kind: stamps or counts -> CIC input (with the muted instants)."""
    if design.front.kind == "stamp":
        return phase_steps(design, inputs, lost)
    return count_steps(design, inputs, lost)


def run(design: Design, inputs: np.ndarray, lost=None) -> ModelRun:
    """Everything the emitted C produces for this input sequence (capture stamps, or counts read
    at each grid instant), computed independently. ``lost`` lists the indices of inputs before
    which inputs were lost (the C is told by <name>_inputs_lost(), or finds its queue full)."""
    x, gaps, clamps, muted = front_steps(design, inputs, lost)
    taps: list | None = [] if design.data is not None else None
    out, sats, clips = post_chain(design, cic_decimate(design, x), taps)
    data = datamodel.run(design, np.array(taps, dtype=np.int64)) if taps is not None else None
    gates = squelch_gates(design, x, muted)[design.cic.order :][: out.size]
    muted = np.where(gates, out, design.output.mid).astype(out.dtype)
    return ModelRun(
        out=muted,
        gaps=gaps,
        clamps=clamps,
        saturations=sats,
        clips=clips,
        steps=x,
        squelch_open=gates,
        unmuted=out,
        data=data,
    )


def service_due(done: int, service_every: int, stall: tuple[int, int] | None = None) -> bool:
    """Whether the service loop runs after ``done`` inputs: after every ``service_every`` of them,
    except after inputs a..b-1 (0-based) when stall = (a, b), a late service loop."""
    return done % service_every == 0 and not (stall and stall[0] < done <= stall[1])


def queue_kept(n: int, service_every: int, queue_len: int, stall: tuple[int, int] | None = None) -> np.ndarray:
    """Which of n inputs the C's ISR queue keeps when the service loop empties it after every
    ``service_every`` inputs (not after inputs a..b-1 when stall = (a, b)): an input that finds
    queue_len inputs waiting is dropped. Returns a boolean mask over the inputs."""
    keep = np.zeros(n, dtype=bool)
    waiting = 0
    for k in range(n):
        if waiting < queue_len:
            keep[k] = True
            waiting += 1
        if service_due(k + 1, service_every, stall):
            waiting = 0
    return keep


def lost_after(keep: np.ndarray) -> np.ndarray:
    """Indices, in the kept stream, of the inputs that follow dropped ones."""
    starts = np.flatnonzero(keep & np.concatenate(([False], ~keep[:-1])))
    return (np.cumsum(keep) - 1)[starts]


def clocked(design: Design, inputs: np.ndarray, calls, lost=None) -> tuple[np.ndarray, list[int]]:
    """What the C's time-driven entry <name>_advance(now) does to a stamp stream, as a stream for
    ``run``: ``calls`` lists (k, now), a call made after the first k inputs with the timer's value
    ``now`` (calls in order of k). While the last stamp (real or virtual) lies more than gap_ticks
    and less than half the timer's range before now (or, while no input has come since the last
    virtual stamp, any time before now), a call adds a virtual stamp max_delta after it, or at now
    when that is nearer; the input after each virtual stamp follows a loss. Returns the
    stream and the indices (in it) of the inputs that follow losses (``lost`` remapped, plus those)."""
    fr = design.front
    mask, half = (1 << fr.timer_bits) - 1, 1 << (fr.timer_bits - 1)
    x = np.asarray(inputs, dtype=np.int64)
    virtual: list[tuple[int, int]] = []  # (original index it precedes, value)
    last, last_k, in_loss = None, 0, False
    for k, now in calls:
        if k > last_k or last is None:
            last = int(x[k - 1]) if k > 0 else None
            last_k, in_loss = k, False
        while last is not None:
            e = (int(now) - last) & mask
            if e == 0 or e >= half or (e <= fr.gap_ticks and not in_loss):
                break
            last = (last + fr.max_delta) & mask if e > fr.max_delta else int(now) & mask
            virtual.append((k, last))
            in_loss = True
    if not virtual:
        return x, sorted(int(i) for i in (lost if lost is not None else ()))
    at = np.array([k for k, _ in virtual], dtype=np.int64)
    out = np.insert(x, at, [v for _, v in virtual])
    new_pos = np.arange(x.size) + np.searchsorted(at, np.arange(x.size), side="right")
    v_pos = at + np.arange(at.size)  # where each virtual stamp landed
    after = {int(p) + 1 for p in v_pos if p + 1 < out.size}
    after |= {int(new_pos[i]) for i in (lost if lost is not None else ())}
    return out.astype(x.dtype), sorted(after)
