"""The planner: picks the counting scheme, its variant, the grid rate (and so the CIC ratio) and the
front end's words, and says why, option by option.

Rule: among the feasible options (the part has the hardware, the words fit 32 bits, the CPU load
is within the budget) the best predicted SINAD wins; a costlier option must gain more than TIE_DB
over a cheaper one. Stamp front ends prefer grids no faster than their stamp rate (beyond it
successive grid instants share their bracketing stamps: measured on campus_fm, +0.6 dB from 240 to
480 kHz for twice the divisions).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

from ..dsp import cic
from ..dsp import iir
from . import schemes
from ..ir import CountFront, StampFront
from .schemes import Variant
from ..spec import Spec, SpecError

CIC_ORDER = 3  # Hogenauer CIC order; N >= 2 after a counter (DESIGN.md section 4)
MAX_RATIO = 64
MAX_PHASE_SHIFT = 24  # finer phase than 2^-24 of a stamp interval buys nothing at any timer rate
MIN_PHASE_SHIFT = 8
CUBIC_MIN_SHIFT = 12  # the cubic correction reads the fraction in Q12
CUBIC_DELTA_LIMIT = 4096
MAX_STEP_SHIFT = 12
REG_BITS = 32  # CIC registers and the phase word are 32-bit on every target
OVERDEVIATION = 2.0  # the step limit allows this many times the peak deviation
GAP_FRACTION = 0.5  # a stamp interval longer than 1 / (this * lowest frequency) is a gap
TIE_DB = 0.5  # predicted SINAD within this is a tie; the cheaper option wins
# The calibrated cycle tables fit their emulated probes within a few per cent (edgetally/planner/
# costs.json records each fit); an option must fit the budget with this margin to spare, so that
# the load the part shows stays inside the budget (plan --measured checks it in the emulator).
LOAD_MARGIN = 0.03
SCHEMES = ("timestamp", "interrupt", "counter")


@dataclass(frozen=True)
class Option:
    scheme: str
    variant: str
    ratio: int
    grid_hz: int
    load: float
    ram_bytes: int
    predicted_sinad_db: float
    quant_sinad_db: float
    curvature_sinad_db: float
    jitter_sinad_db: float
    kept: bool  # the chosen option
    reason: str
    feasible: bool = False
    doubtful: bool = False  # the prediction may be several dB off (schemes.doubt)


@dataclass(frozen=True)
class Plan:
    scheme: str
    variant: str
    front: StampFront | CountFront
    ratio: int
    order: int
    grid_hz: int
    cic_in_bits: int
    queue_len: int
    load: schemes.Load
    prediction: schemes.Prediction
    options: tuple[Option, ...]
    notes: tuple[str, ...] = field(default=())
    # the filter arithmetic the loads are priced with: the spec's (fixed.arith), or one the designer
    # took and the plan was made again with (edgetally.check.choice.design_and_plan)
    arith: str = "auto"

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclass
class _Cand:
    variant: Variant
    option: Option
    front: StampFront | CountFront | None
    in_bits: int
    load: schemes.Load
    pred: schemes.Prediction
    queue_len: int


FILTER_FIELDS = {"lowpass": "signal.audio_hz", "deemphasis": "signal.deemphasis_us"}


def _checked_filters(spec: Spec) -> list:
    """The output filters' float designs, refused as a spec error if their Q29 form is unusable."""
    sig, out = spec.signal, spec.output
    filters = iir.output_filters(sig.audio_hz, sig.deemphasis_us, out.rate_hz)
    for role, sos in filters:
        try:
            iir.quantise_rows(list(sos), [role] * len(sos), 0, [0] * len(sos), iir.COEF_BITS)
        except ValueError:
            fld = FILTER_FIELDS[role]
            val = sig.audio_hz if role == "lowpass" else sig.deemphasis_us
            raise SpecError(
                fld,
                val,
                f"the {role} filter at {out.rate_hz} Hz output has poles too close to "
                f"z = 1 for Q{iir.COEF_BITS} coefficients; its corner must be a larger "
                "fraction of the output rate",
            ) from None
    return [sos for _, sos in filters]


