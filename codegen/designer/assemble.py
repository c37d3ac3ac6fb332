"""design(spec) -> Design: turns the plan into the integer parameters of every stage, chooses the
output chain's word lengths (cheapest arithmetic that keeps the implementation loss under the
spec's limit) and writes the overflow certificate."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from dataclasses import dataclass
from fractions import Fraction

from .. import __version__
from ..fixedpoint import recip_plan
from . import datalink, wordlength
from ..dsp import iir
from ..planner import costs, schemes
from ..ir import Budget, Cic, Design, Filters, OutputFormat, Rates, Scale, Squelch, output_bits
from .squelch import design_squelch, squelch_level_bits, squelch_registers
from ..planner.choose import REG_BITS, Plan, plan
from .. import standard
from ..spec import Spec, SpecError, Target

# the scale multiplier's precision (relative gain error at most 2**-15, under 0.001 dB): 15 bits let
# cores without a 64-bit product take it as two 32-bit ones (wordlength.scale_product)
SCALE_MULT_BITS = wordlength.SPLIT_MULT_BITS
SCALE_MULT_MAX_BITS = 24
OVERRIDABLE = {"arith": str, "data_bits": int, "coef_bits": int, "coef_width": int, "acc_bits": int, "scaling": str}


def spec_hash(spec: Spec) -> str:
    canon = json.dumps(spec.to_dict(), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(canon.encode()).hexdigest()[:16]


@dataclass(frozen=True)
class WidthOption:
    """One candidate word-length set for the output chain, with what it would cost and lose."""

    arith: str
    filters: Filters | None  # None: refused (the reason says why)
    q_in: int
    loss_db: float  # predicted implementation loss (Jackson roundoff vs the planned noise)
    response_error_db: float
    coef_bits_needed: int  # fewest coefficient bits meeting the response tolerance
    cycles_per_output: int  # of the filter sections alone
    ok: bool
    reason: str
    base_delta: int = 0  # the base's cost with this arithmetic's word forms, less the planner's figure

    @property
    def chain_cycles(self) -> int:
        """What this arithmetic costs per output sample, to compare arithmetics: its sections and
        the word forms of the scale, tracker and output stage that its data words allow."""
        return self.cycles_per_output + self.base_delta


def _units(p: Plan) -> tuple[Fraction, int]:
    """Hz per CIC output LSB, and the largest CIC output any input can give."""
    fr = p.front
    shift = fr.phase_shift if fr.kind == "stamp" else fr.step_shift
    unit = Fraction(p.grid_hz * fr.prescale) / (Fraction(1 << shift) * p.ratio**p.order)
    return unit, fr.x_limit * p.ratio**p.order


def _bound_rel(spec: Spec, p: Plan) -> float:
    """Worst |deviation| at the scale stage, in full-scale units: from zero frequency (x = 0) to the
    step limit, about the centre."""
    unit, y_max = _units(p)
    centre = round(Fraction(spec.signal.if_hz) / unit)
    return float(max(centre, y_max - centre) * unit / Fraction(spec.output.full_scale_hz))


def _filters(spec: Spec, p: Plan, a: wordlength.Arith, scaling: str, coef_bits: int | None) -> tuple[Filters, int]:
    sig, out = spec.signal, spec.output
    pairs = iir.output_filters(sig.audio_hz, sig.deemphasis_us, out.rate_hz, droop=_droop(spec, p))
    rows = [list(map(float, r)) for _, sos in pairs for r in sos]
    roles = [role for role, sos in pairs for _ in sos]
    lim = wordlength.limit_of(a.data_bits)
    in_rel = 2 * _bound_rel(spec, p)  # audio minus offset
    q_in = math.floor(math.log2(lim / in_rel))
    qs = wordlength.section_formats(rows, q_in, in_rel, a.data_bits, scaling)
    cb = (
        coef_bits
        if coef_bits is not None
        else min(iir.COEF_BITS, wordlength.coef_bits_for(rows, q_in, qs, a.coef_width))
    )
    if a.acc_bits == wordlength.SPLIT_ACC_BITS and not 8 <= cb <= 16:
        raise ValueError(f"the split products need Q8..Q16 coefficients, not Q{cb}")
    sections = iir.quantise_rows(rows, roles, q_in, qs, cb)
    f = Filters(a.data_bits, cb, a.coef_width, a.acc_bits, scaling, lim, sections)
    if a.shaped:
        lo_hz = standard.band_lo_hz(sig.audio_hz)
        f = wordlength.feedback_taps(f, q_in, out.rate_hz, lo_hz, sig.audio_hz)
    return f, q_in


def _droop(spec: Spec, p: Plan) -> tuple[int, int, float] | None:
    """(order, ratio, flatness) of the CIC when its droop at the band edge exceeds the spec's limit."""
    return iir.droop_of(spec.signal.audio_hz, spec.output.rate_hz, p.order, p.ratio, spec.fixed.droop_limit_db)


