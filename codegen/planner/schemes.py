"""Counting schemes: how the MCU sees the edges, what that costs in CPU and RAM, and the noise it
leaves in the audio band.

Schemes and the front end each uses (DESIGN.md section 4):
- ``timestamp``: timer input capture of every k-th edge (k = capture prescaler), stamps by DMA or
  a short capture ISR -> phase interpolated on the grid ("stamp" front).
- ``interrupt``: a comparator or pin interrupt per edge. Variant "count": the ISR counts and a
  grid-timer ISR samples the count ("count" front). Variant "stamp": the ISR also reads a
  free-running timer, whose latency jitter adds to the timer's resolution ("stamp" front).
- ``counter``: a timer clocked by the IF counts edges in hardware, read at every grid tick by DMA
  or a tick ISR ("count" front). The free-running count is in effect the CIC's first integrator;
  the front end differences it anyway (one subtraction per grid instant) to check for a lost
  carrier and for glitches before the CIC integrates again.

Noise model (white-quantiser, see DESIGN.md section 4): the phase at each grid instant carries a
white error of variance sigma^2 (cycles^2). Differencing turns it into a frequency error with the
two-sided PSD 2 sigma^2 fs (1 - cos(2 pi f / fs)) Hz^2/Hz at the grid rate fs; the CIC shapes it and
folds it to the output rate; what lands in the audio band after the output filters (which shape
signal and noise alike) is the noise. The sources:

- count quantisation: sigma^2 = 1/12 (uniform error of a whole cycle): the first-order delta-sigma
  result N_B ~ (2 pi^2 / 9) B^3 / fs (Beards & Copeland, IEEE TCAS-II 41(1), 1994; Schreier & Temes
  2005, ch. 2), here with the CIC's aliasing and the filters' response included.
- timer quantisation: each stamp is off by a uniform error of one tick, so the interpolated phase
  error has variance  w * E[f^2] / (12 f_timer^2)  with w = E[sum of squared interpolation
  weights] = 2/3 for linear interpolation and CUBIC_WEIGHT for the four-stamp cubic. Measured on
  the examples this is 1.5 to 2.5 dB pessimistic (the stamp errors of a slowly swept period are
  not independent). A grid faster than the stamp rate gains nothing more (measured on campus_fm:
  the noise stops falling near the edge rate), so the level is held at the stamp rate.
- interrupt latency jitter: a uniform spread of J cycles at the CPU clock adds w E[f^2] J^2 /
  (12 f_cpu^2).
- interpolation residual: linear interpolation of a phase whose slope changes within one stamp
  interval D errs by (f'/2) tau (D - tau) at offset tau; for tau uniform on [0, D) its standard
  deviation is D^2 / sqrt(180) * f' / 2. The cubic through four stamps errs by the fourth-order
  term of the same expansion (our derivation, see ``predict``). The offsets of successive grid
  instants are not independent, and measured noise stops falling with the grid rate beyond about
  2/3 of the stamp rate, so the level is held there. Where the residual is large (a few stamps per
  cycle of the tone) this small-error model is rough.
- The count error is white only when the deviation spreads it: where the test deviation is under
  half the grid rate, the IF and the grid can be nearly commensurate and the error turns into
  tones. ``doubt`` says so; ``plan --simulate`` measures.

These are planning figures; verify measures the truth by simulation.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from . import costs
from ..dsp import cic
from ..cores import CORES
from ..ir import Design, variant_label
from .. import standard
from ..spec import Target

TEST_LEVEL = standard.LEVEL  # fraction of full-scale deviation of the standard test tone (edgetally.standard)


def _cubic_weight() -> float:
    """E over u in [0, 1) of the summed squared Lagrange weights of nodes -1, 0, 1, 2."""
    u = np.linspace(0.0, 1.0, 20001)
    w = [
        -u * (u - 1) * (u - 2) / 6,
        (u + 1) * (u - 1) * (u - 2) / 2,
        -(u + 1) * u * (u - 2) / 2,
        (u + 1) * u * (u - 1) / 6,
    ]
    return float(np.trapezoid(sum(x * x for x in w), u))


def _shape_var(shape) -> float:
    u = np.linspace(0.0, 1.0, 20001)
    p = shape(u)
    return float(np.trapezoid(p * p, u) - np.trapezoid(p, u) ** 2)


LINEAR_WEIGHT = 2.0 / 3.0
CUBIC_WEIGHT = _cubic_weight()
LINEAR_SHAPE_VAR = _shape_var(lambda u: u * (1 - u))  # 1/180
CUBIC_SHAPE_VAR = _shape_var(lambda u: u * (u + 1) * (u - 1) * (u - 2))


@dataclass(frozen=True)
class Variant:
    """One way of seeing the edges."""

    scheme: str  # "timestamp", "interrupt", "counter"
    front: str  # "stamp" or "count"
    prescale: int = 1
    order: str = "linear"  # stamp fronts: "linear" or "cubic"

    @property
    def label(self) -> str:
        """Short name, one word: k<prescale>-<order> (capture), stamp-<order> (edge interrupt that
        reads a timer), count (edge counts)."""
        return variant_label(self.scheme, self.front == "stamp", self.prescale, self.order)


def variants(tgt: Target) -> list[tuple[Variant, str | None]]:
    """Every variant with the reason it is impossible on this target (None if possible)."""
    out = []
    for k in tgt.capture_prescalers:
        why = None if tgt.has_capture else "the part has no input capture on the IF (target.has_capture)"
        for order in ("linear", "cubic"):
            out.append((Variant("timestamp", "stamp", k, order), why))
    no_irq = None if tgt.has_edge_irq else "the part has no edge interrupt on the IF (target.has_edge_irq)"
    out.append((Variant("interrupt", "count"), no_irq))
    for order in ("linear", "cubic"):
        out.append((Variant("interrupt", "stamp", 1, order), no_irq))
    out.append(
        (
            Variant("counter", "count"),
            None if tgt.has_counter else "the part has no IF-clocked counter (target.has_counter)",
        )
    )
    return out


@dataclass(frozen=True)
class Prediction:
    sinad_db: float  # all modelled sources together
    quant_sinad_db: float  # timer or count quantisation alone
    curvature_sinad_db: float  # interpolation curvature alone
    jitter_sinad_db: float  # interrupt latency jitter alone
    output_sinad_db: float  # the 16-bit output word alone


def _post_gain2(sos_list, f: np.ndarray, out_hz: float) -> np.ndarray:
    """|H(f)|^2 of the output-rate filters (float designs) in cascade."""
    g = np.ones_like(f, dtype=float)
    for sos in sos_list:
        _, h = signal.sosfreqz(np.asarray(sos), worN=f, fs=out_hz)
        g = g * np.abs(h) ** 2
    return g


def _band_noise(sigma2: float, grid_hz: float, out_hz: float, r: int, n: int, band_hz: float, post_sos=()) -> float:
    """In-band noise power (Hz^2) at the output from white phase noise sigma2 per grid sample.

    After decimation by R the output PSD at fo is the sum of the CIC-shaped input PSD over the R
    images fo + m * out_hz, m = 0..R-1 (one period of the grid-rate spectrum); the band power is
    twice the integral over [band_lo, band_hz] of the band's standard test (two-sided PSD). The power is linear in sigma2:
    the shaped integral for sigma2 = 1 is computed once per chain (the planner asks for it about a
    hundred times per plan)."""
    key = tuple(tuple(float(v) for v in row) for sos in post_sos for row in np.atleast_2d(sos))
    return sigma2 * _unit_band_noise(float(grid_hz), float(out_hz), int(r), int(n), float(band_hz), key)


@functools.lru_cache(maxsize=512)
def _unit_band_noise(grid_hz: float, out_hz: float, r: int, n: int, band_hz: float, rows: tuple) -> float:
    f = np.linspace(standard.band_lo_hz(band_hz), band_hz, 2001)
    total = np.zeros_like(f)
    for m in range(r):
        fa = f + m * out_hz
        h2 = 10 ** (cic.response_db(fa / out_hz, n, r) / 10)
        total += h2 * 2 * grid_hz * (1 - np.cos(2 * np.pi * fa / grid_hz))
    post = _post_gain2([np.array(rows)], f, out_hz) if rows else np.ones_like(f)
    return 2.0 * float(np.trapezoid(total * post, f))


def grid_error_vars(
    v: Variant,
    *,
    if_hz: float,
    full_scale_hz: float,
    timer_hz: float,
    cpu_hz: float,
    irq_jitter_cycles: int,
    grid_hz: float,
    band_hz: float,
) -> tuple[float, float, float]:
    """Per grid instant, the phase error variances (cycles^2) of the counting itself while the band's
    standard test plays: (quantisation, interpolation residual, interrupt latency jitter)."""
    test = standard.standard_test(band_hz)
    tone_hz = test.tone_hz
    dev = test.level * full_scale_hz
    ef2 = if_hz**2 + 0.5 * dev**2  # E[f^2] for a sinusoidal deviation
    sig_quant = sig_curv = sig_jit = 0.0
    if v.front == "count":
        sig_quant = 1.0 / 12.0
    else:
        w = CUBIC_WEIGHT if v.order == "cubic" else LINEAR_WEIGHT
        stamp_hz = if_hz / v.prescale
        held = max(1.0, grid_hz / stamp_hz)  # no gain from grids faster than the stamps
        sig_quant = w * ef2 / (12.0 * timer_hz**2) * held
        if v.scheme == "interrupt":
            sig_jit = w * ef2 * irq_jitter_cycles**2 / (12.0 * cpu_hz**2) * held
        # Interpolation residual for a tone: phase amplitude dev / (2 pi fm) times theta^2 / 2 (linear)
        # or theta^4 / 24 (cubic), theta = 2 pi fm k / f0 the tone's phase advance per stamp
        # interval, times the shape u(1 - u) or u(u + 1)(u - 1)(u - 2) over the interval; its
        # variance over u uniform in [0, 1) and over the tone's cycle (mean square 1/2).
        theta = 2 * math.pi * tone_hz * v.prescale / if_hz
        amp = dev / (2 * math.pi * tone_hz)
        if v.order == "linear":
            sig_curv = (amp * theta**2 / 2) ** 2 * LINEAR_SHAPE_VAR / 2
        else:
            sig_curv = (amp * theta**4 / 24) ** 2 * CUBIC_SHAPE_VAR / 2
        sig_curv *= max(1.0, grid_hz / ((2.0 / 3.0) * if_hz / v.prescale))
    return sig_quant, sig_curv, sig_jit


def predict(
    v: Variant,
    *,
    if_hz: float,
    full_scale_hz: float,
    timer_hz: float,
    cpu_hz: float,
    irq_jitter_cycles: int,
    grid_hz: float,
    out_hz: float,
    r: int,
    n: int,
    band_hz: float,
    post_sos=(),
) -> Prediction:
    """Predicted SINAD of the band's standard test (``edgetally.standard``)."""
    test = standard.standard_test(band_hz)
    tone_hz = test.tone_hz
    dev = test.level * full_scale_hz
    sig_quant, sig_curv, sig_jit = grid_error_vars(
        v,
        if_hz=if_hz,
        full_scale_hz=full_scale_hz,
        timer_hz=timer_hz,
        cpu_hz=cpu_hz,
        irq_jitter_cycles=irq_jitter_cycles,
        grid_hz=grid_hz,
        band_hz=band_hz,
    )
    tone = np.array([tone_hz])
    s_pow = (
        dev**2
        / 2
        * 10 ** (cic.response_db(tone_hz / out_hz, n, r) / 10)
        * float(_post_gain2(post_sos, tone, out_hz)[0])
    )
    lsb = full_scale_hz / 32768.0
    n_out = lsb**2 / 12.0 * (band_hz - test.band_lo_hz) / (out_hz / 2)
    parts = [
        _band_noise(s2, grid_hz, out_hz, r, n, band_hz, post_sos) if s2 else 0.0
        for s2 in (sig_quant, sig_curv, sig_jit)
    ]

    def db(noise):
        return 10 * math.log10(s_pow / noise) if noise > 0 else float("inf")

    return Prediction(db(sum(parts) + n_out), db(parts[0]), db(parts[1]), db(parts[2]), db(n_out))


