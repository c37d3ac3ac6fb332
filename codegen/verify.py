"""verify(design) -> VerifyResult: the emitted C against the integer model (every sample), and the
quality of both against the floating-point reference and the planner's prediction.

The standard test: a 1 kHz tone at 70 % of full-scale deviation with random start phase and
modulation phase (``seed``), exact edge times, the timer's quantisation and wrap with a random
counter start value. The first LEAD_S seconds let the filters settle and are compared bit for bit
but left out of the SINAD figures.
"""

from __future__ import annotations

import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from . import hostbuild, metrics, model, reference, schemes, signals
from .ir import Design

LEAD_S = 0.1
DEFAULT_SEED = 20261202


@dataclass(frozen=True)
class VerifyResult:
    name: str
    scheme: str
    variant: str
    seconds: float
    seed: int
    inputs: int
    bit_exact: bool
    samples: int
    mismatches: int
    first_mismatch: int | None
    counters_match: bool
    sinad_db: float
    float_sinad_db: float
    predicted_sinad_db: float
    predicted_quant_sinad_db: float
    predicted_curvature_sinad_db: float
    predicted_jitter_sinad_db: float
    implementation_loss_db: float
    quant_gap_db: float        # how far the float reference falls short of the quantisation-only prediction
    gaps: int
    clamps: int
    saturations: int
    clips: int
    offset_hz: float           # the offset output at the end, in Hz
    c_seconds: float
    model_seconds: float
    widths: dict
    target_bit_exact: bool | None = None     # None: not run (no cross compiler or emulator)
    target: dict = None                       # per core: bit_exact, cycles per event, sizes

    def to_dict(self) -> dict:
        return asdict(self)


def variant_of(design: Design) -> schemes.Variant:
    fr = design.front
    return schemes.Variant(design.scheme, fr.kind, fr.prescale, getattr(fr, "order", "linear"))


def make_inputs(design: Design, seconds: float, seed: int, cnr_db: float | None = None,
                sig: signals.FmSignal | None = None) -> np.ndarray:
    """What the design's hardware delivers for LEAD_S + seconds of the standard test tone (or of
    ``sig``): capture stamps, software stamps from an edge interrupt, or counts per grid instant."""
    rng = np.random.default_rng(seed)
    if sig is None:
        sig = standard_signal(design, rng)
    duration = LEAD_S + seconds
    times = signals.edge_times(sig, duration)
    if cnr_db is not None:
        times = signals.add_jitter(times, sig, cnr_db, rng)
    return hardware_inputs(design, times, duration, rng)


def standard_signal(design: Design, rng: np.random.Generator) -> signals.FmSignal:
    """The standard test tone for this design (its start and modulation phases drawn from rng)."""
    return signals.test_tone(design.if_hz, design.full_scale_hz, schemes.TEST_LEVEL, schemes.TEST_TONE_HZ, rng)


def hardware_inputs(design: Design, times: np.ndarray, duration: float, rng: np.random.Generator,
                    start: int | None = None) -> np.ndarray:
    """What the design's hardware delivers for these IF edge times (s) over ``duration`` seconds:
    capture stamps of every prescale-th edge, software stamps read by an edge interrupt (with its
    latency), or counts read at each grid instant. The timer's or counter's start value is
    ``start``, or drawn from ``rng`` (an edge-counting interrupt starts at 0 unless given)."""
    fr, b = design.front, design.budget
    if fr.kind == "count":
        if start is None:
            start = 0 if design.scheme == "interrupt" else int(rng.integers(0, 1 << fr.counter_bits))
        return signals.counts_at(times, design.rates.grid_hz, duration, fr.counter_bits, start)
    if start is None:
        start = int(rng.integers(0, 1 << fr.timer_bits))
    if design.scheme == "interrupt":
        return signals.software_stamps(times, design.rates.timer_hz, fr.timer_bits, b.cpu_hz, b.isr_cycles // 2,
                                       b.irq_jitter_cycles, rng, start)
    return signals.capture(times[::fr.prescale], design.rates.timer_hz, fr.timer_bits, start)


def test_vectors(design: Design, seconds: float = 0.05, seed: int = DEFAULT_SEED):
    """Inputs of the standard test and the integer model's outputs, for the emitted unit test."""
    from .emit import Vectors

    inputs = make_inputs(design, seconds, seed)
    out = model.run(design, inputs).out
    return Vectors(tuple(int(v) for v in inputs), tuple(int(v) for v in out), seconds, seed)


