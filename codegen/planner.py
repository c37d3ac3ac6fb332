"""The planner: picks the scheme, the grid rate (and so the CIC ratio) and the phase word, and says why.

Only the timestamp scheme exists so far; the option table already has one row per grid choice so
that other schemes slot in as more rows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from . import cic, iir, schemes
from .cores import CORES
from .spec import Spec, SpecError

CIC_ORDER = 3          # Hogenauer CIC order; N >= 2 (DESIGN.md section 4)
MAX_RATIO = 64
MAX_PHASE_SHIFT = 24   # finer phase than 2^-24 of a stamp interval buys nothing at any timer rate
MIN_PHASE_SHIFT = 8
REG_BITS = 32          # CIC registers and the phase word are 32-bit on every target
OVERDEVIATION = 2.0    # the phase step limit allows this many times the peak deviation
GAP_FRACTION = 0.5     # a stamp interval longer than 1 / (this * lowest frequency) is a gap
TIE_DB = 0.5           # predicted SINAD within this is a tie; the cheaper option wins


@dataclass(frozen=True)
class Option:
    scheme: str
    ratio: int
    grid_hz: int
    phase_shift: int
    load: float
    predicted_sinad_db: float
    timer_sinad_db: float
    curvature_sinad_db: float
    kept: bool
    reason: str


@dataclass(frozen=True)
class Plan:
    scheme: str
    ratio: int
    order: int
    grid_hz: int
    grid_ticks: int
    phase_shift: int
    gap_ticks: int
    x_limit: int
    cic_in_bits: int
    load: schemes.Load
    prediction: schemes.Prediction
    options: tuple[Option, ...]
    notes: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict:
        import dataclasses
        return dataclasses.asdict(self)


def _phase_words(spec: Spec, ratio: int, grid_hz: int, prescale: int):
    """The largest phase_shift for which neither the division nor the CIC can overflow 32 bits,
    with the gap limit and phase-step limit that go with it; None if below MIN_PHASE_SHIFT."""
    sig, tgt = spec.signal, spec.target
    f_lo_guard = GAP_FRACTION * (sig.if_hz - sig.deviation_hz)
    gap = math.ceil(tgt.timer_hz * prescale / f_lo_guard)
    if tgt.timer_bits == 16:
        gap = min(gap, 65535)
    f_hi = sig.if_hz + OVERDEVIATION * sig.deviation_hz
    growth = math.ceil(CIC_ORDER * math.log2(ratio) - 1e-12)
    for shift in range(min(MAX_PHASE_SHIFT, REG_BITS - gap.bit_length()), MIN_PHASE_SHIFT - 1, -1):
        x_limit = math.ceil(f_hi / prescale / grid_hz * (1 << shift))
        in_bits = x_limit.bit_length() + 1
        if cic.full_width(in_bits, CIC_ORDER, ratio) <= REG_BITS - 1:
            return shift, gap, x_limit, in_bits
    return None


FILTER_FIELDS = {"lowpass": "signal.audio_hz", "deemphasis": "signal.deemphasis_us"}


def _checked_filters(spec: Spec) -> list:
    """The output filters' float designs, refused as a spec error if their Q29 form is unusable."""
    sig, out = spec.signal, spec.output
    filters = iir.output_filters(sig.audio_hz, sig.deemphasis_us, out.rate_hz)
    for role, sos in filters:
        try:
            iir.quantise(sos, iir.COEF_BITS)
        except ValueError:
            fld = FILTER_FIELDS[role]
            val = sig.audio_hz if role == "lowpass" else sig.deemphasis_us
            raise SpecError(fld, val, f"the {role} filter at {out.rate_hz} Hz output has poles too close to "
                                      f"z = 1 for Q{iir.COEF_BITS} coefficients; its corner must be a larger "
                                      "fraction of the output rate") from None
    return [sos for _, sos in filters]


def _choose(candidates: list) -> tuple | None:
    """Lowest load first; a costlier option wins only by more than TIE_DB of predicted SINAD."""
    best = None
    for cand in sorted(candidates, key=lambda c: c[0].load):
        if best is None or cand[0].predicted_sinad_db > best[0].predicted_sinad_db + TIE_DB:
            best = cand
    return best


def _refusal(spec: Spec, options: list, ticks_per_out: int) -> SpecError:
    """The clearest single reason why no option is feasible, on the field the user should change."""
    tgt = spec.target
    if not options:
        return SpecError("output.rate_hz", spec.output.rate_hz,
                         f"no CIC ratio from 2 to {MAX_RATIO} divides the {ticks_per_out} timer ticks of one "
                         "output period; choose a rate that leaves a small factor")
    by_load = [o for o, words, *_ in options if words is not None]
    if by_load:
        low = min(by_load, key=lambda o: o.load)
        return SpecError("target.cpu_budget", tgt.cpu_budget,
                         f"every timestamp design exceeds it: the cheapest (R={low.ratio}, grid {low.grid_hz} Hz) "
                         f"needs {low.load:.1%} of a {tgt.cpu_hz / 1e6:g} MHz {tgt.core}")
    return SpecError("target.timer_hz", tgt.timer_hz,
                     "no 32-bit phase word fits: the timer is too fast for the longest stamp interval")