SMALL_RATIO_DEN = 4  # IF / grid = p / q with q up to this counts as commensurate
RATIO_NEAR = 0.02  # how close to p / q (in units of 1 / q) counts as near


def doubt(v: Variant, *, if_hz: float, full_scale_hz: float, grid_hz: float, pred: Prediction) -> str | None:
    """Why the white-noise prediction may be far off for this option, or None."""
    if v.front == "stamp" and grid_hz > if_hz / v.prescale:
        return (
            "the grid is faster than the stamps, so grid errors are correlated and the tone's "
            "harmonics in the interpolation error are not modelled"
        )
    if v.front == "count" and TEST_LEVEL * full_scale_hz < grid_hz / 2:
        return (
            "the test deviation is under half the grid rate, so the count error can form tones "
            "(IF and grid nearly commensurate) instead of white noise"
        )
    if v.front == "count":
        ratio = if_hz / grid_hz
        for q in range(1, SMALL_RATIO_DEN + 1):
            if abs(ratio * q - round(ratio * q)) < RATIO_NEAR:
                return (
                    f"the IF is {round(ratio * q)}/{q} of the grid rate: near a small-integer ratio the "
                    "count error forms tones (DESIGN.md: +-4 dB) instead of white noise"
                )
    if min(pred.curvature_sinad_db, pred.quant_sinad_db) < 40 and pred.curvature_sinad_db < pred.quant_sinad_db:
        return "the interpolation residual is large (few stamps per cycle of the tone): the small-error model is rough"
    return None


