"""design(spec) -> Design: turns the plan into the integer parameters of every stage."""

from __future__ import annotations

import hashlib
import json
import math
from fractions import Fraction

from . import __version__, iir
from .ir import Biquad, Budget, Cic, Design, Iir, OutputFormat, Rates, Scale, StampFront
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
    unit = Fraction(p.grid_hz) / (Fraction(1 << p.phase_shift) * p.ratio ** p.order)  # Hz per CIC LSB
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


def _queue_len(spec: Spec) -> int:
    """Stamps the capture ISR may queue between two services: four output periods at the highest
    edge rate, rounded up to a power of two (at least 16)."""
    per_out = (spec.signal.if_hz + spec.signal.deviation_hz) / spec.output.rate_hz
    return max(16, 1 << math.ceil(math.log2(4 * per_out)))


def design(spec: Spec, chosen: Plan | None = None) -> Design:
    """The complete integer design for ``spec`` (planned here unless a plan is given)."""
    p = chosen or plan(spec)
    sig, out, tgt = spec.signal, spec.output, spec.target
    x_centre = round(Fraction(sig.if_hz) / p.grid_hz * (1 << p.phase_shift))
    front = StampFront(timer_bits=tgt.timer_bits, prescale=1, grid_ticks=p.grid_ticks, phase_shift=p.phase_shift,
                       gap_ticks=p.gap_ticks, x_limit=p.x_limit, x_centre=x_centre)
    filters = [_iir(role, sos) for role, sos in iir.output_filters(sig.audio_hz, sig.deemphasis_us, out.rate_hz)]
    return Design(
        name=spec.name, tool_version=__version__, spec_hash=spec_hash(spec), scheme=p.scheme,
        rates=Rates(timer_hz=tgt.timer_hz, grid_hz=p.grid_hz, out_hz=out.rate_hz),
        front=front,
        cic=Cic(order=p.order, ratio=p.ratio, in_bits=p.cic_in_bits, width=REG_BITS),
        scale=_scale(p, spec),
        filters=tuple(filters),
        output=OutputFormat(format=out.format, shift=DATA_BITS - (OUT_BITS - 1), lo=-(1 << (OUT_BITS - 1)),
                            hi=(1 << (OUT_BITS - 1)) - 1),
        if_hz=sig.if_hz, full_scale_hz=out.full_scale_hz, audio_hz=sig.audio_hz,
        queue_len=_queue_len(spec),
        budget=Budget(core=tgt.core, cpu_hz=tgt.cpu_hz, capture_dma=tgt.capture_dma,
                      edge_hz_max=sig.if_hz + sig.deviation_hz, cycles_per_stamp=p.load.per_stamp,
                      cycles_per_grid=p.load.per_grid, cycles_per_output=p.load.per_output,
                      load_fraction=p.load.fraction),
    )
