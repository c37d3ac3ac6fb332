"""Hostile conditions: named scenarios that disturb the input (signal loss, noise bursts, timer
wrap at every alignment, lost inputs, a frequency step between the band edges), each run through
the emitted C and the integer model, with what must hold: no overflow, the right status flag,
output muted or held rather than garbage, and recovery within the predicted time."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from ..check import model
from . import recovery
from ..planner import schemes
from ..stimulus import signals
from ..fixedpoint import wrap_bits
from ..ir import Design, Topology


@dataclass(frozen=True)
class ScenarioResult:
    name: str  # "signal-loss", "noise-burst", "timer-wrap", "inputs-lost", "frequency-step"
    description: str  # one line: what was done to the input
    bit_exact: bool  # C == model on the disturbed input, every sample
    overflow_free: bool  # no saturation inside the chain (the certificate held)
    flag: str  # the status the C must raise ("carrier lost", "overrun", "out of range", "none")
    flag_raised: bool  # raised when expected (or, for "none", nothing raised)
    output_ok: bool  # muted or held during the disturbance, no wild samples
    output_note: str  # what the output did, in words
    recovery_ms: float  # from the end of the disturbance to normal output (measured)
    predicted_recovery_ms: float  # what the plan predicts
    trace_t_ms: tuple[float, ...] = ()  # a decimated view of the output around the disturbance, for plots
    trace_out: tuple[float, ...] = ()  # the C output there (fraction of full scale)
    trace_clean: tuple[float, ...] = ()  # the undisturbed output there
    span_ms: tuple[float, float] = (0.0, 0.0)  # where the disturbance lies in the trace

    @property
    def passed(self) -> bool:
        return (
            self.bit_exact
            and self.overflow_free
            and self.flag_raised
            and self.output_ok
            and self.recovery_ms <= self.predicted_recovery_ms
        )

    def to_dict(self) -> dict:
        d = asdict(self)
        d["passed"] = self.passed
        return d


SCENARIOS = ("signal-loss", "noise-burst", "timer-wrap", "inputs-lost", "frequency-step")
LEAD_S = 0.1  # filters settle (as verify's standard test)
PRE_S = 0.05  # undisturbed signal before the disturbance
GUARD_S = 0.01  # between the predicted recovery and the fitted stretch
FIT_S = 0.1  # the stretch the undisturbed output is fitted on
BURST_RATE = 10.0  # noise-burst edges per second, in multiples of the IF
STEP_LEVEL = 0.7  # frequency steps between IF -+ this fraction of full-scale deviation ...
STEP_HOLD_S = 0.01  # ... held this long each (square-wave FSK), the last one held to the end
WRAP_PLACES = 16  # inputs at which the timer (or counter) is made to wrap, two ways each
SERVICE_FRACTION = 2  # ISR designs: the service loop runs every queue_len / this inputs ...
STALL_QUEUES = 3  # ... and stalls for this many queues' worth of inputs (inputs-lost)
TRACE_POINTS = 400
MUTE_FS = 0.02  # "muted": within 2 % of full scale (common practice, no source)
RATE_SLACK_S = 0.01  # the output rate through a loss: within a sample per 10 ms (issue 12)


@dataclass(frozen=True)
class Options:
    loss_ms: float = 20.0  # signal-loss: no edges for this long
    burst_ms: float = 2.0  # noise-burst: extra edges for this long
    lost_inputs: int = 256  # inputs-lost, DMA designs: one buffer's worth of inputs dropped
    seed: int = 20261202


@dataclass
class _Case:
    """One disturbed run: what the hardware delivered, and where the disturbance lies in it."""

    inputs: np.ndarray  # what the C is given (the kept inputs)
    lost: list  # indices in inputs that follow lost ones
    start: int  # first disturbed input
    end: int  # first input after the disturbance
    description: str
    error_fs: float  # largest CIC-input error the disturbance can make (full-scale units)
    stall: tuple | None = None  # ISR designs: drive the ISR and a late service loop instead
    all_inputs: np.ndarray | None = None
    step: bool = False  # the undisturbed model is a step, not the tone
    clock: list | None = None  # stamp designs: (k, now, t) calls of <name>_advance (see _clock)
    span_s: tuple | None = None  # (start, end) of the disturbance in seconds, when the clock runs


def _clock(design: Design, times: np.ndarray, total: float, start: int) -> list:
    """The calls of <name>_advance a service loop makes once per output period: (inputs passed in
    before it, the timer's value read then, the time). An input is passed in once its stamp exists:
    at its edge for capture, after the interrupt's latest latency for an edge interrupt."""
    fr, b = design.front, design.budget
    stamped = times[:: fr.prescale]
    if design.topology is Topology.EDGE_STAMP:
        stamped = stamped + (b.isr_cycles // 2 + b.irq_jitter_cycles) / b.cpu_hz
    t = np.arange(1, int(total * design.rates.out_hz) + 1) / design.rates.out_hz
    k = np.searchsorted(stamped, t, side="right")
    now = wrap_bits(np.floor(t * design.rates.timer_hz).astype(np.int64) + start, fr.timer_bits)
    return [(int(a), int(b_), float(c)) for a, b_, c in zip(k, now, t, strict=True)]


def _edges(design: Design, seconds: float, rng: np.random.Generator) -> np.ndarray:
    from ..stimulus.inputs import standard_signal

    return signals.edge_times(standard_signal(design, rng), seconds)


def _first_input_at(design: Design, times: np.ndarray, t: float) -> int:
    """Index of the first input the hardware delivers at or after time t."""
    if design.front.kind == "count":
        return int(math.ceil(t * design.rates.grid_hz))
    return int(np.searchsorted(times[:: design.front.prescale], t))


def _hardware(design: Design, times, duration, seed, start=None):
    from ..stimulus.inputs import hardware_inputs

    return hardware_inputs(design, times, duration, np.random.default_rng(seed + 1), start)


def _case_loss(design: Design, opt: Options, post: float) -> _Case:
    rng = np.random.default_rng(opt.seed)
    t0, dur = LEAD_S + PRE_S, opt.loss_ms / 1000
    total = t0 + dur + post
    times = _edges(design, total, rng)
    kept = times[(times < t0) | (times >= t0 + dur)]
    e = recovery.input_span_fs(design)
    if design.stamps:  # the service loop's clock keeps the output rate (<name>_advance)
        start = int(np.random.default_rng(opt.seed + 1).integers(0, 1 << design.front.timer_bits))
        return _Case(
            _hardware(design, kept, total, opt.seed, start),
            [],
            _first_input_at(design, kept, t0),
            _first_input_at(design, kept, t0 + dur),
            f"no edges for {opt.loss_ms:g} ms (the service loop calls advance every output period)",
            e,
            clock=_clock(design, kept, total, start),
            span_s=(t0, t0 + dur),
        )
    return _Case(
        _hardware(design, kept, total, opt.seed),
        [],
        _first_input_at(design, kept, t0),
        _first_input_at(design, kept, t0 + dur),
        f"no edges for {opt.loss_ms:g} ms",
        e,
    )


def _case_burst(design: Design, opt: Options, post: float) -> _Case:
    rng = np.random.default_rng(opt.seed)
    t0, dur = LEAD_S + PRE_S, opt.burst_ms / 1000
    total = t0 + dur + post
    times = _edges(design, total, rng)
    extra = rng.uniform(t0, t0 + dur, size=rng.poisson(BURST_RATE * design.if_hz * dur))
    merged = np.sort(np.concatenate([times, extra]))
    e = recovery.input_span_fs(design)
    return _Case(
        _hardware(design, merged, total, opt.seed),
        [],
        _first_input_at(design, merged, t0),
        _first_input_at(design, merged, t0 + dur),
        f"random extra edges at {BURST_RATE:g} times the IF rate for {opt.burst_ms:g} ms",
        e,
    )


def _case_lost(design: Design, opt: Options, post: float) -> _Case:
    rng = np.random.default_rng(opt.seed)
    t0 = LEAD_S + PRE_S
    total = t0 + post + 0.02
    times = _edges(design, total, rng)
    inputs = _hardware(design, times, total, opt.seed)
    j0 = _first_input_at(design, times, t0)
    e = recovery.input_span_fs(design)
    if design.budget.dma:
        n = opt.lost_inputs
        kept = np.concatenate([inputs[:j0], inputs[j0 + n :]])
        return _Case(kept, [j0], j0, j0, f"{n} inputs lost in a DMA overrun, reported with inputs_lost()", e)
    every = max(1, design.queue_len // SERVICE_FRACTION)
    j0 -= j0 % every
    stall = (j0, j0 + STALL_QUEUES * design.queue_len)
    keep = model.queue_kept(inputs.size, every, design.queue_len, stall)
    lost = [int(i) for i in model.lost_after(keep)]
    first = int(np.count_nonzero(keep[:j0]))
    return _Case(
        inputs[keep],
        lost,
        first,
        lost[-1] if lost else first,
        f"service loop stalled for {STALL_QUEUES * design.queue_len} inputs: the ISR queue "
        f"({design.queue_len}) overflows",
        e,
        stall=(stall, every),
        all_inputs=inputs,
    )


def _case_step(design: Design, opt: Options, post: float) -> _Case:
    """Square-wave FSK between IF - STEP_LEVEL and IF + STEP_LEVEL full-scale deviation, STEP_HOLD_S
    per level (so the offset tracker sits at the IF, as it would on such a signal), the last step
    up at LEAD_S + PRE_S and held. Phase is continuous; the edges are where it crosses an integer."""
    t0 = LEAD_S + PRE_S
    total = t0 + post
    knots = np.append(np.arange(0.0, t0 - STEP_HOLD_S / 2, STEP_HOLD_S), t0)
    n_seg = knots.size - 1
    # levels alternate so that the last one before t0 is low and the one after it high
    freqs = [
        design.if_hz + (-1 if (n_seg - 1 - k) % 2 == 0 else 1) * STEP_LEVEL * design.full_scale_hz for k in range(n_seg)
    ] + [design.if_hz + STEP_LEVEL * design.full_scale_hz]
    bounds = np.append(knots, total)
    ph = 0.37  # start phase (cycles), arbitrary
    pieces = []
    for a, b, f in zip(bounds[:-1], bounds[1:], freqs, strict=True):
        n = np.arange(math.floor(ph) + 1, math.floor(ph + f * (b - a)) + 1)
        pieces.append(a + (n - ph) / f)
        ph += f * (b - a)
    times = np.concatenate(pieces)
    j = _first_input_at(design, times, t0)
    return _Case(
        _hardware(design, times, total, opt.seed),
        [],
        j,
        j,
        f"square-wave FSK between IF -+ {STEP_LEVEL:g} of full-scale deviation, "
        f"{STEP_HOLD_S * 1000:g} ms per level; recovery after the last step up",
        2 * STEP_LEVEL,
        step=True,
    )


CASES = {"signal-loss": _case_loss, "noise-burst": _case_burst, "inputs-lost": _case_lost, "frequency-step": _case_step}
FLAGS = {
    "signal-loss": "carrier lost",
    "noise-burst": "out of range",
    "inputs-lost": "overrun",
    "timer-wrap": "none",
    "frequency-step": "none",
}


def _flag(name: str, counters: dict, lost: bool) -> bool:
    if name == "signal-loss":
        return counters["gaps"] > 0
    if name == "noise-burst":
        return counters["clamps"] > 0
    if name == "inputs-lost":
        return counters["overruns"] > 0 and counters["gaps"] > 0 and lost
    return counters["gaps"] == 0 and counters["clamps"] == 0


def run_scenario(design: Design, name: str, host=None, options: Options = Options()) -> ScenarioResult:
    """Run one named scenario through the emitted C (``host``, built if None) and the model."""
    from ..check import hostbuild

    if name not in SCENARIOS:
        raise ValueError(f"scenario {name!r}: expected one of {', '.join(SCENARIOS)}")
    host = host or hostbuild.build(design)
    if name == "timer-wrap":
        return _timer_wrap(design, host, options)
    case0 = CASES[name](design, options, 0.0)
    thr0 = recovery.THRESHOLD_FS
    pred = recovery.predicted_recovery_s(design, case0.error_fs, thr0)
    reopen = design.squelch.reopen_ms / 1000
    case = CASES[name](design, options, max(pred, reopen) + GUARD_S + FIT_S)
    if case.clock is not None:
        stream, lost = model.clocked(design, case.inputs, [c[:2] for c in case.clock], case.lost)
        want = model.run(design, stream, lost=lost)
    else:
        want = model.run(design, case.inputs, lost=case.lost)
    if case.clock is not None:
        got, counters = host.process(case.inputs, lost=case.lost, clock=[c[:2] for c in case.clock])
    elif case.stall:
        (stall, every) = case.stall
        got, counters = host.process_isr(case.all_inputs, service_every=every, stall=stall)
    else:
        got, counters = host.process(case.inputs, lost=case.lost)
    bit_exact = (
        got.size == want.out.size
        and bool(np.array_equal(got, want.out))
        and counters["gaps"] == want.gaps
        and counters["clamps"] == want.clamps
    )

    def before(j: int, t_max: float | None = None) -> int:
        """Outputs made before input j (and, with the clock, by its calls before t_max)."""
        lost_j = [i for i in case.lost if i < j]
        if case.clock is None:
            return model.run(design, case.inputs[:j], lost=lost_j).out.size
        calls = [c[:2] for c in case.clock if c[0] <= j and c[2] < t_max]
        return model.run(design, *model.clocked(design, case.inputs[:j], calls, lost_j)).out.size

    if case.span_s is not None:
        n_start, n_end = before(case.start, case.span_s[0]), before(case.end, case.span_s[1])
    else:
        n_start, n_end = before(case.start), before(case.end)
    # a disturbance that closed the squelch ends when it has reopened (at most reopen_ms after the
    # disturbance, from the capped level; see designer.squelch)
    closed = not bool(np.all(want.squelch_open[n_start:]))
    if closed:
        pred = max(pred, reopen)
    y = design.output.fraction(got)
    fit_from = n_end + int(round((pred + GUARD_S) * design.rates.out_hz))
    basis = recovery.step_basis(y.size, n_end, design.scale.dc_shift)
    if not case.step:
        basis = np.column_stack([basis, recovery.tone_basis(y.size, design.test.tone_hz, design.rates.out_hz)[:, 1:]])
    e, rms = recovery.residual(y, basis, min(fit_from, y.size - 16))
    thr = max(recovery.THRESHOLD_FS, recovery.NOISE_SIGMAS * rms)
    if thr > thr0:
        pred = recovery.predicted_recovery_s(design, case.error_fs, thr)
        if closed:
            pred = max(pred, reopen)
    rec = recovery.measured_recovery(e, n_end, thr, design.rates.out_hz)
    ok, note = _output_check(design, name, y, n_start, n_end, counters, case)
    lo = max(0, n_start - int(0.01 * design.rates.out_hz))
    hi = min(y.size, n_end + int((pred + 0.01) * design.rates.out_hz))
    step = max(1, (hi - lo) // TRACE_POINTS)
    k = np.arange(lo, hi, step)
    return ScenarioResult(
        name=name,
        description=case.description,
        bit_exact=bit_exact,
        overflow_free=counters["saturations"] == 0,
        flag=FLAGS[name],
        flag_raised=_flag(name, counters, bool(case.lost)),
        output_ok=ok,
        output_note=note,
        recovery_ms=round(rec * 1000, 3),
        predicted_recovery_ms=round(pred * 1000, 3),
        trace_t_ms=tuple(float(v) for v in np.round((k - n_start) / design.rates.out_hz * 1000, 3)),
        trace_out=tuple(float(v) for v in np.round(y[k], 5)),
        trace_clean=tuple(float(v) for v in np.round((y - e)[k], 5)),
        span_ms=(0.0, round((n_end - n_start) / design.rates.out_hz * 1000, 3)),
    )


def _output_check(design: Design, name: str, y, n_start: int, n_end: int, counters: dict, case: _Case):
    """Muted or held rather than garbage: no clipped sample, nothing beyond the undisturbed peak
    (plus 10 % of full scale, or the chain's own overshoot on a jump of the tone's full swing when
    that is more) from the disturbance on, and, when the disturbance outlasts the chain's memory,
    silence (within 2 % of full scale) once the chain has forgotten the tone."""
    worst = float(np.max(np.abs(y[n_start:]), initial=0.0))
    # a step may overshoot (the low-pass's own step response); a tone may not grow beyond its own
    # undisturbed peak (the chain's gain at the tone, droop compensation included) by more than the
    # chain's overshoot on a jump of 2 x the tone's level (lost inputs make the tone's phase jump)
    before = float(np.max(np.abs(y[:n_start]), initial=0.0))
    over = recovery.step_overshoot(design)
    slack = max(0.1, 2 * schemes.TEST_LEVEL * over)
    # a step of 2 STEP_LEVEL through a chain that overshoots by ``over`` reaches STEP_LEVEL (1 + 2
    # over): within 0.1 of full scale its noise may clip (the output word's limit, not a fault)
    reach = STEP_LEVEL * (1 + 2 * over) + 0.1
    # a design whose own noise already reaches the output word's limit before the disturbance (a
    # one-bit counter, say) clips anyway: its clipping is no sign of the disturbance
    limit = float(np.min(np.abs(design.output.fraction([design.output.lo, design.output.hi]))))
    clips_undisturbed = before >= limit
    clip_ok = counters["clips"] == 0 or (case.step and reach >= 1.0) or clips_undisturbed
    ok = clip_ok and (case.step or worst <= max(before, schemes.TEST_LEVEL) + slack)
    peak = STEP_LEVEL if case.step else schemes.TEST_LEVEL
    n = n_end - n_start
    # the chain's memory of the tone: after it a muted output must be within MUTE_FS of silence
    mem = round(recovery.predicted_recovery_s(design, peak, MUTE_FS) * design.rates.out_hz)
    if case.clock is not None and case.span_s is not None:
        # the output rate through the loss: a sample per output period, within one per 10 ms
        span = case.span_s[1] - case.span_s[0]
        want_n = round(span * design.rates.out_hz, 6)  # t0 + dur - t0 is not dur in binary floating point
        slack = max(1, math.ceil(span / RATE_SLACK_S))
        quiet = float(np.max(np.abs(y[n_start + min(mem, n) : n_end]), initial=0.0))
        ok = ok and abs(n - want_n) <= slack and (n <= mem or quiet <= MUTE_FS)
        note = (
            f"{n} samples while no edges came ({want_n:.0f} at the output rate, the service loop's clock "
            f"driving the grid); |out| <= {quiet:.4f} FS from {min(mem, n) / design.rates.out_hz * 1000:.2f} ms "
            f"into it; peak {worst:.3f} FS"
        )
    elif name == "signal-loss" and n < 4:
        note = (
            f"held: {n} samples while no edges came (a stamp design makes no grid instants without "
            f"edges), then resynced; peak {worst:.3f} FS"
        )
    elif not case.step and n > mem:
        quiet = float(np.max(np.abs(y[n_start + mem : n_end])))
        ok = ok and quiet <= MUTE_FS
        note = (
            f"muted: |out| <= {quiet:.4f} FS from {mem / design.rates.out_hz * 1000:.2f} ms into the "
            f"disturbance; peak {worst:.3f} FS"
        )
    else:
        note = f"{n} samples during the disturbance; peak {worst:.3f} FS"
    if counters["clips"]:
        note += f"; {counters['clips']} samples clipped"
        if clips_undisturbed:
            note += " (its own noise clipped before the disturbance too)"
        elif clip_ok:
            note += f" (the chain's {over:.0%} step overshoot takes this step to {reach - 0.1:.2f} FS)"
    if not ok and design.front.kind == "count" and design.front.diff_low == 0:
        note += (
            f" (this counter reads at most {design.front.diff_limit} edges per grid instant, so small "
            f"counts are legal: a zero count is taken as signal until {design.front.gap_run} in a row "
            "say the carrier is lost, and a noise burst cannot always be told from the carrier)"
        )
    return ok, note


def _timer_wrap(design: Design, host, options: Options) -> ScenarioResult:
    """The timer (or counter) wraps just before and just at each of WRAP_PLACES inputs spread over
    the run: the C output must equal the unwrapped run's on every sample."""
    rng = np.random.default_rng(options.seed)
    total = LEAD_S + PRE_S + 0.1
    times = _edges(design, total, rng)
    bits = design.input_bits
    base = _hardware(design, times, total, options.seed, start=0)
    want = model.run(design, base)
    ref, c0 = host.process(base)
    exact = bool(np.array_equal(ref, want.out)) and c0["gaps"] == want.gaps and c0["clamps"] == want.clamps
    places = np.unique(np.concatenate([np.arange(4), np.linspace(4, base.size - 1, WRAP_PLACES - 4).astype(int)]))
    same, runs = True, 0
    for j in places:
        for back in (0, 1):
            start = (-(int(base[j]) + back)) % (1 << bits)  # input j reads 0 (or 2**bits - 1)
            got, c = host.process(_hardware(design, times, total, options.seed, start=start))
            same &= bool(np.array_equal(got, ref)) and c["gaps"] == c0["gaps"] and c["clamps"] == c0["clamps"]
            runs += 1
    what = "timer" if design.stamps else "counter"
    return ScenarioResult(
        name="timer-wrap",
        description=f"the {bits}-bit {what} wraps at {runs} places (at and just after "
        f"{len(places)} inputs spread over the run)",
        bit_exact=exact and same,
        overflow_free=c0["saturations"] == 0,
        flag="none",
        flag_raised=c0["gaps"] == 0 and c0["clamps"] == 0,
        output_ok=same,
        output_note=(
            "identical to the run without a wrap on every sample" if same else "differs from the run without a wrap"
        ),
        recovery_ms=0.0,
        predicted_recovery_ms=0.0,
    )