@dataclass(frozen=True)
class Load:
    per_edge: int  # cycles per IF edge (the edge or capture ISR; 0 when hardware does it)
    per_input: int  # cycles per stamp or count processed in the main loop
    per_grid: int  # cycles per grid instant
    per_output: int  # cycles per output sample
    fraction: float  # of the CPU at the spec's clock, at the highest edge rate
    ram_bytes: int  # state size estimate (the queue included)


# Operation counts of the emitted C per event, in "ops" of the core profile's op_cycles, beside the
# divisions and 64-bit multiply-accumulates counted apart. Calibrated against the emitted C itself:
# -Os builds run in the Thumb emulator (edgetally.target, whose cycle figures are estimates from
# instruction classes), on the four examples, both ARM cores, rounded; within about 25 % of those
# figures. `plan --measured` replaces them by the measured figures for one design.
STAMP_INPUT_OPS = {"linear": 72, "cubic": 80}  # unwrap, bracket test, loop and queue bookkeeping
STAMP_GRID_OPS = {"linear": 60, "cubic": 110}  # interpolation (besides its multiplies), clamp
# The division-free quotients (edgetally.fixedpoint): a reciprocal per stamp interval (seed, two
# Newton steps, its correction), charged per grid instant (at most one interval starts per instant
# that uses it), then per quotient a multiply-shift and its correction; the cubic's 32-bit
# correction adds four products. (ops, 32-bit multiplies).
RECIP_COST = (30, 5)
QUOTIENT_COST = {"linear": (10, 2), "cubic": (20, 8)}
COUNT_INPUT_OPS = 40  # difference, zero run, clamp
GRID_OPS_PER_STAGE = 8  # each CIC integrator and comb, per grid instant
OUTPUT_OPS = 60  # combs' share, scale, offset tracker, output word
SECTION_OPS = {64: 100, 48: 70, 32: 45}  # a section's rounding, saturation and state moves
# the shaped arithmetic's sections in 32-bit words only (estimates, used where no calibrated table is)
SHAPED_OPS, FIR_OPS = 30, 18


