"""The inputs of every simulated run: the standard test tone, and what the design's hardware makes of
IF edge times (capture stamps, software stamps read by an edge interrupt, or counts read on the grid).

The standard test: the band's test tone and level (``edgetally.standard``: 1 kHz at 70 % of
full-scale deviation when the band allows) with random start phase and modulation phase
(``seed``), exact edge times, the timer's quantisation and wrap with a random counter start value.
The first ``design.test.lead_s`` seconds (LEAD_S for bands of 200 Hz and more) let the filters
settle; checks compare them bit for bit but leave them out of quality figures. Used by verify, the
sweeps, the hostile scenarios, the listening clips, the emitted unit test and the target runs alike.
"""

from __future__ import annotations

import numpy as np

from .. import standard
from ..ir import Design, Topology
from . import signals

LEAD_S = standard.MIN_LEAD_S
DEFAULT_SEED = 20261202


def make_inputs(
    design: Design, seconds: float, seed: int, cnr_db: float | None = None, sig: signals.FmSignal | None = None
) -> np.ndarray:
    """What the design's hardware delivers for lead + seconds of the standard test tone (or of
    ``sig``): capture stamps, software stamps from an edge interrupt, or counts per grid instant."""
    rng = np.random.default_rng(seed)
    if sig is None:
        sig = standard_signal(design, rng)
    duration = design.test.lead_s + seconds
    times = signals.edge_times(sig, duration)
    if cnr_db is not None:
        times = signals.add_jitter(times, sig, cnr_db, rng)
    return hardware_inputs(design, times, duration, rng)


def standard_signal(design: Design, rng: np.random.Generator) -> signals.FmSignal:
    """The standard test tone for this design (its start and modulation phases drawn from rng)."""
    test = design.test
    return signals.test_tone(design.if_hz, design.full_scale_hz, test.level, test.tone_hz, rng)


def hardware_inputs(
    design: Design, times: np.ndarray, duration: float, rng: np.random.Generator, start: int | None = None
) -> np.ndarray:
    """What the design's hardware delivers for these IF edge times (s) over ``duration`` seconds:
    capture stamps of every prescale-th edge, software stamps read by an edge interrupt (with its
    latency), or counts read at each grid instant. The timer's or counter's start value is
    ``start``, or drawn from ``rng`` (an edge-counting interrupt starts at 0 unless given)."""
    fr, b = design.front, design.budget
    topo = design.topology
    if not design.stamps:
        if start is None:
            start = 0 if topo is Topology.EDGE_COUNT else int(rng.integers(0, 1 << fr.counter_bits))
        return signals.counts_at(times, design.rates.grid_hz, duration, fr.counter_bits, start)
    if start is None:
        start = int(rng.integers(0, 1 << fr.timer_bits))
    if topo is Topology.EDGE_STAMP:
        return signals.software_stamps(
            times, design.rates.timer_hz, fr.timer_bits, b.cpu_hz, b.isr_cycles // 2, b.irq_jitter_cycles, rng, start
        )
    return signals.capture(times[:: fr.prescale], design.rates.timer_hz, fr.timer_bits, start)
