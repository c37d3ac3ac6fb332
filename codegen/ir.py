"""The Design: a frozen, serialisable description of every stage with its integer parameters.

Every decision is made before a Design exists (see ``build.design``); the emitter, the integer
model, the floating-point reference and the reports only read it.
"""

from __future__ import annotations

import dataclasses
import enum
import json
import types
import typing
from dataclasses import dataclass

from .standard import StandardTest, standard_test


class Topology(enum.Enum):
    """How the MCU sees the edges: the one typed value every consumer branches on (derived from the
    Design's scheme and front kind by ``Design.topology``)."""

    CAPTURE = "capture"  # timer input capture of every k-th edge; stamps by a capture ISR or DMA
    EDGE_STAMP = "edge-stamp"  # an edge interrupt reads a free-running timer and queues the value
    EDGE_COUNT = "edge-count"  # an edge interrupt counts; a grid-timer interrupt queues the count
    COUNTER = "counter"  # an IF-clocked hardware counter, read at every grid tick (ISR or DMA)

    @property
    def stamps(self) -> bool:
        """Inputs are timer values (a stamp front), not edge counts."""
        return self in (Topology.CAPTURE, Topology.EDGE_STAMP)


def variant_label(scheme: str, stamps: bool, prescale: int = 1, order: str = "linear") -> str:
    """The short name of a way of seeing the edges, one word: k<prescale>-<order> (capture),
    stamp-<order> (an edge interrupt that reads a timer), count (edge counts)."""
    if not stamps:
        return "count"
    pre = f"k{prescale}" if scheme == "timestamp" else "stamp"
    return f"{pre}-{order}"


@dataclass(frozen=True)
class StampFront:
    """Timer stamps -> unwrapped time -> phase on a uniform grid -> phase step per grid period.

    The interval from the previous stamp is its timer difference (modulo 2**timer_bits), taken as
    at most max_delta ticks, so that one stamp never makes more than max_delta / grid_ticks grid
    instants however long the silence or wild the value.

    Time is kept modulo 2**32 ticks; the phase in units of 2**-phase_shift stamp intervals (one
    stamp interval = ``prescale`` IF cycles). For the stamps t1 <= g < t2 that bracket a grid
    instant g (interval D = t2 - t1), ``order`` "linear" takes
        u = ratio_floor(g - t1, phase_shift, D);
    "cubic" also uses the stamps t0 before and t3 after, and corrects for the curvature of t(phase)
    through the four stamps (see ``edgetally.model.cubic_fraction``). The phase is
    count(t1) * 2**phase_shift + u; when D > gap_ticks no phase is formed and the step is
    ``x_centre`` (carrier lost). The step x = wrap_s32(phase - previous phase) must lie in
    [x_low, x_limit] (the band edges widened by the planner's over-deviation allowance); a step
    outside is not this carrier (a noise burst, a spurious edge) and is replaced by x_centre (muted)
    and counted. The first valid instant after a gap, or after inputs were lost, re-anchors the
    phase and is also fed x_centre (a resync), so a gap never turns into a click. The first grid
    instant lies ``grid_ticks`` after the first stamp ("linear") or the second stamp ("cubic")."""

    timer_bits: int
    prescale: int  # IF cycles between two stamps (capture prescaler)
    grid_ticks: int  # timer ticks per grid period
    phase_shift: int  # fractional bits of the phase per stamp interval
    gap_ticks: int  # longest stamp interval still taken as signal
    x_limit: int  # largest legal phase step per grid period
    x_centre: int  # phase step of the IF centre, used while the carrier is lost
    order: str = "linear"  # "linear" or "cubic"
    delta_limit: int = 0  # cubic: second differences of stamp times are clamped to +-delta_limit
    max_delta: int = 0  # a stamp interval is taken as at most this (a long gap is just a gap)
    x_low: int = 0  # smallest legal phase step per grid period
    divide: str = "reciprocal"  # quotients by one reciprocal per interval, or "division" (a divide per instant)
    kind: str = "stamp"


