"""The target check: the emitted C cross-compiled for each emulated core, run on the start of the
standard test, compared with the integer model, with cycles per event, an instruction-set check of
the ELF and the hand-written float baseline.

``TARGET_CORES`` is the one list of emulated cores (the CLI and verify use it).
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass, field

import numpy as np

from ..check import model
from ..ir import Design, Topology
from ..stimulus.inputs import DEFAULT_SEED, make_inputs
from .build import TARGETS

TARGET_CORES = tuple(TARGETS)
TARGET_SECONDS = 0.1
# simavr runs about 10 million AVR instructions a second here and an AVR needs several times the
# instructions of a 32-bit core per input: its bit-exact run covers the first inputs only.
MAX_INPUTS = {"avr": 6000}
ISR_INPUTS = 1000  # the ISR path's per-call costs


@dataclass
class CoreCheck:
    """One core's result (``to_dict`` gives the verify JSON's per-core object)."""

    core: str
    bit_exact: bool
    samples: int
    inputs: int
    cycles_per_edge_isr: float
    cycles_per_input: float
    cycles_per_grid: float
    cycles_per_output: float
    flash_bytes: int
    state_bytes: int
    stack_bytes: int
    cycle_method: str
    isr_cycles_with_entry: dict[str, float]
    # a whole process run divided by its outputs, for the emitted C and the hand-written float
    # baseline alike (edgetally.target.float_baseline): single precision, on the FPU where the core
    # has one; double precision as an extra column
    cycles_per_output_sample: float
    float_cycles_per_output_sample: float
    float_ratio: float  # float cycles / integer cycles: below 1 means float is faster
    float_fpu: bool
    double_cycles_per_output_sample: float
    double_ratio: float
    isa_violations: list[str] = field(default_factory=list)
    load_fraction: float = 0.0
    bits: int = 0  # a data design's decided bits, compared with the model's in full (0: none)

    def to_dict(self) -> dict:
        return asdict(self)


def available_cores() -> tuple[str, ...]:
    """The emulated cores whose cross compiler and emulator are installed here."""
    from .build import available

    return tuple(c for c in TARGET_CORES if available(c))


class _Models:
    """The integer model's runs on prefixes of one input stream, each made once (thread-safe)."""

    def __init__(self, design: Design, inputs: np.ndarray):
        import threading

        self.runs: dict = {}
        self.design, self.inputs, self.lock = design, inputs, threading.Lock()

    def prefix(self, n: int):
        n = min(n, self.inputs.size)
        with self.lock:
            if n not in self.runs:
                self.runs[n] = model.run(self.design, self.inputs[:n])
            return self.runs[n]


def check_core(
    design: Design,
    core: str,
    inputs: np.ndarray,
    bench: np.ndarray,
    emitted: dict[str, str] | None = None,
    models: _Models | None = None,
) -> CoreCheck:
    """Build ``design`` for ``core`` once (-Os), run it on ``inputs`` (at least WARM + N of the
    float baseline) against the model, measure the cycles per event and per output sample over
    inputs [WARM, WARM + N), check its instructions, and compare with the float baseline on
    ``bench`` (the same window). ``emitted`` and ``models`` let several cores share the emitted C and the
    model's runs."""
    from . import build as target
    from . import cycles as target_cycles
    from . import float_baseline
    from . import isa
    from . import run as target_run

    models = models or _Models(design, inputs)
    inputs = np.ascontiguousarray(inputs[: MAX_INPUTS.get(core, inputs.size)])
    W, N = float_baseline.WARM, float_baseline.N
    b = target.cross_build(design, core, "-Os", emitted=emitted)
    x: np.ndarray = inputs.astype(b.input_dtype)
    # One run of all the inputs through <name>_process, counted by role over inputs [W, W + N): the
    # bit-exact comparison, the per-event costs and the whole-run cost per output sample at once.
    rl, entries = target_cycles.roles(b, design)
    m = target_run.machine(b)
    prof = target_cycles.Profiler(m, b, rl, entries)
    m.call("harness_init")
    bits: list | None = [] if design.data is not None else None
    ring = design.data.ring_bits if design.data is not None else 0
    chunks = target_run.feed_process(m, b, x[:W], b.in_len, bits, ring)
    prof.start()
    window = target_run.feed_process(m, b, x[W : W + N], b.in_len, bits, ring)
    prof.stop()
    chunks += window + target_run.feed_process(m, b, x[W + N :], b.in_len, bits, ring)
    outputs = np.concatenate(chunks)
    want, before, upto = models.prefix(inputs.size), models.prefix(W), models.prefix(W + N)
    n_out = int(upto.out.size - before.out.size)
    if sum(c.size for c in window) != n_out:
        raise target.TargetRunError(
            f"{core}: the measured window made {sum(c.size for c in window)} outputs, the model {n_out}"
        )
    t = prof.result()
    t_isr, isr_stack = target_cycles.isr_tally(b, design, x[:ISR_INPUTS], rl, entries)
    c = target_cycles.costs(
        b, design, t, N, int(upto.steps.size - before.steps.size), n_out, t_isr, max(m.stack_used(), isr_stack)
    )
    int_cycles = sum(t.cycles.values()) / n_out
    base = float_baseline.baseline(design, core, bench)
    bits_equal = True
    if bits is not None:  # every decided bit of the data path, in full
        got_bits = np.concatenate(bits) if bits else np.zeros(0, dtype=np.uint8)
        bits_equal = bool(np.array_equal(got_bits, want.data.bits))
    out = CoreCheck(
        core=core,
        bit_exact=bool(np.array_equal(outputs, want.out)) and bits_equal,
        bits=0 if bits is None else int(sum(c.size for c in bits)),
        samples=int(outputs.size),
        inputs=int(inputs.size),
        cycles_per_edge_isr=max(c.isr_cycles_with_entry.values(), default=0.0),
        cycles_per_input=c.cycles_per_input,
        cycles_per_grid=c.cycles_per_grid,
        cycles_per_output=c.cycles_per_output,
        flash_bytes=b.flash_demod + b.flash_runtime,
        state_bytes=b.ram_state,
        stack_bytes=c.stack_bytes,
        cycle_method=c.method,
        isr_cycles_with_entry=dict(c.isr_cycles_with_entry),
        cycles_per_output_sample=round(int_cycles, 1),
        float_cycles_per_output_sample=round(base.single.cycles, 1),
        float_ratio=round(base.single.cycles / int_cycles, 2),
        float_fpu=base.fpu,
        double_cycles_per_output_sample=round(base.double.cycles, 1),
        double_ratio=round(base.double.cycles / int_cycles, 2),
        isa_violations=[str(v) for v in isa.violations(b)],
    )
    out.load_fraction = measured_load(design, out)
    return out


