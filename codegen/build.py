"""design(spec) -> Design: turns the plan into the integer parameters of every stage."""

from __future__ import annotations

import hashlib
import json
import math
from fractions import Fraction

from . import __version__, iir
from .ir import Biquad, Budget, Cic, Design, Iir, OutputFormat, Rates, Scale
from .planner import REG_BITS, Plan, plan
from .spec import Spec

DATA_BITS = 24                 # internal full-scale deviation = 2**24
DATA_LIMIT = (1 << 30) - 1     # every filter node saturates here: 64x headroom over full scale
OUT_BITS = 16
ACC_LIMIT = (1 << 63) - 1


def spec_hash(spec: Spec) -> str:
    canon = json.dumps(spec.to_dict(), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(canon.encode()).hexdigest()[:16]


def _scale(p: Plan, spec: Spec) -> Scale:
    """Centre and gain from CIC units (2**-shift stamp intervals per grid period, times R**N)."""
    sig, out = spec.signal, spec.output
    fr = p.front
    shift = fr.phase_shift if fr.kind == "stamp" else fr.step_shift
    unit = Fraction(p.grid_hz * fr.prescale) / (Fraction(1 << shift) * p.ratio ** p.order)  # Hz per CIC LSB
    centre = round(Fraction(sig.if_hz) / unit)
    gain = unit / Fraction(out.full_scale_hz) * (1 << DATA_BITS)                      # data LSB per CIC LSB
    shift = 23 - math.floor(math.log2(gain))
    mult = round(gain * (1 << shift))
    if not (1 << 22) <= mult < (1 << 24) or shift < 1:
        raise ValueError(f"scale out of range: mult={mult} shift={shift}")
    return Scale(centre=centre, mult=mult, shift=shift, data_bits=DATA_BITS, limit=DATA_LIMIT)


def _iir(role: str, sos) -> Iir:
    q = iir.quantise(sos, iir.COEF_BITS)
    if max(abs(c) for sec in q for c in sec) >= (1 << 31) - 1:
        raise ValueError(f"{role}: a coefficient does not fit 32 bits")
    if iir.accumulator_bound(q, DATA_LIMIT) + (1 << (iir.COEF_BITS - 1)) > ACC_LIMIT:
        raise ValueError(f"{role}: 64-bit accumulator could overflow")
    return Iir(role=role, coef_bits=iir.COEF_BITS, limit=DATA_LIMIT,
               sections=tuple(Biquad(*s) for s in q),
               float_sos=tuple(tuple(float(c) for c in row) for row in sos))


def design(spec: Spec, chosen: Plan | None = None, scheme: str | None = None) -> Design:
    """The complete integer design for ``spec`` (planned here, with ``scheme`` forced if given,
    unless a plan is given)."""
    p = chosen or plan(spec, scheme)
    sig, out, tgt = spec.signal, spec.output, spec.target
    filters = [_iir(role, sos) for role, sos in iir.output_filters(sig.audio_hz, sig.deemphasis_us, out.rate_hz)]
    return Design(
        name=spec.name, tool_version=__version__, spec_hash=spec_hash(spec), scheme=p.scheme,
        rates=Rates(timer_hz=tgt.timer_hz, grid_hz=p.grid_hz, out_hz=out.rate_hz),
        front=p.front,
        cic=Cic(order=p.order, ratio=p.ratio, in_bits=p.cic_in_bits, width=REG_BITS),
        scale=_scale(p, spec),
        filters=tuple(filters),
        output=OutputFormat(format=out.format, shift=DATA_BITS - (OUT_BITS - 1), lo=-(1 << (OUT_BITS - 1)),
                            hi=(1 << (OUT_BITS - 1)) - 1),
        if_hz=sig.if_hz, full_scale_hz=out.full_scale_hz, audio_hz=sig.audio_hz,
        queue_len=p.queue_len,
        budget=Budget(core=tgt.core, cpu_hz=tgt.cpu_hz, dma=tgt.capture_dma if p.front.kind == "stamp" else tgt.counter_dma,
                      edge_hz_max=sig.if_hz + sig.deviation_hz, cycles_per_edge=p.load.per_edge,
                      cycles_per_input=p.load.per_input, cycles_per_grid=p.load.per_grid,
                      cycles_per_output=p.load.per_output, load_fraction=p.load.fraction, ram_bytes=p.load.ram_bytes,
                      variant=p.variant, isr_cycles=tgt.isr_cycles, irq_jitter_cycles=tgt.irq_jitter_cycles),
    )
