"""Benchmark (not a test): cost of the emitted integer C on Cortex-M0+ and Cortex-M4, against a
plain double-precision C version of the same chain (benchmarks/float_chain.c, soft float from
libgcc), both cross-compiled at -Os and run in the same instruction emulator.

    python benchmarks/bench_target.py

For every example's chosen design and each core: instructions and estimated cycles per output
sample (a whole <name>_process run over 3072 inputs after 1024 inputs of warm-up, divided by the
outputs), flash (code + constants + the libgcc helpers pulled in) and RAM (state), for both
versions, and the ratio. Cycles come from edgetally.target's per-class table (from memory of the
cores' published instruction timings; see target.CYCLES), so they are estimates. Needs
arm-none-eabi-gcc, unicorn, pyelftools (capstone for the class table).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import edgetally
from edgetally import target
from edgetally.target import CORE_FLAGS, FREESTANDING_FLAGS, LINKER_SCRIPT, _cc, _describe
from edgetally.verify import make_inputs

HERE = Path(__file__).resolve().parent
EXAMPLES = HERE.parent / "examples"
WARM, N = 1024, 3072


def float_params(design) -> str:
    fr, c = design.front, design.cic
    stamp = fr.kind == "stamp"
    bits = fr.timer_bits if stamp else fr.counter_bits
    # phase (stamp intervals, or edges) per grid instant at full-scale deviation: the audio scale
    fs_step = design.full_scale_hz / fr.prescale / design.rates.grid_hz
    gain = 1.0 / (fs_step * c.ratio ** c.order)
    rows = ",\n".join("    {" + ", ".join(repr(float(v)) for v in s.float_sos) + "}" for s in design.filters.sections)
    return (f"#define FLT_STAMP {1 if stamp else 0}\n"
            f"#define FLT_INPUT_T {'uint16_t' if bits == 16 else 'uint32_t'}\n"
            f"#define FLT_INPUT_MASK 0x{(1 << bits) - 1:X}u\n"
            f"#define FLT_GRID_TICKS {float(fr.grid_ticks)!r}\n"
            f"#define FLT_CIC_ORDER {c.order}u\n#define FLT_CIC_RATIO {c.ratio}u\n"
            f"#define FLT_NSEC {len(design.filters.sections)}u\n"
            f"#define FLT_GAIN {gain!r}\n#define FLT_DC_ALPHA {2.0 ** -design.scale.dc_shift!r}\n"
            f"static const double flt_sos[FLT_NSEC][6] = {{\n{rows}\n}};\n")


def float_build(design, core: str, wd: Path) -> target.TargetBuild:
    cc = target.toolchain()
    wd.mkdir(parents=True, exist_ok=True)
    (wd / "float_params.h").write_text(float_params(design))
    (wd / "float_chain.c").write_text((HERE / "float_chain.c").read_text())
    (wd / "link.ld").write_text(LINKER_SCRIPT)
    flags = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-Os", *CORE_FLAGS[core], *FREESTANDING_FLAGS, "-gdwarf-4"]
    log = _cc([cc, *flags, "-c", "float_chain.c", "-o", "float_chain.o"], wd)
    log += _cc([cc, *CORE_FLAGS[core], *FREESTANDING_FLAGS, "-T", "link.ld", "float_chain.o", "-lgcc",
                "-o", "float.elf"], wd)
    return _describe(design, core, "-Os", wd / "float.elf", wd, log)


def per_output(build, x):
    def setup(m):
        m.call("harness_init")
        m.write("harness_in", x[:WARM + N])
        m.call("harness_process", 0, WARM)

    insns, cycles, produced = target.total_cycles(build, "harness_process", WARM, N, setup=setup)
    return insns / produced, cycles / produced, produced


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
        x = make_inputs(d, 0.05, seed=1)
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