def calibrated(tgt: Target) -> bool:
    """Whether ``tgt`` is priced from its core's calibrated table: it has one, and the spec did not
    give the part a divider or multiplier that the core's emulated build lacks (or the reverse)."""
    c = CORES[tgt.core]
    return costs.table(tgt.core) is not None and tgt.hw_divide == c.hw_divide and tgt.mul64 == c.mul64


def filter_cycles(
    tgt: Target, acc_bits: int, sections: int, data_bits: int = 32, coef_width: int = 32, fir: int | None = None
) -> int:
    """Cycles of the IIR sections per output sample: from the core's calibrated table for this
    arithmetic, or five products and their sums per section, as 32x32->64 multiply-accumulates
    (64-bit accumulators), exact 32-bit products, or (48: the split 27 x 16 form) three 16x16->32
    products each. ``fir`` (the shaped arithmetic): how many of the sections are FIR sections, which
    it runs without the recursion's products (its recursive sections take seven: the error feedback)."""
    table = costs.table(tgt.core) if calibrated(tgt) else None
    keys = (
        [(costs.arith_key(data_bits, coef_width, acc_bits), sections)]
        if fir is None
        else [(costs.shaped_key(False), sections - fir), (costs.shaped_key(True), fir)]
    )
    if table is not None:
        t = [table["output"]["section"].get(k) for k, _ in keys]
        if all(v is not None for v in t):
            return round(sum(v * n for v, (_, n) in zip(t, keys, strict=True)))
    mul = tgt.mac64_cycles if acc_bits == 64 else CORES[tgt.core].mul32_cycles
    if fir is not None:
        recursive = sections - fir
        return recursive * (7 * mul + SHAPED_OPS * tgt.op_cycles) + fir * (3 * mul + FIR_OPS * tgt.op_cycles)
    products = 15 if acc_bits == 48 else 5
    return sections * (products * mul + SECTION_OPS[acc_bits] * tgt.op_cycles)