def _queue_len(per_out: float) -> int:
    """Inputs queued between two services: four output periods' worth, a power of two, >= 16."""
    return max(16, 1 << max(0, math.ceil(math.log2(4 * per_out))))


def _stamp_front(spec: Spec, v: Variant, ratio: int, grid_hz: int, grid_ticks: int):
    """The stamp front's words, or the reason there are none."""
    sig, tgt = spec.signal, spec.target
    k = v.prescale
    longest = tgt.timer_hz * k / (sig.if_hz - sig.deviation_hz)
    if tgt.timer_bits == 16 and longest >= 65536:
        return None, f"16-bit stamps would wrap more than once between stamps ({longest:.0f} ticks)"
    gap = math.ceil(tgt.timer_hz * k / (GAP_FRACTION * (sig.if_hz - sig.deviation_hz)))
    if tgt.timer_bits == 16:
        gap = min(gap, 65535)
    f_hi = sig.if_hz + OVERDEVIATION * sig.deviation_hz
    f_lo = max(0.0, sig.if_hz - OVERDEVIATION * sig.deviation_hz)
    growth = math.ceil(CIC_ORDER * math.log2(ratio) - 1e-12)
    low = CUBIC_MIN_SHIFT if v.order == "cubic" else MIN_PHASE_SHIFT
    for shift in range(min(MAX_PHASE_SHIFT, REG_BITS - gap.bit_length()), low - 1, -1):
        x_limit = math.ceil(f_hi / k / grid_hz * (1 << shift))
        in_bits = x_limit.bit_length() + 1
        if in_bits + growth <= REG_BITS - 1:
            front = StampFront(
                timer_bits=tgt.timer_bits,
                prescale=k,
                grid_ticks=grid_ticks,
                phase_shift=shift,
                gap_ticks=gap,
                x_limit=x_limit,
                x_low=math.floor(f_lo / k / grid_hz * (1 << shift)),
                x_centre=round(sig.if_hz / k / grid_hz * (1 << shift)),
                order=v.order,
                delta_limit=CUBIC_DELTA_LIMIT if v.order == "cubic" else 0,
                max_delta=2 * gap,
                divide="reciprocal" if schemes.uses_reciprocal(tgt) else "division",
            )
            return (front, in_bits), None
    return None, "no 32-bit phase word fits this ratio"


def _count_front(spec: Spec, ratio: int, grid_hz: int, grid_ticks: int):
    sig, tgt = spec.signal, spec.target
    f_hi = sig.if_hz + OVERDEVIATION * sig.deviation_hz
    f_lo = max(0.0, sig.if_hz - OVERDEVIATION * sig.deviation_hz)
    diff_limit = math.ceil(f_hi / grid_hz)
    diff_low = max(0, math.floor(f_lo / grid_hz) - 1)  # one count of margin: the count's own +-1 error
    growth = math.ceil(CIC_ORDER * math.log2(ratio) - 1e-12)
    for shift in range(min(MAX_STEP_SHIFT, REG_BITS - tgt.counter_bits), -1, -1):
        x_limit = diff_limit << shift
        in_bits = x_limit.bit_length() + 1
        if in_bits + growth <= REG_BITS - 1:
            front = CountFront(
                counter_bits=tgt.counter_bits,
                grid_ticks=grid_ticks,
                step_shift=shift,
                gap_run=math.ceil(grid_hz / (GAP_FRACTION * (sig.if_hz - sig.deviation_hz))),
                diff_limit=diff_limit,
                diff_low=diff_low,
                x_limit=x_limit,
                x_centre=round(sig.if_hz / grid_hz * (1 << shift)),
            )
            return (front, in_bits), None
    return None, "no 32-bit count word fits this ratio"


