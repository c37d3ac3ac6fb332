"""The Design: a frozen, serialisable description of every stage with its integer parameters.

Every decision is made before a Design exists (see ``build.design``); the emitter, the integer
model, the floating-point reference and the reports only read it.
"""

from __future__ import annotations

import dataclasses
import json
import typing
from dataclasses import dataclass


@dataclass(frozen=True)
class StampFront:
    """Timer stamps -> unwrapped time -> phase on a uniform grid -> phase step per grid period.

    Time is kept modulo 2**32 ticks. A grid instant g lies ``grid_ticks`` after the previous one,
    the first one ``grid_ticks`` after the first stamp. For the stamps t_prev <= g < t_next that
    bracket it (interval D = t_next - t_prev) the phase, in units of 2**-phase_shift stamp
    intervals, is  count(t_prev) * 2**phase_shift + ratio_floor(g - t_prev, phase_shift, D);
    when D > gap_ticks no phase is formed and the step is ``x_centre`` (carrier lost).
    The step x = wrap_s32(phase - previous phase) is clamped to [0, x_limit]."""

    timer_bits: int
    prescale: int          # IF cycles between two stamps (capture prescaler), 1 here
    grid_ticks: int        # timer ticks per grid period
    phase_shift: int       # fractional bits of the phase per stamp interval
    gap_ticks: int         # longest stamp interval still taken as signal
    x_limit: int           # largest legal phase step per grid period
    x_centre: int          # phase step of the IF centre, used while the carrier is lost


@dataclass(frozen=True)
class Cic:
    """Hogenauer CIC decimator, all registers ``width`` bits with wrap-around (harmless because
    width >= in_bits + ceil(order * log2(ratio)))."""

    order: int
    ratio: int
    in_bits: int
    width: int


@dataclass(frozen=True)
class Scale:
    """Centre removal and scaling: u = sat(rshr(wrap_s32(y - centre) * mult, shift), +-limit);
    full-scale deviation becomes 2**data_bits."""

    centre: int
    mult: int
    shift: int
    data_bits: int
    limit: int


@dataclass(frozen=True)
class Biquad:
    b0: int
    b1: int
    b2: int
    a1: int
    a2: int


@dataclass(frozen=True)
class Iir:
    """Direct form I sections in Q(coef_bits) with 64-bit accumulators:
    y = sat(rshr(b0 x + b1 x1 + b2 x2 - a1 y1 - a2 y2, coef_bits), +-limit)."""

    role: str                      # "lowpass" or "deemphasis"
    coef_bits: int
    limit: int
    sections: tuple[Biquad, ...]
    float_sos: tuple[tuple[float, ...], ...]   # the unquantised design, for the reference


@dataclass(frozen=True)
class OutputFormat:
    """out = sat(rshr(v, shift), lo, hi)."""

    format: str
    shift: int
    lo: int
    hi: int


@dataclass(frozen=True)
class Rates:
    timer_hz: int
    grid_hz: int
    out_hz: int


@dataclass(frozen=True)
class Budget:
    """The planner's CPU estimate, printed into the emitted header (estimates, not measurements)."""

    core: str
    cpu_hz: float
    capture_dma: bool
    edge_hz_max: float
    cycles_per_stamp: int
    cycles_per_grid: int
    cycles_per_output: int
    load_fraction: float


@dataclass(frozen=True)
class Design:
    name: str
    tool_version: str
    spec_hash: str
    scheme: str
    rates: Rates
    front: StampFront
    cic: Cic
    scale: Scale
    filters: tuple[Iir, ...]
    output: OutputFormat
    if_hz: float
    full_scale_hz: float
    audio_hz: float
    queue_len: int         # stamps the capture ISR can queue between two services
    budget: Budget

    def to_json(self) -> str:
        return json.dumps(dataclasses.asdict(self), indent=2, sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> "Design":
        return _build(cls, json.loads(text))


def _build(tp, value):
    """Rebuild nested frozen dataclasses (and tuples of them) from plain JSON values."""
    origin = typing.get_origin(tp)
    if dataclasses.is_dataclass(tp):
        hints = typing.get_type_hints(tp)
        unknown = set(value) - {f.name for f in dataclasses.fields(tp)}
        if unknown:
            raise ValueError(f"{tp.__name__}: unknown fields {sorted(unknown)}")
        return tp(**{f.name: _build(hints[f.name], value[f.name]) for f in dataclasses.fields(tp)})
    if origin is tuple:
        args = typing.get_args(tp)
        inner = args[0]
        return tuple(_build(inner, v) for v in value)
    if tp is float:
        return float(value)
    return value