def target_check(
    design: Design, seed: int = DEFAULT_SEED, seconds: float = TARGET_SECONDS, cores: tuple[str, ...] | None = None
) -> dict:
    """The same C cross-compiled for each emulated core (-Os) and run on the first ``seconds`` of
    the standard test: bit-exact against the model, the measured cycles per event, the instruction-
    set check, and cycles per output sample against the hand-written float baseline. The cores run
    two at a time (the emulators and compilers release the interpreter). Returns {core: the
    CoreCheck as a dict} for the cores installed here (empty when none is)."""
    from . import float_baseline

    todo = [c for c in (cores or available_cores()) if c in TARGETS]
    if not todo:
        return {}
    from ..emit import emit

    if design.data is not None:  # the data path's bits through noise, rate error and offset
        from ..stimulus import fsk

        # long enough for the float baseline's window (WARM + N inputs at the IF centre's input rate)
        rate = design.if_hz / design.front.prescale if design.stamps else design.rates.grid_hz
        need = 1.2 * (float_baseline.WARM + float_baseline.N) / rate
        inputs = fsk.data_test(design, max(seconds, need), seed)[0].inputs
    else:
        inputs = make_inputs(design, seconds, seed)
    if inputs.size < float_baseline.WARM + float_baseline.N:  # the float baseline's window must fit
        inputs = float_baseline.bench_inputs(design, seed)
    bench = inputs
    emitted, models = emit(design), _Models(design, inputs)
    # the slowest (the AVR in simavr) first, so that the two workers finish together
    todo.sort(key=lambda c: c != "avr")
    with ThreadPoolExecutor(max_workers=2) as pool:
        res = list(pool.map(lambda core: check_core(design, core, inputs, bench, emitted, models), todo))
    res.sort(key=lambda r: TARGET_CORES.index(r.core))
    return {r.core: r.to_dict() for r in res}


def measured_load(design: Design, t: CoreCheck) -> float:
    """CPU fraction at the highest edge rate from cycles measured in the emulator: ISR calls (with
    exception entry and exit) at their event rates, inputs, grid instants and output samples."""
    b, rates = design.budget, design.rates
    edge_hz = b.edge_hz_max
    isr = t.isr_cycles_with_entry
    topo = design.topology
    if design.stamps:
        input_hz = design.input_hz_max
        isr_load = 0.0 if (topo is Topology.CAPTURE and b.dma) else sum(isr.values()) * input_hz
    else:
        input_hz = rates.grid_hz
        isr_load = 0.0
        for name, cyc in isr.items():
            if name.endswith("_edge_isr"):
                isr_load += cyc * edge_hz
            elif not (topo is Topology.COUNTER and b.dma):
                isr_load += cyc * rates.grid_hz
    work = input_hz * t.cycles_per_input + rates.grid_hz * t.cycles_per_grid + rates.out_hz * t.cycles_per_output
    return round((isr_load + work) / b.cpu_hz, 4)