@dataclass(frozen=True)
class CountFront:
    """Edge counts read at every grid instant -> count step per grid period.

    x = (wrap of the count difference to counter_bits) << step_shift when the difference lies in
    [diff_low, diff_limit]; a difference outside is not this carrier and the step is x_centre
    (muted, counted). A run of more than gap_run zero differences means the carrier is lost, and the
    step is then x_centre; so it is for a difference that spans lost inputs."""

    counter_bits: int
    grid_ticks: int  # timer ticks per grid period (the grid timer runs at timer_hz)
    step_shift: int
    gap_run: int
    diff_limit: int  # largest legal count difference per grid period
    x_limit: int  # diff_limit << step_shift
    x_centre: int
    prescale: int = 1
    diff_low: int = 0  # smallest legal count difference per grid period
    kind: str = "count"


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
    """Centre removal and scaling: u = sat(rshr(wrap_s32(y - centre) * mult, shift), +-limit), in
    Q(q): full-scale deviation = 2**q. The offset tracker then follows the DC of u (the tuning
    offset): dc_acc += u - rshr(dc_acc, dc_shift), dc = rshr(dc_acc, dc_shift), a one-pole
    low-pass with a time constant of 2**dc_shift output samples; the filters get
    sat(u - dc, +-limit). ``limit`` is the data limit of the output chain (``Filters.limit``).

    How the C takes these (the same values; the certificate's scale and offset lines prove the
    words): ``product`` "s32" is one 32-bit product (|y - centre| mult + 2**(shift-1) < 2**31),
    "split" and "split_low" two 32-bit products of the halves of y - centre
    (``fixedpoint.split_scale``, mult < 2**15; shift >= 16, or below with the result in int32),
    "s64" a 64-bit one; ``word`` 32 keeps the offset tracker, the data word
    and the output word in 32-bit words, 64 in 64-bit ones."""

    centre: int
    mult: int
    shift: int
    q: int
    dc_shift: int
    product: str = "s64"
    word: int = 64


@dataclass(frozen=True)
class Section:
    """One direct form I section: acc = b0 x + b1 x1 + b2 x2 - a1 y1 - a2 y2 (Q(coef_bits)),
    y = sat(rshr(acc, coef_bits), +-limit). The b coefficients carry the change of format from the
    section's input Q(q_in) to its output Q(q_out) (per-section scaling)."""

    role: str  # "lowpass" or "deemphasis"
    b0: int
    b1: int
    b2: int
    a1: int
    a2: int
    q_out: int
    float_sos: tuple[float, ...]  # the unscaled, unquantised design row, for the reference
    # error feedback of the "shaped" arithmetic (fixedpoint.shaped_step): the section's last two
    # roundings enter its sum as - k1 e[n-1] - k2 e[n-2]; 0, 0 in every other arithmetic
    k1: int = 0
    k2: int = 0

    @property
    def fir(self) -> bool:
        """No recursion (a1 = a2 = 0): the droop compensator's sections."""
        return self.a1 == 0 and self.a2 == 0


@dataclass(frozen=True)
class Filters:
    """The output-rate sections and the word lengths they run with. With acc_bits 32 the five
    products (each exact in 32 bits) are summed modulo 2**32 and only the final sum must fit, as
    the certificate proves for any input (two's complement wrap of partial sums is harmless); with
    acc_bits 64 nothing can wrap."""

    data_bits: int  # 16 or 32: every section input, output and state word
    coef_bits: int  # Q format of the coefficients
    coef_width: int  # 16 or 32: their storage
    acc_bits: int  # 32, 48 (three 32-bit sums of split products) or 64
    scaling: str  # "l1", "l2" or "linf": the norm that set each q_out
    limit: int  # 2**(data_bits - 1) - 1: every node saturates here
    sections: tuple[Section, ...]
    # the "shaped" arithmetic: 32-bit sums as with acc_bits 32, each recursive section with error
    # feedback of its rounding (Section.k1, k2), FIR sections without the recursion's products
    shaped: bool = False


