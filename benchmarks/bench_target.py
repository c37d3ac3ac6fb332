"""Benchmark (not a test): cost of the emitted integer C on every emulated core, against the
hand-written float version of the same chain (benchmarks/hand_float/float_chain.c) in single
precision (soft float on the Cortex-M0+, RV32 and AVR classes; the single-precision FPU on the
Cortex-M4F class) and, as an extra column, double precision (soft float), all cross-compiled at -Os
and run in the same emulator (unicorn; simavr for the AVR).

    python benchmarks/bench_target.py

For every example's chosen design and each core: instructions and cycles per output sample (a
whole <name>_process run over N = 3072 inputs after WARM = 1024 inputs of warm-up, divided by the
outputs), flash (code + constants + the run-time helpers pulled in) and RAM (state) of the integer
C, the float cycles and the ratio float/integer (below 1: float is faster on that core, said in the
last column). Cycles: estimates from edgetally.target.cycles.TIMING on the unicorn cores, simavr's
exact count on the AVR. The float figures are cached by design hash (edgetally.target.cache): a
second run measures only the integer C.

Then, on the Cortex-M0+ class, the output chain's cycles per output sample per stage (base: CIC
combs, scale, offset tracker, squelch, output word; then each filter section) for every example's
chosen design and for the same plan in one other arithmetic (``stages``, ``stage_table``).
"""

from __future__ import annotations

import dataclasses
import tempfile
from pathlib import Path

import edgetally
from edgetally.target import build as target
from edgetally.designer.assemble import design as assemble_design
from edgetally.check.choice import arith_name, settle
from edgetally.stimulus.inputs import DEFAULT_SEED, make_inputs
from edgetally.target import cycles
from edgetally.target.check import available_cores
from edgetally.target.float_baseline import baseline, bench_inputs, per_output

HERE = Path(__file__).resolve().parent
EXAMPLES = HERE.parent / "examples"


def code_bytes(build) -> int:
    """Flash of everything but the harness entry points: the chain, its constants, libgcc helpers."""
    harness = sum(s.size for n, s in build.symbols.items() if n.startswith("harness_") and s.kind == "FUNC")
    return build.flash_total - harness


def state_bytes(build) -> int:
    return build.ram_total - sum(build.ram_by_object.get(n, 0) for n in ("harness_in", "harness_out"))


STAGE_CORE = "cortex-m0plus"


def _output_cycles(d, core: str, root: Path, tag: str) -> float:
    b = target.cross_build(d, core, "-Os", workdir=root / tag)
    return cycles.measure(b, d, make_inputs(d, 0.05, DEFAULT_SEED), max_inputs=4000).cycles_per_output


def stages(d, core: str, root: Path) -> tuple[float, list[float], float]:
    """Emulated cycles per output sample of the output chain (everything after the CIC integrators:
    combs, scale, offset tracker, squelch share, sections, output word), split by stage: each
    section's cost is what one more copy of it adds (the design re-emitted with that section
    doubled), the base (combs, scale, tracker, squelch, output word) the rest."""
    total = _output_cycles(d, core, root, "full")
    secs = d.filters.sections
    each = []
    for j in range(len(secs)):
        twice = dataclasses.replace(d.filters, sections=secs[: j + 1] + secs[j:])
        each.append(_output_cycles(dataclasses.replace(d, filters=twice), core, root, f"dup{j}") - total)
    return total - sum(each), each, total


def stage_table(root: Path) -> None:
    """Per stage on the M0+ class: every example's chosen design, and the same plan in one other
    arithmetic for comparison (the shaped one, or when that is chosen the split "mid" one, the
    choice on this class of core before it), whether or not that meets the spec's loss."""
    if STAGE_CORE not in available_cores():
        return
    print(f"\noutput chain per stage, emulated cycles per output sample on {STAGE_CORE} (-Os):")
    hdr = f"{'example':14} {'arith':7} {'base':>6}  {'sections (role: cycles)':60} {'total':>6}"
    print(hdr)
    print("-" * len(hdr))
    for path in sorted(EXAMPLES.glob("*.toml")):
        spec = edgetally.load_spec(path)
        chosen = edgetally.design(spec)
        other = "mid" if chosen.filters.shaped else "shaped"
        for d in (chosen, assemble_design(spec, settle(spec), overrides={"arith": other})):
            name = arith_name(d)
            base, each, total = stages(d, STAGE_CORE, root / f"{path.stem}-{name}-stages")
            secs = ", ".join(f"{s.role}{'(fir)' if s.fir and d.filters.shaped else ''}: {c:.0f}"
                             for s, c in zip(d.filters.sections, each, strict=True))
            print(f"{path.stem:14} {name:7} {base:6.0f}  {secs:60} {total:6.0f}")


def main() -> None:
    cores = available_cores()
    hdr = (f"{'example':14} {'scheme':10} {'core':14} {'int insn/out':>12} {'int cyc/out':>11} {'f32 cyc/out':>11} "
           f"{'f32/int':>7} {'f64 cyc/out':>11} {'f64/int':>7} {'int flash':>9} {'int RAM':>7}  note")
    print(hdr)
    print("-" * len(hdr))
    losses = []
    with tempfile.TemporaryDirectory(prefix="edgetally-bench-target-") as root:
        for path in sorted(EXAMPLES.glob("*.toml")):
            d = edgetally.design(edgetally.load_spec(path))
            x = bench_inputs(d, seed=1)
            for core in cores:
                ib = target.cross_build(d, core, workdir=Path(root) / f"{path.stem}-{core}-int")
                i = per_output(ib, x)
                f = baseline(d, core, x)
                r32, r64 = f.single.cycles / i.cycles, f.double.cycles / i.cycles
                note = "FPU" if f.fpu else "soft float"
                if r32 < 1:
                    note += f": FLOAT {1 / r32:.1f}x FASTER"
                    losses.append(f"{path.stem} on {core}")
                print(f"{path.stem:14} {d.scheme:10} {core:14} {i.instructions:12.0f} {i.cycles:11.0f} "
                      f"{f.single.cycles:11.0f} {r32:7.2f} {f.double.cycles:11.0f} {r64:7.2f} "
                      f"{code_bytes(ib):9d} {state_bytes(ib):7d}  {note}")
    print("\ncycles: estimates from per-class tables (zero wait states) on the Arm and RISC-V classes, simavr's")
    print("count on the AVR; f32: single precision (the comparison a user makes), f64: double, both hand-written;")
    print("flash: code + constants + libgcc/libm helpers (no harness entry points); RAM: .data + .bss without")
    print("the harness buffers. On the AVR, double is float (32 bits) in avr-gcc, so f64 = f32.")
    if losses:
        print("\nInteger loses to hardware float on: " + ", ".join(losses) + ".")
    with tempfile.TemporaryDirectory(prefix="edgetally-bench-stages-") as root:
        stage_table(Path(root))


if __name__ == "__main__":
    main()