def plan(spec: Spec) -> Plan:
    """Choose the grid rate and word lengths of the timestamp scheme for ``spec``."""
    sig, out, tgt = spec.signal, spec.output, spec.target
    core = CORES[tgt.core]
    prescale = 1
    ticks_per_out = tgt.timer_hz // out.rate_hz
    edge_max = (sig.if_hz + sig.deviation_hz) / prescale
    edge_mean = sig.if_hz / prescale
    post_sos = _checked_filters(spec)
    sections = sum(len(s) for s in post_sos)
    options = []
    for ratio in range(2, MAX_RATIO + 1):
        if ticks_per_out % ratio:
            continue
        grid_hz = out.rate_hz * ratio
        words = _phase_words(spec, ratio, grid_hz, prescale)
        load = schemes.timestamp_load(core, cpu_hz=tgt.cpu_hz, isr_cycles=tgt.isr_cycles, dma=tgt.capture_dma,
                                      edge_hz_max=edge_max, grid_hz=grid_hz, out_hz=out.rate_hz,
                                      n=CIC_ORDER, sections=sections)
        pred = schemes.predict_timestamp(if_hz=sig.if_hz, full_scale_hz=out.full_scale_hz, timer_hz=tgt.timer_hz,
                                         grid_hz=grid_hz, out_hz=out.rate_hz, r=ratio, n=CIC_ORDER,
                                         band_hz=sig.audio_hz, prescale=prescale, post_sos=post_sos)
        if words is None:
            reason, ok = "no 32-bit phase word fits this ratio", False
        elif load.fraction > tgt.cpu_budget:
            reason, ok = f"CPU load {load.fraction:.1%} exceeds the budget {tgt.cpu_budget:.0%}", False
        else:
            reason, ok = "feasible", True
        opt = Option("timestamp", ratio, grid_hz, words[0] if words else 0, load.fraction, pred.sinad_db,
                     pred.timer_sinad_db, pred.curvature_sinad_db, ok, reason)
        options.append((opt, words, load, pred))
    feasible = [c for c in options if c[0].kept]
    # Beyond the mean edge rate successive grid instants share their bracketing stamps; measured on
    # campus_fm: +0.6 dB from 240 to 480 kHz for twice the divisions. Such grids are used only when
    # no slower one is feasible.
    slow = [c for c in feasible if c[0].grid_hz <= edge_mean]
    best = _choose(slow or feasible)
    if best is None:
        raise _refusal(spec, options, ticks_per_out)
    chosen, words, load, pred = best
    table = []
    for o, *_ in options:
        if o is chosen:
            o = Option(**{**o.__dict__, "reason": f"CHOSEN: best predicted SINAD (a costlier option must gain over {TIE_DB} dB)"})
        elif o.kept and slow and o.grid_hz > edge_mean:
            o = Option(**{**o.__dict__, "kept": False,
                          "reason": f"dropped: grid above the mean edge rate {edge_mean:g} Hz: little to gain"})
        elif o.kept:
            o = Option(**{**o.__dict__, "kept": False, "reason": "dropped: feasible, but not better by the tie margin"})
        else:
            o = Option(**{**o.__dict__, "reason": "dropped: " + o.reason})
        table.append(o)
    notes = list(spec.warnings)
    droop = cic.droop_db(sig.audio_hz, out.rate_hz, CIC_ORDER, chosen.ratio)
    notes.append(f"CIC droop at the band edge {sig.audio_hz:g} Hz: {droop:.2f} dB (no compensation yet)")
    if pred.curvature_sinad_db < pred.timer_sinad_db - 3:
        notes.append("linear interpolation (phase curvature within one stamp interval) limits quality "
                     f"to about {pred.curvature_sinad_db:.1f} dB, below the timer's "
                     f"{pred.timer_sinad_db:.1f} dB; a higher-order estimator would lift it")
    shift, gap, x_limit, in_bits = words
    return Plan(scheme="timestamp", ratio=chosen.ratio, order=CIC_ORDER, grid_hz=chosen.grid_hz,
                grid_ticks=ticks_per_out // chosen.ratio, phase_shift=shift, gap_ticks=gap, x_limit=x_limit,
                cic_in_bits=in_bits, load=load, prediction=pred, options=tuple(table), notes=tuple(notes))