# the words (accumulator, data, coefficient storage) of each arithmetic a spec can name
# ([fixed] arith), as edgetally.designer.wordlength.ARITHS gives them
NAMED_ARITHS = {"narrow": (32, 16, 16), "shaped": (32, 16, 16), "mid": (48, 27, 16), "wide": (64, 32, 32)}


def planned_filter_cycles(tgt: Target, sections: int, arith: str = "auto", fir: int = 0) -> int:
    """The sections' cost the planner charges. With ``arith`` "auto": the cheaper of the two
    arithmetics whose roundoff is negligible at any quality the planner can promise (the split
    27 x 16, offered on cores without a 32x32->64 multiply, and the wide 32 x 32); the designer then
    picks among all by predicted loss and cost and updates the figure. A spec that names its
    arithmetic is charged that one (the shaped one with its ``fir`` droop-compensator sections as
    FIR sections)."""
    if arith != "auto":
        acc, data, coef = NAMED_ARITHS[arith]
        return filter_cycles(tgt, acc, sections, data, coef, fir=fir if arith == "shaped" else None)
    wide = filter_cycles(tgt, 64, sections)
    # the split form's words: edgetally.designer.wordlength.MID (27-bit data, 16-bit coefficients)
    return wide if tgt.mul64 else min(wide, filter_cycles(tgt, 48, sections, 27, 16))


def fallback_arith(tgt: Target) -> str:
    """The arithmetic ``planned_filter_cycles`` prices "auto" with, by name."""
    return "wide" if tgt.mul64 else "split (mid) or wide"


def uses_reciprocal(tgt: Target) -> bool:
    """Whether the stamp front's quotients go through one reciprocal per interval: on cores with no
    divide instruction but a fast 32-bit multiply (measured: benchmarks/bench_division.py on the
    M0+ class); a divide instruction, or a software multiply (RV32EC, AVR), makes the plain
    division the cheaper one."""
    return not tgt.hw_divide and CORES[tgt.core].mul32_cycles <= 2