def predict(design: Design) -> schemes.Prediction:
    """The planner's prediction for this design's rates and filters."""
    return schemes.predict(
        variant_of(design), if_hz=design.if_hz, full_scale_hz=design.full_scale_hz, timer_hz=design.rates.timer_hz,
        cpu_hz=design.budget.cpu_hz, irq_jitter_cycles=design.budget.irq_jitter_cycles,
        grid_hz=design.rates.grid_hz, out_hz=design.rates.out_hz, r=design.cic.ratio, n=design.cic.order,
        band_hz=design.audio_hz, post_sos=[np.array([list(s.float_sos) for s in design.filters.sections])])


def simulate_options(spec, plan_obj, seconds: float = 0.25, seed: int = DEFAULT_SEED) -> dict[tuple[str, str], float]:
    """SINAD of the float reference of every feasible option row of a plan, from a short
    simulation: the refinement of the planner's formulas that ``plan --simulate`` shows."""
    from .build import design as make_design
    from .planner import plan

    out = {}
    for o in plan_obj.options:
        if not o.feasible:
            continue
        d = make_design(spec, plan(spec, scheme=o.scheme, variant=o.variant, ratio=o.ratio))
        inputs = make_inputs(d, seconds, seed)
        ref = reference.run(d, inputs)
        skip = int(round(LEAD_S * d.rates.out_hz))
        out[(o.scheme, o.variant)] = round(metrics.sinad_db(ref[skip:], d.rates.out_hz, schemes.TEST_TONE_HZ,
                                                            schemes.BAND_LOW_HZ, d.audio_hz), 2)
    return out


TARGET_CORES = ("cortex-m0plus", "cortex-m4")
TARGET_SECONDS = 0.1


def target_check(design: Design, seed: int = DEFAULT_SEED, seconds: float = TARGET_SECONDS) -> dict:
    """The same C cross-compiled for each ARM core (-Os) and run in the Thumb emulator on the
    first ``seconds`` of the standard test: bit-exact against the model, the measured cycles per
    event (estimates from instruction counts, see edgetally.target), and cycles per output sample
    against the hand-written float baseline (edgetally.float_baseline). Empty when the cross
    compiler or the emulator is not installed."""
    from . import target, target_cycles, target_run

    if target.toolchain() is None or not target.emulator_available():
        return {}
    from . import float_baseline

    inputs = make_inputs(design, seconds, seed)
    want = model.run(design, inputs)
    bench = float_baseline.bench_inputs(design, seed)
    out = {}
    for core in TARGET_CORES:
        b = target.cross_build(design, core, "-Os")
        r = target_run.run(b, design, inputs)
        c = target_cycles.measure(b, design, inputs)
        _, int_cycles, _ = float_baseline.per_output(b, bench)
        with tempfile.TemporaryDirectory(prefix="edgetally-float-") as wd:
            _, flt_cycles, _ = float_baseline.per_output(float_baseline.float_build(design, core, Path(wd)), bench)
        out[core] = {
            "bit_exact": bool(np.array_equal(r.outputs, want.out)),
            "samples": int(r.outputs.size),
            "cycles_per_edge_isr": max(c.isr_cycles_with_entry.values(), default=0.0),
            "cycles_per_input": c.cycles_per_input, "cycles_per_grid": c.cycles_per_grid,
            "cycles_per_output": c.cycles_per_output, "flash_bytes": b.flash_demod + b.flash_runtime,
            "state_bytes": b.ram_state, "stack_bytes": c.stack_bytes, "cycle_method": c.method,
            "isr_cycles_with_entry": dict(c.isr_cycles_with_entry),
            # a whole process run divided by its outputs, for the emitted C and the hand-written
            # double-precision baseline alike (edgetally.float_baseline)
            "cycles_per_output_sample": round(int_cycles, 1), "float_cycles_per_output_sample": round(flt_cycles, 1),
            "float_ratio": round(flt_cycles / int_cycles, 2),
        }
        out[core]["load_fraction"] = measured_load(design, out[core])
    return out