@dataclass(frozen=True)
class OutputFormat:
    """out = sat(rshr(v * lmul, rshift) + mid, lo, hi) (rshr only when rshift > 0); "s16" is signed
    PCM, "uN" an unsigned N-bit code with mid-scale at 2**(N-1) for a DAC or a PWM compare value.
    Values outside [lo, hi] are clipped and counted."""

    format: str
    rshift: int
    lmul: int
    mid: int
    lo: int
    hi: int
    ctype: str  # "int16_t" or "uint16_t"

    @property
    def bits(self) -> int:
        return output_bits(self.format)

    def fraction(self, codes):
        """Output codes -> fractions of full-scale deviation (floats)."""
        import numpy as np

        return (np.asarray(codes, dtype=np.float64) - self.mid) / 2.0 ** (self.bits - 1)


def output_bits(fmt: str) -> int:
    """Width of an output format's code: 16 for "s16", N for "uN"."""
    return 16 if fmt == "s16" else int(fmt[1:])


@dataclass(frozen=True)
class Squelch:
    """The noise squelch (designed in ``designer.squelch``, whose docstring gives the model). Per grid
    instant e = |x[k] - 2 x[k-1] + x[k-2]| of the CIC input, or ``penalty`` for a muted instant; their
    sum a over each CIC output period feeds lvl = min(lvl - (lvl >> shift) + a, cap). Closed while
    lvl > close_level until lvl < open_level; closed means every output sample is mid-scale. Starts
    closed with lvl = cap."""

    cnr_db: float  # the spec's signal.squelch_cnr_db: open at and above this IF CNR (Carson band)
    shift: int  # the level averages 2**shift output samples
    penalty: int  # e of a muted grid instant
    open_level: int
    close_level: int
    cap: int
    open_cnr_db: float  # the model's CNR at open_level (at or below cnr_db)
    close_cnr_db: float  # the model's CNR at close_level
    floor_limited: bool  # the counting noise floor, not cnr_db, set the levels
    edge_tone_db: float  # a full-deviation tone at the band edge alone, against close_level (dB)
    open_ms: float  # bound on the time to open on a carrier at cnr_db (from closed and capped)
    reopen_ms: float  # bound on the time to open on the clean standard test (from closed and capped)
    blind: bool = False  # counts that cannot tell noise from a carrier (designer.squelch); always open
    measured: bool = False  # levels from a simulation at design time, not the noise model (designer.squelch)
    level_bits: int = 64  # the level's word: 32 where cap + the largest sum stays below 2**32 (certificate)