def _front_words(front) -> list:
    """The stamp front's 32-bit intermediates for the certificate (none for count fronts)."""
    if front.kind != "stamp":
        return []
    recip = recip_plan(front.gap_ticks.bit_length(), front.phase_shift) if front.divide == "reciprocal" else None
    return wordlength.stamp_words(recip, front.delta_limit if front.order == "cubic" else 0)


def _out_format(spec: Spec, q_last: int) -> OutputFormat:
    fmt = spec.output.format
    bits = 16 if fmt == "s16" else int(fmt[1:])
    shift = q_last - (bits - 1)
    rshift, lmul = max(shift, 0), 1 << max(-shift, 0)
    if fmt == "s16":
        return OutputFormat(fmt, rshift, lmul, 0, -(1 << 15), (1 << 15) - 1, "int16_t")
    return OutputFormat(fmt, rshift, lmul, 1 << (bits - 1), 0, (1 << bits) - 1, "uint16_t")


SHAPED_SUM_BITS = 31  # data bits + coefficient bits of the shaped arithmetic: |y| 2^C + 2^C < 2^31


def _shaped_words(spec: Spec, p: Plan, a: wordlength.Arith, scaling: str, ov: dict) -> tuple[wordlength.Arith, int]:
    """The shaped arithmetic's words: one 32-bit product per term, so the data word and the
    coefficient format share 31 bits (the rounded sum, |y| 2^C plus the rounding half, stays below
    2^31: the certificate checks it). The fewest coefficient bits (Q8 up to what 16-bit storage
    holds) whose quantised response meets the spec's tolerance leave the most bits to the data,
    where the roundoff noise is; ``ov`` may fix either."""
    if "coef_bits" in ov:
        cb = ov["coef_bits"]
        return dataclasses.replace(a, data_bits=ov.get("data_bits", SHAPED_SUM_BITS - cb)), cb
    sig, rate = spec.signal, spec.output.rate_hz
    widest = None
    for cb in range(8, 16):
        trial = dataclasses.replace(a, data_bits=ov.get("data_bits", SHAPED_SUM_BITS - cb))
        try:
            f, q_in = _filters(spec, p, trial, scaling, None)
            if cb > f.coef_bits:  # 16-bit coefficient storage holds no finer format
                break
            f, q_in = _filters(spec, p, trial, scaling, cb)
        except ValueError:
            continue
        widest = (trial, cb)
        if wordlength.response_error_db(f, q_in, rate, sig.audio_hz) <= spec.fixed.response_tol_db:
            return trial, cb
    if widest is None:
        raise ValueError("no coefficient format from Q8 gives a stable quantised filter in 16 bits")
    return widest


def auto_ariths(tgt: Target) -> list[str]:
    """The arithmetics ``[fixed] arith = "auto"`` chooses among on ``tgt``, before their costs order them."""
    # on cores without a 32x32->64 multiply the shaped arithmetic (32-bit products, error feedback)
    # and the split one (27 x 16 from three 16 x 16 products) stand in for the wide one; the core's
    # cost table orders them (width_options). The shaped one's coefficients take the coarsest format that
    # meets the spec's response tolerance (_shaped_words), which leaves the most bits to the data
    # word. With a 32x32->64 multiply the wide arithmetic is cheap, and the reference checks of a
    # de-emphasis corner (tests/test_iir_reference.py) want the finer coefficients it keeps.
    return ["narrow", "wide"] if tgt.mul64 else ["narrow", "shaped", "mid", "wide"]