def measured_load(design: Design, t: dict) -> float:
    """CPU fraction at the highest edge rate from cycles measured in the emulator: ISR calls (with
    exception entry and exit) at their event rates, inputs, grid instants and output samples."""
    fr, b, rates = design.front, design.budget, design.rates
    edge_hz = b.edge_hz_max
    isr = t["isr_cycles_with_entry"]
    if fr.kind == "stamp":
        input_hz = edge_hz / fr.prescale
        isr_load = 0.0 if (design.scheme == "timestamp" and b.dma) else sum(isr.values()) * input_hz
    else:
        input_hz = rates.grid_hz
        isr_load = 0.0
        for name, cyc in isr.items():
            if name.endswith("_edge_isr"):
                isr_load += cyc * edge_hz
            elif not (design.scheme == "counter" and b.dma):
                isr_load += cyc * rates.grid_hz
    work = input_hz * t["cycles_per_input"] + rates.grid_hz * t["cycles_per_grid"] + rates.out_hz * t["cycles_per_output"]
    return round((isr_load + work) / b.cpu_hz, 4)


def verify(design: Design, seconds: float = 1.0, seed: int = DEFAULT_SEED, cnr_db: float | None = None,
           progress: Callable[[str], None] | None = None, targets: bool = False) -> VerifyResult:
    """Run the whole check. ``progress`` (optional) is told each step as it starts; ``targets``
    adds the cross-compiled runs in the emulator (target_check)."""
    say = progress or (lambda _msg: None)
    if not seconds > 0:
        raise ValueError("seconds must be positive")
    say("simulating the FM test signal")
    stream = make_inputs(design, seconds, seed, cnr_db)
    say("compiling the emitted C (strict flags)")
    host = hostbuild.build(design)
    say(f"running the C on {stream.size} inputs")
    t0 = time.perf_counter()
    c_out, counters = host.process(stream)
    t1 = time.perf_counter()
    say("running the integer model")
    m = model.run(design, stream)
    t2 = time.perf_counter()
    tgt = {}
    if targets:
        say("cross-compiling for the target cores and running them in the emulator")
        tgt = target_check(design, seed)
    say("running the floating-point reference")
    ref = reference.run(design, stream)

    n = min(c_out.size, m.out.size)
    diff = np.flatnonzero(c_out[:n] != m.out[:n])
    mismatches = int(diff.size) + abs(c_out.size - m.out.size)
    first = int(diff[0]) if diff.size else (n if c_out.size != m.out.size else None)
    counters_match = all(counters[k] == getattr(m, k) for k in ("gaps", "clamps", "saturations", "clips"))

    fs = design.rates.out_hz
    skip = int(round(LEAD_S * fs))
    band = (schemes.BAND_LOW_HZ, design.audio_hz)
    fixed = metrics.sinad_db(c_out[skip:], fs, schemes.TEST_TONE_HZ, *band)
    flt = metrics.sinad_db(ref[skip:ref.size], fs, schemes.TEST_TONE_HZ, *band)
    pred = predict(design)
    fr, f = design.front, design.filters
    widths = {
        "input_bits": fr.timer_bits if fr.kind == "stamp" else fr.counter_bits,
        "step_fraction_bits": fr.phase_shift if fr.kind == "stamp" else fr.step_shift,
        "cic_in_bits": design.cic.in_bits,
        "cic_register_bits": design.cic.width,
        "data_bits": f.data_bits,
        "coef_bits": f.coef_bits,
        "coef_width": f.coef_width,
        "accumulator_bits": f.acc_bits,
        "scaling": f.scaling,
        "section_q": [s.q_out for s in f.sections],
        "output": design.output.format,
        "min_margin_bits": min(r.margin_bits for r in design.certificate),
    }
    return VerifyResult(
        name=design.name, scheme=design.scheme, variant=design.budget.variant, seconds=seconds, seed=seed, inputs=int(stream.size),
        bit_exact=(mismatches == 0 and counters_match), samples=int(n), mismatches=mismatches,
        first_mismatch=first, counters_match=counters_match,
        sinad_db=round(fixed, 2), float_sinad_db=round(flt, 2), predicted_sinad_db=round(pred.sinad_db, 2),
        predicted_quant_sinad_db=round(pred.quant_sinad_db, 2),
        predicted_curvature_sinad_db=round(pred.curvature_sinad_db, 2),
        predicted_jitter_sinad_db=round(pred.jitter_sinad_db, 2),
        implementation_loss_db=round(flt - fixed, 2) + 0.0,
        quant_gap_db=round(pred.quant_sinad_db - flt, 2) + 0.0, gaps=m.gaps, clamps=m.clamps,
        saturations=m.saturations, clips=m.clips,
        offset_hz=round(counters["offset"] * design.full_scale_hz / 2 ** design.scale.q, 3),
        c_seconds=round(t1 - t0, 4), model_seconds=round(t2 - t1, 4), widths=widths,
        target_bit_exact=all(v["bit_exact"] for v in tgt.values()) if tgt else None, target=tgt,
    )