@dataclass(frozen=True)
class DataLink:
    """The binary FSK data path (designed in ``designer.datalink``, whose docstring gives the loop
    design), once per output sample on v, the scaled frequency after the offset tracker (the data
    word the IIR sections get, Q(scale.q); its DC removal is the slicer's carrier-offset tracking):

      w = sat(rshr(v, in_shift), +-w_limit)           (in_shift 0: no shift), Q12 per full scale
      m = sum of the last ``taps`` w                    the filter matched to one bit
      y = rshr(m, y_shift)                              |y| about ``amplitude`` for a clean bit
      ph += step (mod 2**32)                           the bit clock; a wrap is a bit strobe,
                                                        the first sample after it with ph >= 2**31
                                                        the mid-bit strobe
    at a mid strobe: ym = sat(y, +-mid_limit); at a bit strobe: bit = (y > 0), a = +-1, then the
    zero-crossing timing detector e = ym (a - a_prev) (Gardner's detector with decisions in place
    of the end samples), the loop integ = sat(integ + e ki, +-integ_limit),
    corr = sat(e kp + integ, +-corr_limit), added to ph at the next mid strobe (where ph is near 2**31,
    so the jump never crosses a wrap: |corr| <= 2**29, step <= 2**30); the lock detector
    ay += |y| - (ay >> lock_shift), on a transition am += |ym| - (am >> lock_shift), locked while
    4 am < ay and ay >= lock_min; the bit into the ring (``ring_bits``) and the sync shift register;
    a sync match (at most sync_errors differing bits in the last sync_bits) starts a frame of
    frame_bytes bytes, MSB first.

    Manchester (chips 2): the loop above runs on chips; a data bit is a pair of chips, "10" a 1 and
    "01" a 0 (G. E. Thomas's convention; IEEE 802.3 uses the opposite), decided on the whole bit:
    a 1 when the first chip's y exceeds the second's. Which chips pair up is tracked by two leaky
    counts of equal-chip pairs (Manchester violations), one per alignment: vi = vi - (vi >> 3) + 8
    when the pair ending at a chip of parity i has equal chips; the pairing switches when the other
    alignment's count is lower by more than ``pair_margin``."""

    bit_rate_hz: float
    samples_per_bit: float  # output rate / bit rate
    in_shift: int
    w_limit: int
    taps: int
    y_shift: int
    amplitude: int  # |y| of a clean full-deviation bit (the detector's and the lock's scale)
    step: int
    mid_limit: int
    kp: int
    ki: int
    integ_limit: int
    corr_limit: int
    lock_shift: int
    lock_min: int
    ring_bits: int
    sync_word: int
    sync_bits: int
    sync_errors: int
    frame_bytes: int
    loop_bandwidth: float  # BnT the gains were designed for
    damping: float
    kind: str = "fsk"
    chips: int = 1  # channel symbols per bit: 1 (NRZ) or 2 (Manchester; the bit clock runs at the chip rate)
    pair_margin: int = 0  # Manchester: the violation-count lead that switches the pairing


@dataclass(frozen=True)
class Register:
    """One line of the overflow certificate: the worst |value| any input the spec allows can give
    (inputs are clamped at the front end, so "any edge pattern" is covered), against the width."""

    name: str
    bits: int
    bound: int
    margin_bits: float  # log2((2**(bits-1) - 1) / bound); >= 0 means it cannot wrap
    note: str


@dataclass(frozen=True)
class Rates:
    timer_hz: int
    grid_hz: int
    out_hz: int


@dataclass(frozen=True)
class Budget:
    """The planner's CPU and RAM estimate, printed into the emitted header (estimates, not measured)."""

    core: str
    cpu_hz: float
    dma: bool  # capture DMA (stamp fronts) or counter DMA (count fronts)
    edge_hz_max: float
    cycles_per_edge: int  # the edge or capture ISR; 0 when hardware or DMA does it
    cycles_per_input: int  # per stamp or count taken from the queue or a DMA block
    cycles_per_grid: int
    cycles_per_output: int
    load_fraction: float
    ram_bytes: int
    isr_cycles: int  # for simulating an edge interrupt's latency
    irq_jitter_cycles: int


