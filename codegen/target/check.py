"""The target check: the emitted C cross-compiled for each emulated core, run on the start of the
standard test, compared with the integer model, with cycles per event and the float baseline."""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np

from ..check import model
from ..ir import Design, Topology
from ..stimulus.inputs import DEFAULT_SEED, make_inputs


TARGET_CORES = ("cortex-m0plus", "cortex-m4")
TARGET_SECONDS = 0.1


def target_check(design: Design, seed: int = DEFAULT_SEED, seconds: float = TARGET_SECONDS) -> dict:
    """The same C cross-compiled for each ARM core (-Os) and run in the Thumb emulator on the
    first ``seconds`` of the standard test: bit-exact against the model, the measured cycles per
    event (estimates from instruction counts, see edgetally.target), and cycles per output sample
    against the hand-written float baseline (edgetally.float_baseline). Empty when the cross
    compiler or the emulator is not installed."""
    from . import build as target
    from . import cycles as target_cycles
    from . import run as target_run

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
    b, rates = design.budget, design.rates
    edge_hz = b.edge_hz_max
    isr = t["isr_cycles_with_entry"]
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
    work = input_hz * t["cycles_per_input"] + rates.grid_hz * t["cycles_per_grid"] + rates.out_hz * t["cycles_per_output"]
    return round((isr_load + work) / b.cpu_hz, 4)