def width_options(spec: Spec, p: Plan, overrides: dict | None = None) -> list[WidthOption]:
    """Each arithmetic the output chain could use (or the one ``overrides`` describe), cheapest
    first, with its predicted loss, response error and cost, and whether it meets the spec."""
    fx, tgt = spec.fixed, spec.target
    ov = dict(overrides or {})
    auto = auto_ariths(tgt)
    names = [ov.pop("arith")] if "arith" in ov else (auto if fx.arith == "auto" else [fx.arith])
    signal_fs2 = schemes.TEST_LEVEL**2 / 2 * 10 ** (-p.prediction.sinad_db / 10)
    out_bits = output_bits(spec.output.format)
    opts = []
    for name in names:
        a = wordlength.ARITHS[name]
        a = dataclasses.replace(a, **{k: ov[k] for k in ("data_bits", "coef_width", "acc_bits") if k in ov})
        scaling = ov.get("scaling", fx.scaling if a.acc_bits == 64 else "l1")
        try:
            if a.shaped:
                a, cb = _shaped_words(spec, p, a, scaling, ov)
                f, q_in = _filters(spec, p, a, scaling, cb)
            else:
                f, q_in = _filters(spec, p, a, scaling, ov.get("coef_bits"))
        except ValueError as e:
            opts.append(WidthOption(name, None, 0, math.inf, math.inf, 0, 0, False, str(e)))
            continue
        err = wordlength.response_error_db(f, q_in, spec.output.rate_hz, spec.signal.audio_hz)
        noise = wordlength.roundoff_noise(
            f, q_in, out_bits, spec.output.rate_hz, standard.band_lo_hz(spec.signal.audio_hz), spec.signal.audio_hz
        )
        # the implementation loss is counted against the float chain rounded to the same output
        # word (check.reference.output_word): the format's own rounding is in both, not a loss
        lo_hz = standard.band_lo_hz(spec.signal.audio_hz)
        word = wordlength.word_noise(out_bits, spec.output.rate_hz, lo_hz, spec.signal.audio_hz)
        if f.sections[-1].q_out > out_bits - 1:
            noise -= word
        loss = 10 * math.log10(1 + noise / (signal_fs2 + word))
        needed = f.coef_bits
        for cb in range(f.coef_bits - 1, 7, -1):
            try:
                g, _ = _filters(spec, p, a, scaling, cb)
            except ValueError:
                break
            if wordlength.response_error_db(g, q_in, spec.output.rate_hz, spec.signal.audio_hz) > fx.response_tol_db:
                break
            needed = cb
        cycles = schemes.filter_cycles(
            tgt,
            a.acc_bits,
            len(f.sections),
            a.data_bits,
            a.coef_width,
            fir=sum(s.fir for s in f.sections) if a.shaped else None,
        )
        why = []
        if a.data_bits == 16 or a.shaped:
            # zero-input limit cycles (Jackson 1969): the idle tone of a 16-bit word must stay under the
            # planned noise (the widths check's rule); wider words put it far below any noise
            for sec, m in zip(f.sections, wordlength.limit_cycle_lsb(f), strict=True):
                if m and (m * 2.0**-sec.q_out) ** 2 / 2 > signal_fs2:
                    why.append(f"limit cycle in {sec.role} above the noise floor")
                    break
        if loss > fx.loss_limit_db:
            why.append(f"predicted loss {loss:.2f} dB exceeds {fx.loss_limit_db:g} dB")
        if err > fx.response_tol_db:
            why.append(f"response error {err:.3f} dB exceeds {fx.response_tol_db:g} dB")
        try:
            sc = _scale(spec, p, f, q_in)[0]
            delta = schemes.form_cycles(tgt, p.front.kind, costs.base_forms(sc.word, sc.product, 32), p.arith)
        except SpecError:  # the design refuses it with this message (design)
            delta = 0
        opts.append(
            WidthOption(name, f, q_in, loss, err, needed, cycles, not why, "; ".join(why) or "meets the targets", delta)
        )
    return sorted(opts, key=lambda o: o.chain_cycles)


def _refuse_targets(spec: Spec, best: WidthOption) -> None:
    """SpecError naming the [fixed] target that no word lengths meet (``best``: the widest try)."""
    fx = spec.fixed
    if best.loss_db > fx.loss_limit_db:
        raise SpecError(
            "fixed.loss_limit_db",
            fx.loss_limit_db,
            f"cannot be met: the best word lengths allowed lose {best.loss_db:.2f} dB; allow more loss",
        )
    raise SpecError(
        "fixed.response_tol_db",
        fx.response_tol_db,
        f"cannot be met: the quantised filters are {best.response_error_db:.3f} dB off; allow more",
    )


def _stamp_front(fr, timer_hz: float) -> tuple:
    """A stamp front as designer.squelch.stamp_level_curve reads it: (prescale, cubic, (x_low,
    x_limit, x_centre) in cycles, the gap in seconds)."""
    upc = 2.0**fr.phase_shift / fr.prescale  # step units per IF cycle
    steps = (fr.x_low / upc, fr.x_limit / upc, fr.x_centre / upc)
    return fr.prescale, fr.order == "cubic", steps, fr.gap_ticks / timer_hz


