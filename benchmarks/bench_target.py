"""Benchmark (not a test): cost of the emitted integer C on Cortex-M0+ and Cortex-M4, against a
plain double-precision C version of the same chain (benchmarks/hand_float/float_chain.c, soft float from
libgcc), both cross-compiled at -Os and run in the same instruction emulator.

    python benchmarks/bench_target.py

For every example's chosen design and each core: instructions and estimated cycles per output
sample (a whole <name>_process run over N = 3072 inputs after WARM = 1024 inputs of warm-up, divided by the
outputs), flash (code + constants + the libgcc helpers pulled in) and RAM (state), for both
versions, and the ratio. Cycles come from edgetally.target's per-class table (from memory of the
cores' published instruction timings; see target_cycles.CYCLES), so they are estimates. Needs
arm-none-eabi-gcc, unicorn, pyelftools (capstone for the class table).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import edgetally
from edgetally.target import build as target
from edgetally.target.float_baseline import bench_inputs, float_build, per_output
from edgetally.target.build import CORE_FLAGS

HERE = Path(__file__).resolve().parent
EXAMPLES = HERE.parent / "examples"


def code_bytes(build) -> int:
    """Flash of everything but the harness entry points: the chain, its constants, libgcc helpers."""
    harness = sum(s.size for n, s in build.symbols.items() if n.startswith("harness_") and s.kind == "FUNC")
    return build.flash_total - harness


def state_bytes(build) -> int:
    return build.ram_total - sum(build.ram_by_object.get(n, 0) for n in ("harness_in", "harness_out"))


def main() -> None:
    root = Path(tempfile.mkdtemp(prefix="edgetally-bench-target-"))
    hdr = (f"{'example':14} {'scheme':10} {'core':14} {'int insn/out':>12} {'int cyc/out':>11} {'flt cyc/out':>11} "
           f"{'ratio':>6} {'int flash':>9} {'flt flash':>9} {'int RAM':>7} {'flt RAM':>7}")
    print(hdr)
    print("-" * len(hdr))
    for path in sorted(EXAMPLES.glob("*.toml")):
        d = edgetally.design(edgetally.load_spec(path))
        x = bench_inputs(d, seed=1)
        for core in sorted(CORE_FLAGS):
            ib = target.cross_build(d, core, workdir=root / f"{path.stem}-{core}-int")
            fb = float_build(d, core, root / f"{path.stem}-{core}-float")
            ii, ic, _ = per_output(ib, x)
            _, fc, _ = per_output(fb, x)
            print(f"{path.stem:14} {d.scheme:10} {core:14} {ii:12.0f} {ic:11.0f} {fc:11.0f} {fc / ic:6.1f} "
                  f"{code_bytes(ib):9d} {code_bytes(fb):9d} {state_bytes(ib):7d} {state_bytes(fb):7d}")
    print("\ncycles: estimates from the per-class table in edgetally.target (zero wait states); flash: code +")
    print("constants + libgcc helpers (no harness entry points); RAM: .data + .bss without the harness buffers.")


if __name__ == "__main__":
    main()