@dataclass(frozen=True)
class Design:
    name: str
    tool_version: str
    spec_hash: str
    scheme: str  # "timestamp", "interrupt" or "counter"
    rates: Rates
    front: StampFront | CountFront
    cic: Cic
    scale: Scale
    filters: Filters
    output: OutputFormat
    if_hz: float
    full_scale_hz: float
    audio_hz: float
    queue_len: int  # stamps the capture ISR can queue between two services
    budget: Budget
    squelch: Squelch
    certificate: tuple[Register, ...] = ()
    data: DataLink | None = None  # the FSK data path after the offset tracker, or None (audio only)

    # --- derived facts: each defined once here, read by emit, the checks, the measurements ---

    @property
    def topology(self) -> Topology:
        if self.scheme == "timestamp":
            return Topology.CAPTURE
        if self.scheme == "interrupt":
            return Topology.EDGE_STAMP if self.front.kind == "stamp" else Topology.EDGE_COUNT
        return Topology.COUNTER

    @property
    def test(self) -> StandardTest:
        """The standard test for this design's audio band (``edgetally.standard``)."""
        return standard_test(self.audio_hz)

    @property
    def stamps(self) -> bool:
        """The inputs are timer values (capture or edge-interrupt stamps), not counts."""
        return self.front.kind == "stamp"

    @property
    def variant(self) -> str:
        """The planner's name of this way of seeing the edges (``variant_label``)."""
        return variant_label(self.scheme, self.stamps, self.front.prescale, getattr(self.front, "order", "linear"))

    @property
    def cubic(self) -> bool:
        """The stamp front interpolates through four stamps."""
        return self.stamps and self.front.order == "cubic"

    @property
    def recip(self):
        """The plan of the stamp front's division-free quotients (``fixedpoint.recip_plan``): every
        stamp interval up to the gap limit, at the phase shift; None for count fronts and for
        fronts that divide (cores with a divide instruction, or without a fast multiplier)."""
        if not self.stamps or self.front.divide != "reciprocal":
            return None
        from .fixedpoint import recip_plan

        return recip_plan(self.front.gap_ticks.bit_length(), self.front.phase_shift)

    @property
    def input_bits(self) -> int:
        """Width of one input: the timer's (stamps) or the counter's (counts)."""
        return self.front.timer_bits if self.stamps else self.front.counter_bits

    @property
    def input_ctype(self) -> str:
        return "uint16_t" if self.input_bits == 16 else "uint32_t"

    @property
    def fraction_bits(self) -> int:
        """Fraction bits of a CIC input step: the phase's per stamp interval, or the count's shift."""
        return self.front.phase_shift if self.stamps else self.front.step_shift

    @property
    def hz_per_cic_lsb(self) -> float:
        """Frequency (Hz) of one LSB of the CIC output."""
        c = self.cic
        return self.rates.grid_hz * self.front.prescale / (2.0**self.fraction_bits * c.ratio**c.order)

    @property
    def offset_hz_per_unit(self) -> float:
        """Hz per unit of the offset output (and of the scaled data word, Q(scale.q))."""
        return self.full_scale_hz / 2**self.scale.q

    @property
    def input_hz_max(self) -> float:
        """Inputs per second at the highest edge rate: stamps (every prescale-th edge) or grid reads."""
        return self.budget.edge_hz_max / self.front.prescale if self.stamps else float(self.rates.grid_hz)

    @property
    def word_lengths(self) -> dict:
        """The chosen word lengths in one flat record (verify's JSON, the report)."""
        f = self.filters
        return {
            "input_bits": self.input_bits,
            "step_fraction_bits": self.fraction_bits,
            "cic_in_bits": self.cic.in_bits,
            "cic_register_bits": self.cic.width,
            "data_bits": f.data_bits,
            "coef_bits": f.coef_bits,
            "coef_width": f.coef_width,
            "accumulator_bits": f.acc_bits,
            "error_feedback": [[s.k1, s.k2] for s in f.sections] if f.shaped else None,
            "scaling": f.scaling,
            "section_q": [s.q_out for s in f.sections],
            "output": self.output.format,
            "min_margin_bits": min(r.margin_bits for r in self.certificate),
        }

    def to_json(self) -> str:
        return json.dumps(dataclasses.asdict(self), indent=2, sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> Design:
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
    if origin in (typing.Union, types.UnionType):
        if value is None:
            return None
        kinds = {a.kind: a for a in typing.get_args(tp) if a is not type(None)}
        return _build(kinds[value["kind"]], value)
    if origin is tuple:
        args = typing.get_args(tp)
        inner = args[0]
        return tuple(_build(inner, v) for v in value)
    if tp is float:
        return float(value)
    return value