def _squelch(spec: Spec, p: Plan) -> Squelch:
    """The noise squelch for this plan (designer.squelch): the counting floor from the planner's model."""
    sig, out, tgt = spec.signal, spec.output, spec.target
    fr = p.front
    v = schemes.Variant(p.scheme, fr.kind, fr.prescale, getattr(fr, "order", "linear"))
    floor = sum(
        schemes.grid_error_vars(
            v,
            if_hz=sig.if_hz,
            full_scale_hz=out.full_scale_hz,
            timer_hz=tgt.timer_hz,
            cpu_hz=tgt.cpu_hz,
            irq_jitter_cycles=tgt.irq_jitter_cycles,
            grid_hz=p.grid_hz,
            band_hz=sig.audio_hz,
        )
    )
    if fr.kind == "stamp":
        weight = schemes.CUBIC_WEIGHT if fr.order == "cubic" else schemes.LINEAR_WEIGHT
        edge_hz, bits = sig.if_hz / fr.prescale, fr.phase_shift
    else:
        weight, edge_hz, bits = 1.0, math.inf, fr.step_shift
    return design_squelch(
        cnr_db=sig.squelch_cnr_db,
        grid_hz=p.grid_hz,
        out_hz=out.rate_hz,
        ratio=p.ratio,
        deviation_hz=sig.deviation_hz,
        audio_hz=sig.audio_hz,
        full_scale_hz=out.full_scale_hz,
        edge_hz=edge_hz,
        weight=weight,
        floor_var=floor,
        units_per_cycle=2.0**bits / fr.prescale,
        x_limit=fr.x_limit,
        std_tone_hz=standard.tone_hz(sig.audio_hz),
        std_level=standard.LEVEL,
        counts=fr.kind == "count",
        blind=fr.kind == "count" and fr.diff_limit <= 1,
        if_hz=sig.if_hz,
        stamp=_stamp_front(fr, tgt.timer_hz) if fr.kind == "stamp" else None,
    )


def _scale(spec: Spec, p: Plan, f: Filters, q_in: int) -> tuple[Scale, OutputFormat, int]:
    """The scale stage and the output format for filters ``f`` taking Q(q_in), with the word forms
    their bounds allow (wordlength.scale_product, base_word), and the largest CIC output."""
    sig, out = spec.signal, spec.output
    if q_in < 0:
        raise SpecError(
            "output.full_scale_hz",
            out.full_scale_hz,
            "is too small a fraction of the IF for the output chain's data word; raise it",
        )
    unit, y_max = _units(p)
    centre = round(Fraction(sig.if_hz) / unit)
    gain = unit / Fraction(out.full_scale_hz) * (1 << q_in)  # data LSB per CIC LSB
    # 15 bits where the gain allows a shift of at least 1; a gain too large for that takes a wider
    # multiplier (and the 64-bit product), up to SCALE_MULT_MAX_BITS
    shift = max(1, (SCALE_MULT_BITS - 1) - math.floor(math.log2(gain)))
    mult = round(gain * (1 << shift))
    if mult == 1 << SCALE_MULT_BITS and shift > 1:  # rounded up to a power of two: the same gain one bit down
        mult, shift = mult >> 1, shift - 1
    if mult >= 1 << SCALE_MULT_MAX_BITS:
        raise SpecError(
            "output.full_scale_hz",
            out.full_scale_hz,
            f"is too small for this design: one CIC step would be {float(gain):.3g} output-word steps, "
            f"more than the {SCALE_MULT_MAX_BITS}-bit scale multiplier holds; widen the full scale",
        )
    dc_shift = max(1, round(math.log2(out.rate_hz / (2 * math.pi * standard.dc_corner_hz(sig.audio_hz)))))
    if spec.data is not None:
        dc_shift = datalink.dc_shift(spec)  # the slicer's offset tracking (designer.datalink)
    of = _out_format(spec, f.sections[-1].q_out)
    d_max = max(centre, y_max - centre)
    u_b = wordlength.scale_bound(d_max, mult, shift, f.limit)
    product = wordlength.scale_product(d_max, mult, shift)
    word = wordlength.base_word(u_b, dc_shift, f, of.lmul, of.rshift, of.mid)
    scale = Scale(centre=centre, mult=mult, shift=shift, q=q_in, dc_shift=dc_shift, product=product, word=word)
    return scale, of, y_max