def _candidates(
    spec: Spec,
    v: Variant,
    impossible: str | None,
    post_sos: list,
    only_ratio: int | None,
    exclude: dict | None = None,
    arith: str = "auto",
) -> list[_Cand]:
    sig, out, tgt = spec.signal, spec.output, spec.target
    ticks_per_out = tgt.timer_hz // out.rate_hz
    edge_max = sig.if_hz + sig.deviation_hz
    cands = []
    for ratio in range(2, MAX_RATIO + 1):
        if ticks_per_out % ratio or (only_ratio is not None and ratio != only_ratio):
            continue
        # the droop compensator this ratio needs (as the designer will build it) costs and shapes too
        droop = iir.droop_of(sig.audio_hz, out.rate_hz, CIC_ORDER, ratio, spec.fixed.droop_limit_db)
        sos_r = ([iir.droop_fir(*droop[:2], sig.audio_hz, out.rate_hz, droop[2])] if droop else []) + list(post_sos)
        sections = sum(len(s) for s in sos_r)
        grid_hz = out.rate_hz * ratio
        grid_ticks = ticks_per_out // ratio
        if v.front == "stamp":
            words, why = _stamp_front(spec, v, ratio, grid_hz, grid_ticks)
            qlen = _queue_len(edge_max / v.prescale / out.rate_hz)
        else:
            words, why = _count_front(spec, ratio, grid_hz, grid_ticks)
            qlen = _queue_len(ratio)
        ld = schemes.load(
            v,
            tgt,
            edge_hz_max=edge_max,
            grid_hz=grid_hz,
            out_hz=out.rate_hz,
            n=CIC_ORDER,
            sections=sections,
            queue_len=qlen,
            data=spec.data is not None,
            arith=arith,
            fir=len(sos_r[0]) if droop else 0,
        )
        pr = schemes.predict(
            v,
            if_hz=sig.if_hz,
            full_scale_hz=out.full_scale_hz,
            timer_hz=tgt.timer_hz,
            cpu_hz=tgt.cpu_hz,
            irq_jitter_cycles=tgt.irq_jitter_cycles,
            grid_hz=grid_hz,
            out_hz=out.rate_hz,
            r=ratio,
            n=CIC_ORDER,
            band_hz=sig.audio_hz,
            post_sos=sos_r,
        )
        reason = impossible or why
        if reason is None:
            reason = _rate_limit(spec, v, ld, grid_hz)
        if reason is None and ld.fraction * (1 + LOAD_MARGIN) > tgt.cpu_budget:
            reason = (
                f"CPU load {ld.fraction:.1%} exceeds the budget {tgt.cpu_budget:.0%}"
                if ld.fraction > tgt.cpu_budget
                else f"CPU load {ld.fraction:.1%} leaves less than the {LOAD_MARGIN:.0%} margin below the budget "
                f"{tgt.cpu_budget:.0%} that the cycle estimates need"
            )
        if reason is None and exclude and (v.scheme, v.label, ratio) in exclude:
            reason = exclude[(v.scheme, v.label, ratio)]
        doubtful = (
            schemes.doubt(v, if_hz=sig.if_hz, full_scale_hz=out.full_scale_hz, grid_hz=grid_hz, pred=pr) is not None
        )
        opt = Option(
            v.scheme,
            v.label,
            ratio,
            grid_hz,
            ld.fraction,
            ld.ram_bytes,
            pr.sinad_db,
            pr.quant_sinad_db,
            pr.curvature_sinad_db,
            pr.jitter_sinad_db,
            reason is None,
            reason or "feasible",
            doubtful=doubtful,
        )
        cands.append(_Cand(v, opt, words[0] if words else None, words[1] if words else 0, ld, pr, qlen))
    return cands


DMA_CYCLES_PER_TRANSFER = 4  # estimate: one peripheral-to-memory transfer every 4 CPU cycles at most


def _rate_limit(spec: Spec, v: Variant, ld: schemes.Load, grid_hz: int) -> str | None:
    """Hard rate limits: an ISR must finish before its next event (or the capture register or the
    count is overwritten), and DMA moves at most one word per DMA_CYCLES_PER_TRANSFER cycles."""
    sig, tgt = spec.signal, spec.target
    edge_max = sig.if_hz + sig.deviation_hz
    event_hz = edge_max / v.prescale if v.front == "stamp" else edge_max
    if ld.per_edge and ld.per_edge > tgt.cpu_hz / event_hz:
        return (
            f"the edge ISR ({ld.per_edge} cycles) outlasts the shortest interval between edges "
            f"({tgt.cpu_hz / event_hz:.0f} cycles)"
        )
    dma_hz = (
        edge_max / v.prescale
        if v.front == "stamp" and tgt.capture_dma
        else grid_hz
        if v.scheme == "counter" and tgt.counter_dma
        else 0.0
    )
    if dma_hz * DMA_CYCLES_PER_TRANSFER > tgt.cpu_hz:
        return f"DMA would need {dma_hz:.0f} transfers a second, more than one per {DMA_CYCLES_PER_TRANSFER} cycles"
    return None