# Cycles per output sample of a data design's data path (the matched filter and the clock every
# sample, the loop, the ring and the framing once a bit, spread over 8 samples a bit), measured in
# the emulator by benchmarks/bench_datalink.py (2026-12-03, rerun after the 32-bit scale product;
# -Os, examples/weather_station_fsk.toml:
# the chain's cycles per output sample with the data path less without). Other cores: the
# Cortex-M4 figure in plain ALU steps times the core's op_cycles, an estimate. (The calibration
# fits the data path as a form of its own only so that it does not bias the base's figures.)
DATA_CYCLES = {"cortex-m0plus": 122, "cortex-m4": 69, "rv32imc": 73, "rv32ec": 104, "avr": 356}
DATA_OPS = 70


def data_cycles_per_output(core: str, op_cycles: int) -> int:
    """The data path's planned cycles per output sample on ``core`` (see DATA_CYCLES)."""
    return DATA_CYCLES.get(core, DATA_OPS * op_cycles)


def planned_forms(arith: str = "auto") -> tuple[str, ...]:
    """The base's word forms the planner charges (costs.base_forms): 64-bit words, as the
    arithmetics planned_filter_cycles prices for "auto" (and mid, wide) give them; 32-bit ones for a
    named narrow or shaped arithmetic. The designer then prices its design's own forms (form_cycles)."""
    return () if arith in ("narrow", "shaped") else ("word64",)


def form_cycles(tgt: Target, front: str, forms: tuple[str, ...], arith: str = "auto") -> int:
    """The extra cycles per output sample of the base's word ``forms`` (costs.base_forms) over the
    planner's (planned_forms), from the calibrated table; 0 without one (the op-count model prices
    one base)."""
    if not calibrated(tgt):
        return 0
    key = costs.arith_key(32, 32, 64)
    got = costs.output_cycles(tgt.core, front, key, 0, forms)
    planned = costs.output_cycles(tgt.core, front, key, 0, planned_forms(arith))
    return 0 if got is None or planned is None else round(got - planned)


def _calibrated_load(
    v: Variant, tgt: Target, sections: int, arith: str = "auto", fir: int = 0
) -> tuple[int, int, int, int] | None:
    """(per_edge, per_input, per_grid, per_output) from the core's calibrated table, with the
    exception entry and exit of each ISR from the target (the profile's or the spec's), or None
    where the table lacks a figure. The output path is planned as in ``load`` (planned_filter_cycles)."""
    if not calibrated(tgt):
        return None
    core, isr = tgt.core, tgt.isr_cycles
    bits = tgt.timer_bits if v.front == "stamp" else tgt.counter_bits
    per_input = costs.lookup(core, "input", costs.input_key(v.front, v.order, bits))
    grid = costs.lookup(core, "grid", costs.grid_key(v.front, v.order))
    base = costs.output_cycles(core, v.front, costs.arith_key(32, 32, 64), 0, planned_forms(arith))
    if v.front == "stamp":
        body = costs.lookup(core, "isr", costs.isr_key("edge" if v.scheme == "interrupt" else "capture", "stamp"))
        per_edge = None if body is None else (0 if (v.scheme != "interrupt" and tgt.capture_dma) else isr + body)
        per_grid = grid
    else:
        per_edge = 0
        if v.scheme == "interrupt":
            body = costs.lookup(core, "isr", costs.isr_key("edge", "count"))
            per_edge = None if body is None else isr + body
        tick = (
            0.0
            if (v.scheme == "counter" and tgt.counter_dma)
            else costs.lookup(core, "isr", costs.isr_key("tick", "count"))
        )
        per_grid = None if (grid is None or tick is None) else grid + (isr + tick if tick else 0)
    if per_input is None or per_grid is None or per_edge is None or base is None:
        return None
    return (
        round(per_edge),
        round(per_input),
        round(per_grid),
        round(base + planned_filter_cycles(tgt, sections, arith, fir)),
    )