def design(spec: Spec, chosen: Plan | None = None, scheme: str | None = None, overrides: dict | None = None) -> Design:
    """The complete integer design for ``spec`` (planned here, with ``scheme`` forced if given,
    unless a plan is given). ``overrides`` fixes output-chain word lengths (keys of OVERRIDABLE)."""
    p = chosen or plan(spec, scheme)
    sig, out, tgt = spec.signal, spec.output, spec.target
    for k, v in (overrides or {}).items():
        if k not in OVERRIDABLE or not isinstance(v, OVERRIDABLE[k]):
            raise SpecError(f"--set filters.{k}", v, "allowed: " + ", ".join(f"filters.{n}" for n in OVERRIDABLE))
    opts = width_options(spec, p, overrides)
    good = [o for o in opts if o.ok]
    pick = good[0] if good else next((o for o in reversed(opts) if o.filters is not None), None)
    if pick is None or pick.filters is None:
        raise SpecError(
            "fixed.arith", spec.fixed.arith, "no word lengths give a stable quantised filter: " + opts[0].reason
        )
    if not good and not overrides:
        # the [fixed] targets bind every command as they bind `widths` (the user's own word
        # lengths, given as overrides, are what `widths` checks and may fail)
        _refuse_targets(spec, pick)
    f, q_in = pick.filters, pick.q_in
    scale, of, y_max = _scale(spec, p, f, q_in)
    cert = wordlength.certificate(
        x_limit=p.front.x_limit,
        in_bits=p.cic_in_bits,
        ratio=p.ratio,
        order=p.order,
        cic_width=REG_BITS,
        centre=scale.centre,
        mult=scale.mult,
        shift=scale.shift,
        q_in=q_in,
        u_limit=f.limit,
        dc_shift=scale.dc_shift,
        f=f,
        product=scale.product,
        word=scale.word,
        out=(of.lmul, of.rshift, of.mid),
        front_words=_front_words(p.front),
    )
    sq = _squelch(spec, p)
    sq = dataclasses.replace(sq, level_bits=squelch_level_bits(sq, x_limit=p.front.x_limit, ratio=p.ratio))
    cert = cert + squelch_registers(sq, x_limit=p.front.x_limit, ratio=p.ratio)
    link = datalink.design_link(spec, q_in) if spec.data is not None else None
    if link is not None:
        cert = cert + datalink.registers(link)
    forms = costs.base_forms(scale.word, scale.product, sq.level_bits)
    level = schemes.form_cycles(tgt, p.front.kind, forms, p.arith) - pick.base_delta
    # the planner's charge for the sections, as it made it (choose: the droop compensator's sections)
    planned = schemes.planned_filter_cycles(
        tgt, len(f.sections), p.arith, fir=sum(s.role == "droop" for s in f.sections)
    )
    per_output = p.load.per_output - planned + pick.chain_cycles + level
    fraction = p.load.fraction + (per_output - p.load.per_output) * out.rate_hz / tgt.cpu_hz
    return Design(
        name=spec.name,
        tool_version=__version__,
        spec_hash=spec_hash(spec),
        scheme=p.scheme,
        rates=Rates(timer_hz=tgt.timer_hz, grid_hz=p.grid_hz, out_hz=out.rate_hz),
        front=p.front,
        cic=Cic(order=p.order, ratio=p.ratio, in_bits=p.cic_in_bits, width=REG_BITS),
        scale=scale,
        filters=f,
        output=of,
        if_hz=sig.if_hz,
        full_scale_hz=out.full_scale_hz,
        audio_hz=sig.audio_hz,
        queue_len=p.queue_len,
        squelch=sq,
        budget=Budget(
            core=tgt.core,
            cpu_hz=tgt.cpu_hz,
            dma=tgt.capture_dma if p.front.kind == "stamp" else tgt.counter_dma,
            edge_hz_max=sig.if_hz + sig.deviation_hz,
            cycles_per_edge=p.load.per_edge,
            cycles_per_input=p.load.per_input,
            cycles_per_grid=p.load.per_grid,
            cycles_per_output=per_output,
            load_fraction=fraction,
            ram_bytes=p.load.ram_bytes,
            isr_cycles=tgt.isr_cycles,
            irq_jitter_cycles=tgt.irq_jitter_cycles,
        ),
        certificate=cert,
        data=link,
    )
