"""The hand-written floating-point baseline: a plain C version of a Design's chain
(benchmarks/hand_float/float_chain.c, shipped as package data) in single precision, the way a user
writes it for these cores: soft float from libgcc on the cores without an FPU (Cortex-M0+, RV32,
AVR), the single-precision FPU on the Cortex-M4F class (``-mfpu=fpv4-sp-d16 -mfloat-abi=hard``,
the FPU enabled through CPACR by the baseline's init as a startup routine does). Double precision
(soft float everywhere) is kept as an extra column. Cross-compiled at -Os and run in the same
emulator as the emitted C, so that the integer C's cost can be stated as a ratio.

Both are measured the same way: a <harness>_process run over N inputs after WARM inputs of
warm-up, every instruction counted, cycles divided by the output samples it produced (cycles from
edgetally.target.cycles: estimates on the unicorn cores, simavr's count on the AVR). The figures
depend only on the design, the core, the baseline's source and the inputs, so they are cached on
disk by the hash of those (edgetally.target.cache).
"""

from __future__ import annotations

import tempfile
from dataclasses import asdict, dataclass
from importlib import resources
from pathlib import Path

import numpy as np

from ..ir import Design
from . import build as target
from . import cache
from .cycles import Profiler, code_end
from .run import feed_process, machine

WARM, N = 1024, 3072
CPACR = 0xE000ED88  # Armv7-M System Control Block: Coprocessor Access Control Register


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


def float_params(design: Design, precision: str, in_len: int, out_len: int) -> str:
    """The header that fits the baseline to a Design: its rates, widths and filter rows, in
    ``precision`` ("single" or "double")."""
    fr, c = design.front, design.cic
    stamp = design.stamps
    bits = fr.timer_bits if stamp else fr.counter_bits
    # phase (stamp intervals, or edges) per grid instant at full-scale deviation: the audio scale
    fs_step = design.full_scale_hz / fr.prescale / design.rates.grid_hz
    gain = 1.0 / (fs_step * c.ratio**c.order)
    rows = ",\n".join("    {" + ", ".join(repr(float(v)) for v in s.float_sos) + "}" for s in design.filters.sections)
    real = "float" if precision == "single" else "double"
    return (
        f"#define FLT_REAL {real}\n#define FLT_IN_LEN {in_len}u\n#define FLT_OUT_LEN {out_len}u\n"
        f"#define FLT_STAMP {1 if stamp else 0}\n"
        f"#define FLT_INPUT_T {'uint16_t' if bits == 16 else 'uint32_t'}\n"
        f"#define FLT_INPUT_MASK 0x{(1 << bits) - 1:X}u\n"
        f"#define FLT_GRID_TICKS (({real}){float(fr.grid_ticks)!r})\n"
        f"#define FLT_CIC_ORDER {c.order}u\n#define FLT_CIC_RATIO {c.ratio}u\n"
        f"#define FLT_NSEC {len(design.filters.sections)}u\n"
        f"#define FLT_GAIN (({real}){gain!r})\n#define FLT_DC_ALPHA (({real}){2.0**-design.scale.dc_shift!r})\n"
        f"static const {real} flt_sos[FLT_NSEC][6] = {{\n{rows}\n}};\n"
    )


def _fpu_enable() -> str:
    return (
        f"void harness_fpu_on(void);\nvoid harness_fpu_on(void)\n{{\n"
        f"    /* CP10 and CP11 full access, as a startup routine does before any float instruction */\n"
        f"    *(volatile uint32_t *)0x{CPACR:08X}u |= (uint32_t)0xFu << 20;\n}}\n"
    )


def float_build(design: Design, core: str, wd: Path, precision: str = "single") -> target.TargetBuild:
    """Cross-compile the baseline for ``core`` at -Os in folder ``wd``; single precision uses the
    core's FPU where it has one, double precision is soft float everywhere."""
    t = target.TARGETS[core]
    wd.mkdir(parents=True, exist_ok=True)
    hw = precision == "single" and t.float_hw
    src = source() + (_fpu_enable() if hw else "")
    flags = [
        "-std=c99",
        "-Wall",
        "-Wextra",
        "-Werror",
        "-Wdouble-promotion",
        "-Os",
        *(t.float_flags if hw else t.flags),
        "-gdwarf-4",
    ]
    sources = {"float_params.h": float_params(design, precision, t.in_len, t.out_len), "float_chain.c": src}
    log = target.compile_and_link(core, sources, flags, wd, "float.elf")
    return target.describe(design, core, "-Os", wd / "float.elf", wd, log)


@dataclass(frozen=True)
class PerOutput:
    """Instructions and cycles per output sample of a whole process run, and the samples made."""

    instructions: float
    cycles: float
    samples: int


def per_output(build: target.TargetBuild, x: np.ndarray) -> PerOutput:
    """Run WARM inputs, then count everything executed while the next N inputs are processed."""
    m = machine(build)
    base = 0 if build.target.arch == "avr" else target.FLASH_BASE
    prof = Profiler(m, build, [("all", [(base, code_end(build))])], {})
    if "harness_fpu_on" in build.symbols:
        m.call("harness_fpu_on")
    m.call("harness_init")
    x = np.ascontiguousarray(x[: WARM + N], dtype=build.input_dtype)
    feed_process(m, build, x[:WARM], build.in_len)
    prof.start()
    produced = sum(c.size for c in feed_process(m, build, x[WARM:], build.in_len))
    t = prof.result()
    return PerOutput(sum(t.counts.values()) / produced, sum(t.cycles.values()) / produced, produced)


@dataclass(frozen=True)
class Baseline:
    """The float baseline's cost on one core: single precision (the honest comparison) and double."""

    core: str
    fpu: bool  # the single-precision build used a hardware FPU
    single: PerOutput
    double: PerOutput
    single_flash: int  # code + constants + libgcc helpers
    double_flash: int


def _code_bytes(b: target.TargetBuild) -> int:
    harness = sum(s.size for n, s in b.symbols.items() if n.startswith("harness_") and s.kind == "FUNC")
    return b.flash_total - harness


def baseline(design: Design, core: str, x: np.ndarray) -> Baseline:
    """The float baseline on ``core`` for ``design`` on inputs ``x`` (cached by their hash)."""
    t = target.TARGETS[core]
    k = cache.key("float-baseline", 2, design.to_json(), core, t, source(), np.asarray(x[: WARM + N]).tobytes())
    got = cache.load_json(k)
    if got is not None:
        return Baseline(
            core,
            got["fpu"],
            PerOutput(**got["single"]),
            PerOutput(**got["double"]),
            got["single_flash"],
            got["double_flash"],
        )
    res = {}
    with tempfile.TemporaryDirectory(prefix="edgetally-float-") as wd:
        for prec in ("single", "double"):
            b = float_build(design, core, Path(wd) / prec, prec)
            res[prec] = (per_output(b, x), _code_bytes(b))
    out = Baseline(core, t.float_hw, res["single"][0], res["double"][0], res["single"][1], res["double"][1])
    cache.store_json(
        k,
        {
            "fpu": out.fpu,
            "single": asdict(out.single),
            "double": asdict(out.double),
            "single_flash": out.single_flash,
            "double_flash": out.double_flash,
        },
    )
    return out