def load(
    v: Variant,
    tgt: Target,
    *,
    edge_hz_max: float,
    grid_hz: float,
    out_hz: float,
    n: int,
    sections: int,
    queue_len: int,
    data: bool = False,
    arith: str = "auto",
    fir: int = 0,
) -> Load:
    """Estimated cycles and RAM: from the core's calibrated table (edgetally.planner.costs) where it
    has one, else from the profile figures and the op counts above; ``data``: a data design's data
    path too (data_cycles_per_output); ``arith``, ``fir``: the spec's named arithmetic and the droop
    compensator's sections (planned_filter_cycles)."""
    op, isr = tgt.op_cycles, tgt.isr_cycles
    stamp_rate = edge_hz_max / v.prescale
    # the scale product, the sections (planned_filter_cycles; the designer may then pick a cheaper
    # arithmetic and updates the figure), and the rest of the output path
    per_output = (
        (OUTPUT_OPS + GRID_OPS_PER_STAGE * n) * op + tgt.mac64_cycles + planned_filter_cycles(tgt, sections, arith, fir)
    )
    cic = GRID_OPS_PER_STAGE * n * op
    if v.front == "stamp":
        per_input = STAMP_INPUT_OPS[v.order] * op
        divs = 2 if v.order == "cubic" else 1
        if uses_reciprocal(tgt):
            ops = RECIP_COST[0] + QUOTIENT_COST[v.order][0] + STAMP_GRID_OPS[v.order]
            muls = RECIP_COST[1] + QUOTIENT_COST[v.order][1]
            per_grid = ops * op + muls * CORES[tgt.core].mul32_cycles + cic
        else:
            muls = QUOTIENT_COST[v.order][1] - 2 * divs  # the cubic's own products
            per_grid = (
                divs * tgt.div32_cycles + muls * CORES[tgt.core].mul32_cycles + STAMP_GRID_OPS[v.order] * op + cic
            )
        if v.scheme == "interrupt":
            per_edge = isr + 12 * op  # read timer, queue the stamp
        else:
            per_edge = 0 if tgt.capture_dma else isr + 8 * op  # queue the stamp
        cycles = stamp_rate * (per_edge + per_input) + grid_hz * per_grid
        in_bytes = 2 if tgt.timer_bits == 16 else 4
    else:
        per_input = COUNT_INPUT_OPS * op + cic
        per_grid = 0 if (v.scheme == "counter" and tgt.counter_dma) else isr + 6 * op  # tick ISR queues
        per_edge = isr + 3 * op if v.scheme == "interrupt" else 0  # the edge ISR counts
        cycles = edge_hz_max * per_edge + grid_hz * (per_grid + per_input)
        in_bytes = 2 if tgt.counter_bits == 16 else 4
    cal = _calibrated_load(v, tgt, sections, arith, fir)
    if cal is not None:
        per_edge, per_input, per_grid, per_output = cal
        if v.front == "stamp":
            cycles = stamp_rate * (per_edge + per_input) + grid_hz * per_grid
        else:
            cycles = edge_hz_max * per_edge + grid_hz * (per_grid + per_input)
    if data:
        per_output += data_cycles_per_output(tgt.core, op)
    cycles += out_hz * per_output
    ram = 4 * (10 + 2 * n) + 16 * sections + queue_len * in_bytes + (8 if v.order == "cubic" else 0)
    return Load(per_edge, per_input, per_grid, per_output, cycles / tgt.cpu_hz, ram)


def variant_of(design: Design) -> Variant:
    fr = design.front
    return Variant(design.scheme, fr.kind, fr.prescale, getattr(fr, "order", "linear"))


def predict_design(design: Design) -> Prediction:
    """The planner's prediction for this design's rates and filters."""
    return predict(
        variant_of(design),
        if_hz=design.if_hz,
        full_scale_hz=design.full_scale_hz,
        timer_hz=design.rates.timer_hz,
        cpu_hz=design.budget.cpu_hz,
        irq_jitter_cycles=design.budget.irq_jitter_cycles,
        grid_hz=design.rates.grid_hz,
        out_hz=design.rates.out_hz,
        r=design.cic.ratio,
        n=design.cic.order,
        band_hz=design.audio_hz,
        post_sos=[np.array([list(s.float_sos) for s in design.filters.sections])],
    )
