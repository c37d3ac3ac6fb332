"""The hand-written floating-point baseline: a plain double-precision C version of a Design's chain
(benchmarks/hand_float/float_chain.c, shipped as package data; soft float from libgcc on the
ARM cores), cross-compiled at -Os and run in the same Thumb emulator as the emitted C, so that the
emitted integer C's cost can be stated as a ratio against what a user would write by hand.

Both are measured the same way: a whole <harness>_process run over N inputs after WARM inputs of
warm-up, cycles divided by the output samples it produced (cycles are estimates from the per-class
table of edgetally.target).
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import numpy as np

from . import build as target
from . import cycles as target_cycles
from ..ir import Design

WARM, N = 1024, 3072


def bench_inputs(design: Design, seed: int) -> np.ndarray:
    """Standard-test inputs, at least WARM + N of them (the slowest example needs about 0.2 s)."""
    from ..stimulus.inputs import make_inputs

    seconds = 0.15
    while True:
        x = make_inputs(design, seconds, seed)
        if x.size >= WARM + N:
            return x
        seconds *= 2


def source() -> str:
    """The baseline's C source."""
    return resources.files("edgetally.hand_float").joinpath("float_chain.c").read_text(encoding="utf-8")


def float_params(design: Design) -> str:
    """The header that fits the baseline to a Design: its rates, widths and float filter rows."""
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


def float_build(design: Design, core: str, wd: Path) -> "target.TargetBuild":
    """Cross-compile the baseline for ``core`` at -Os in folder ``wd``."""
    cc = target.toolchain()
    wd.mkdir(parents=True, exist_ok=True)
    (wd / "float_params.h").write_text(float_params(design))
    (wd / "float_chain.c").write_text(source())
    (wd / "link.ld").write_text(target.LINKER_SCRIPT)
    flags = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-Os", *target.CORE_FLAGS[core], *target.FREESTANDING_FLAGS,
             "-gdwarf-4"]
    log = target._cc([cc, *flags, "-c", "float_chain.c", "-o", "float_chain.o"], wd)
    log += target._cc([cc, *target.CORE_FLAGS[core], *target.FREESTANDING_FLAGS, "-T", "link.ld", "float_chain.o",
                       "-lgcc", "-o", "float.elf"], wd)
    return target._describe(design, core, "-Os", wd / "float.elf", wd, log)


def per_output(build, x) -> tuple[float, float, int]:
    """(instructions, cycles) per output sample over a whole process run, and the samples made."""
    def setup(m):
        m.call("harness_init")
        m.write("harness_in", x[:WARM + N])
        m.call("harness_process", 0, WARM)

    insns, cycles, produced = target_cycles.total_cycles(build, "harness_process", WARM, N, setup=setup)
    return insns / produced, cycles / produced, produced
