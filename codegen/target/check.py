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
from ..target.build import TARGETS

TARGET_CORES = tuple(TARGETS)
TARGET_SECONDS = 0.1
# simavr runs about 10 million AVR instructions a second here and an AVR needs several times the
# instructions of a 32-bit core per input: its bit-exact run covers the first inputs only.
MAX_INPUTS = {"avr": 6000}


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
    float_ratio: float               # float cycles / integer cycles: below 1 means float is faster
    float_fpu: bool
    double_cycles_per_output_sample: float
    double_ratio: float
    isa_violations: list[str] = field(default_factory=list)
    load_fraction: float = 0.0

    def to_dict(self) -> dict:
        return asdict(self)


def available_cores() -> tuple[str, ...]:
    """The emulated cores whose cross compiler and emulator are installed here."""
    from ..target.build import available

    return tuple(c for c in TARGET_CORES if available(c))


def check_core(design: Design, core: str, inputs: np.ndarray, bench: np.ndarray) -> CoreCheck:
    """Build ``design`` for ``core`` once (-Os), run it on ``inputs`` against the model, measure the
    cycles per event and per output sample, check its instructions, and compare with the float
    baseline on ``bench``."""
    from ..target import build as target
    from ..target import cycles as target_cycles
    from ..target import float_baseline
    from ..target import isa
    from ..target import run as target_run

    inputs = inputs[:MAX_INPUTS.get(core, inputs.size)]
    want = model.run(design, inputs)
    b = target.cross_build(design, core, "-Os")
    r = target_run.run(b, design, inputs)
    c = target_cycles.measure(b, design, inputs)
    integer = float_baseline.per_output(b, bench)
    base = float_baseline.baseline(design, core, bench)
    out = CoreCheck(
        core=core, bit_exact=bool(np.array_equal(r.outputs, want.out)), samples=int(r.outputs.size),
        inputs=int(inputs.size), cycles_per_edge_isr=max(c.isr_cycles_with_entry.values(), default=0.0),
        cycles_per_input=c.cycles_per_input, cycles_per_grid=c.cycles_per_grid, cycles_per_output=c.cycles_per_output,
        flash_bytes=b.flash_demod + b.flash_runtime, state_bytes=b.ram_state, stack_bytes=max(c.stack_bytes, r.stack_bytes),
        cycle_method=c.method, isr_cycles_with_entry=dict(c.isr_cycles_with_entry),
        cycles_per_output_sample=round(integer.cycles, 1),
        float_cycles_per_output_sample=round(base.single.cycles, 1),
        float_ratio=round(base.single.cycles / integer.cycles, 2), float_fpu=base.fpu,
        double_cycles_per_output_sample=round(base.double.cycles, 1),
        double_ratio=round(base.double.cycles / integer.cycles, 2),
        isa_violations=[str(v) for v in isa.violations(b)])
    out.load_fraction = measured_load(design, out)
    return out


def target_check(design: Design, seed: int = DEFAULT_SEED, seconds: float = TARGET_SECONDS,
                 cores: tuple[str, ...] | None = None) -> dict:
    """The same C cross-compiled for each emulated core (-Os) and run on the first ``seconds`` of
    the standard test: bit-exact against the model, the measured cycles per event, the instruction-
    set check, and cycles per output sample against the hand-written float baseline. The cores run
    two at a time (the emulators and compilers release the interpreter). Returns {core: the
    CoreCheck as a dict} for the cores installed here (empty when none is)."""
    from ..target import float_baseline

    todo = [c for c in (cores or available_cores()) if c in TARGETS]
    if not todo:
        return {}
    inputs = make_inputs(design, seconds, seed)
    bench = float_baseline.bench_inputs(design, seed)
    with ThreadPoolExecutor(max_workers=2) as pool:
        res = list(pool.map(lambda core: check_core(design, core, inputs, bench), todo))
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