def _choose(cands: list[_Cand]) -> _Cand | None:
    """Lowest load first; a costlier option wins only by more than TIE_DB of predicted SINAD."""
    best = None
    for c in sorted(cands, key=lambda c: c.option.load):
        if best is None or c.option.predicted_sinad_db > best.option.predicted_sinad_db + TIE_DB:
            best = c
    return best


def _best_of_variant(spec: Spec, cands: list[_Cand]) -> _Cand | None:
    feasible = [c for c in cands if c.option.kept]
    if cands and cands[0].variant.front == "stamp":
        stamp_rate = spec.signal.if_hz / cands[0].variant.prescale
        slow = [c for c in feasible if c.option.grid_hz <= stamp_rate]
        feasible = slow or feasible
    return _choose(feasible)


def plan(
    spec: Spec,
    scheme: str | None = None,
    variant: str | None = None,
    ratio: int | None = None,
    exclude: dict | None = None,
    arith: str | None = None,
) -> Plan:
    """Plan the demodulator for ``spec``. ``scheme`` forces one of SCHEMES; ``variant`` (a label
    from the option table) and ``ratio`` narrow the choice further; ``exclude`` maps
    (scheme, variant, ratio) to the reason an option may not be used (e.g. its measured load);
    ``arith`` prices the filter sections with that arithmetic instead of the spec's."""
    sig, out, tgt = spec.signal, spec.output, spec.target
    arith = arith or spec.fixed.arith
    if scheme is not None and scheme not in SCHEMES:
        raise SpecError("--scheme", scheme, "must be one of " + ", ".join(SCHEMES))
    post_sos = _checked_filters(spec)
    per_variant = []
    for v, impossible in schemes.variants(tgt):
        if (scheme is not None and v.scheme != scheme) or (variant is not None and v.label != variant):
            continue
        cands = _candidates(spec, v, impossible, post_sos, ratio, exclude, arith)
        per_variant.append((v, cands, _best_of_variant(spec, cands)))
    if variant is not None and not per_variant:
        raise SpecError("--variant", variant, "is not a variant of " + (scheme or "any scheme") + " on this part")
    if not any(c for _, c, _ in per_variant):
        raise SpecError(
            "output.rate_hz",
            out.rate_hz,
            f"no CIC ratio from 2 to {MAX_RATIO} divides the {tgt.timer_hz // out.rate_hz} timer ticks "
            "of one output period; choose a rate that leaves a small factor",
        )
    bests = [b for _, _, b in per_variant if b is not None]
    # Trust the formulas only where they hold: an option whose prediction is in doubt is taken
    # only when no option without doubt is feasible.
    chosen = _choose([b for b in bests if not b.option.doubtful] or bests)
    if chosen is None:
        raise _refusal(spec, scheme, per_variant)
    rows = []
    for _v, cands, best in per_variant:
        shown = best or min(cands, key=lambda c: (c.option.reason.startswith("the part"), c.option.load))
        o = shown.option
        if shown is chosen:
            reason = f"CHOSEN: best predicted SINAD (a costlier option must gain over {TIE_DB} dB)"
        elif best is not None:
            reason = "dropped: feasible, but not better by the tie margin"
        else:
            reason = "dropped: " + o.reason
        rows.append(dataclasses.replace(o, kept=shown is chosen, reason=reason, feasible=best is not None))
    rows = _collapse_missing_hardware(rows)
    notes = list(spec.warnings)
    droop = cic.droop_db(sig.audio_hz, out.rate_hz, CIC_ORDER, chosen.option.ratio)
    lim = spec.fixed.droop_limit_db
    notes.append(
        f"CIC droop at the band edge {sig.audio_hz:g} Hz: {droop:.2f} dB ("
        + (
            "flattened by a compensation FIR"
            if 0 < lim < droop
            else "within fixed.droop_limit_db"
            if lim > 0
            else "not compensated: set fixed.droop_limit_db to flatten it"
        )
        + ")"
    )
    pr = chosen.pred
    if pr.curvature_sinad_db < pr.quant_sinad_db - 3:
        notes.append(
            "linear interpolation (phase curvature within one stamp interval) limits quality "
            f"to about {pr.curvature_sinad_db:.1f} dB, below the timer's {pr.quant_sinad_db:.1f} dB"
        )
    why = schemes.doubt(
        chosen.variant, if_hz=sig.if_hz, full_scale_hz=out.full_scale_hz, grid_hz=chosen.option.grid_hz, pred=pr
    )
    if why:
        notes.append(
            f"the prediction for the chosen option may be off by several dB: {why}; 'plan --simulate' measures it"
        )
    if scheme is not None:
        notes.append(f"scheme forced to {scheme}")
    assert chosen.front is not None  # a feasible option has its front end's words
    return Plan(
        scheme=chosen.variant.scheme,
        variant=chosen.variant.label,
        front=chosen.front,
        ratio=chosen.option.ratio,
        order=CIC_ORDER,
        grid_hz=chosen.option.grid_hz,
        cic_in_bits=chosen.in_bits,
        queue_len=chosen.queue_len,
        load=chosen.load,
        prediction=pr,
        options=tuple(rows),
        notes=tuple(notes),
        arith=arith,
    )


def _collapse_missing_hardware(rows: list[Option]) -> list[Option]:
    """One row, not one per variant, for a scheme whose hardware the part lacks."""
    out, seen = [], set()
    for o in rows:
        if o.reason.startswith("dropped: the part"):
            if o.scheme in seen:
                continue
            seen.add(o.scheme)
            o = dataclasses.replace(o, variant="-")
        out.append(o)
    return out


def _split(spec: Spec, c: _Cand) -> str:
    """Where a candidate's load goes: the output chain (cycles per output sample, its share) and
    the rest (edges, inputs and grid instants)."""
    out = spec.output.rate_hz * c.load.per_output / spec.target.cpu_hz
    return (
        f"output chain {c.load.per_output} cycles per sample = {out:.1%}, edges, inputs and grid "
        f"instants {c.load.fraction - out:.1%}"
    )


def _refusal(spec: Spec, scheme: str | None, per_variant) -> SpecError:
    """The clearest single reason why no option is feasible, on the field the user should change."""
    tgt = spec.target
    cands = [c for _, cs, _ in per_variant for c in cs]
    if scheme is not None:
        real = [c for c in cands if not c.option.reason.startswith("the part")]
        if not real:
            return SpecError("--scheme", scheme, f"impossible on this part: {cands[0].option.reason}")
        low = min(real, key=lambda c: c.option.load)
        return SpecError(
            "--scheme",
            scheme,
            f"infeasible: the cheapest {scheme} design ({low.variant.label}, R={low.option.ratio}) {low.option.reason}",
        )
    loads = [c for c in cands if c.front is not None and not c.option.reason.startswith("the part")]
    if loads:
        low = min(loads, key=lambda c: c.option.load)
        text = (
            f"every design exceeds it: the cheapest ({low.variant.scheme} {low.variant.label}, "
            f"R={low.option.ratio}) needs {low.option.load:.1%} of a {tgt.cpu_hz / 1e6:g} MHz {tgt.core} "
            f"({_split(spec, low)})"
        )
        stamps = [c for c in loads if c.variant.front == "stamp"]
        if stamps and low.variant.front != "stamp":
            st = min(stamps, key=lambda c: c.option.load)
            text += f"; the cheapest timestamp design ({st.variant.label}, R={st.option.ratio}) {_split(spec, st)}"
        return SpecError("target.cpu_budget", tgt.cpu_budget, text)
    return SpecError(
        "target.timer_hz", tgt.timer_hz, "no design fits: " + "; ".join(sorted({c.option.reason for c in cands}))
    )
