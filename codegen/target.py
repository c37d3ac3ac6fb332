"""Cross-compile the emitted C for an Arm Cortex-M core and run it in an instruction emulator.

``cross_build(design, core)`` emits the C, adds a small freestanding harness (global state, global
input and output buffers, entry functions the emulator calls) and builds an ELF with
arm-none-eabi-gcc under the same strict flags as the host build, plus ``-ffreestanding -nostdlib``
and libgcc for the run-time helpers (division, 64-bit multiply). There is no startup code: the
emulator maps zeroed RAM, loads the ELF's loadable segments, sets SP and calls a function by
setting PC to its address | 1 and LR to a stop address.

``run(build, design, inputs)`` feeds the inputs through <name>_process (or, with ``isr=True``,
through the scheme's ISR functions and <name>_service) and returns the outputs and counters.

``measure(build, design, inputs)`` counts the instructions executed per event (per ISR call, per
input, per grid instant, per output sample) by attributing every executed instruction to the
function it belongs to (DWARF ranges, so inlined code is attributed to the function it was inlined
from), and turns them into cycles with a per-core timing table. The cycle figures are estimates:
the tables are from memory of the cores' published instruction timings, with no wait states and
no bus contention, and the exception entry and exit of a real interrupt are not executed here
(they are added from ``edgetally.cores`` where stated).

Needs: arm-none-eabi-gcc with libgcc (Debian: gcc-arm-none-eabi), the Python packages unicorn and
pyelftools; capstone (optional) for the per-class cycle table, otherwise one CPI per core.
Pure API: nothing is printed; files are written only under ``workdir`` or a fresh temp folder.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .emit import emit, input_type, isr_names
from .hostbuild import STRICT_FLAGS
from .ir import Design

CORE_FLAGS = {
    "cortex-m0plus": ["-mcpu=cortex-m0plus", "-mthumb", "-mfloat-abi=soft"],
    "cortex-m4": ["-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=soft"],
}
FREESTANDING_FLAGS = ["-ffreestanding", "-nostdlib", "-fno-common"]

FLASH_BASE, FLASH_SIZE = 0x08000000, 0x00100000
RAM_BASE, RAM_SIZE = 0x20000000, 0x00040000
STOP_BASE = 0x00F00000                  # an extra mapped page; LR points here, emulation stops on it
STACK_TOP = RAM_BASE + RAM_SIZE - 16
IN_LEN = 4096                           # harness input buffer, elements
OUT_LEN = 4096                          # harness output buffer, samples
MAX_INSNS_PER_CALL = 200_000_000        # a runaway guard for one emulated call

LINKER_SCRIPT = f"""\
/* Minimal image for the emulator: code and constants in flash, data and bss in RAM (loaded in
   place by the emulator, so no copy loop and no startup code). */
MEMORY
{{
    FLASH (rx)  : ORIGIN = 0x{FLASH_BASE:08X}, LENGTH = {FLASH_SIZE // 1024}K
    RAM   (rwx) : ORIGIN = 0x{RAM_BASE:08X}, LENGTH = {RAM_SIZE // 1024}K
}}
ENTRY(harness_init)
SECTIONS
{{
    .text   : {{ *(.text .text.*) }} > FLASH
    .rodata : {{ *(.rodata .rodata.*) }} > FLASH
    .ARM.exidx : {{ *(.ARM.exidx*) }} > FLASH
    .data   : {{ *(.data .data.*) }} > RAM
    .bss    : {{ *(.bss .bss.*) *(COMMON) }} > RAM
}}
"""


class TargetBuildError(RuntimeError):
    """The cross build failed (the compiler's or linker's messages are in the text)."""


class TargetRunError(RuntimeError):
    """The emulated code did not return normally."""


def emulator_available() -> bool:
    """True when the unicorn and pyelftools packages can be imported."""
    try:
        import elftools  # noqa: F401
        import unicorn  # noqa: F401
    except ImportError:
        return False
    return True


def toolchain() -> str | None:
    """The cross compiler's path, or None when it is not installed."""
    return shutil.which(os.environ.get("ARM_CC", "arm-none-eabi-gcc"))


# --------------------------------------------------------------------------------------------
# build


@dataclass(frozen=True)
class Symbol:
    name: str
    addr: int          # Thumb bit cleared
    size: int
    kind: str          # "FUNC" or "OBJECT"
    section: str


@dataclass
class TargetBuild:
    design_name: str
    core: str
    opt: str
    elf: Path
    workdir: Path
    symbols: dict[str, Symbol]
    flash_by_function: dict[str, int]      # FUNC symbols of the demodulator (code bytes)
    flash_by_object: dict[str, int]        # const tables of the demodulator (flash)
    ram_by_object: dict[str, int]          # RAM objects: the state and the harness buffers
    flash_demod: int                       # demodulator code + constants
    flash_runtime: int                     # libgcc helpers the demodulator pulled in
    flash_total: int                       # everything in flash, harness included
    ram_state: int                         # sizeof(<name>_state_t)
    ram_total: int                         # .data + .bss, harness buffers included
    input_ctype: str
    sample_dtype: type
    input_dtype: type
    compile_log: str = ""

    def address(self, name: str) -> int:
        return self.symbols[name].addr


def _harness(design: Design) -> str:
    p, P = design.name, design.name.upper()
    fr = design.front
    if design.scheme == "timestamp":
        call = f"    {p}_capture_isr(&harness_state, ({p}_input_t)value);\n"
    elif design.scheme == "interrupt" and fr.kind == "stamp":
        call = f"    {p}_edge_isr(&harness_state, ({p}_input_t)value);\n"
    elif design.scheme == "interrupt":
        mask = (1 << fr.counter_bits) - 1
        call = (f"    uint32_t k = (value - harness_last) & UINT32_C(0x{mask:X});\n"
                f"    harness_last = value;\n"
                f"    while (k > 0u) {{\n        {p}_edge_isr(&harness_state);\n        k--;\n    }}\n"
                f"    {p}_tick_isr(&harness_state);\n")
    else:
        call = f"    {p}_tick_isr(&harness_state, ({p}_input_t)value);\n"
    return f"""\
/* Test harness for the emulator: global state and buffers, entry points called with PC = address. */
#include "{p}.h"

#define HARNESS_IN_LEN  {IN_LEN}u
#define HARNESS_OUT_LEN {OUT_LEN}u

{p}_input_t harness_in[HARNESS_IN_LEN];
{p}_sample_t harness_out[HARNESS_OUT_LEN];
uint32_t harness_consumed;
static {p}_state_t harness_state;
static uint32_t harness_last;
const uint32_t harness_state_size = (uint32_t)sizeof({p}_state_t);

void harness_init(void);
uint32_t harness_process(uint32_t first, uint32_t n);
void harness_isr(uint32_t value);
void harness_isr_feed(uint32_t first, uint32_t n);
uint32_t harness_service(void);
uint32_t harness_counter(uint32_t which);

void harness_init(void)
{{
    {p}_init(&harness_state);
    harness_last = 0u;
    harness_consumed = 0u;
}}

/* Process harness_in[first .. first + n); returns the samples written to harness_out, the inputs
   consumed in harness_consumed (fewer than n when harness_out filled up). */
uint32_t harness_process(uint32_t first, uint32_t n)
{{
    size_t produced = 0u;
    harness_consumed = (uint32_t){p}_process(&harness_state, &harness_in[first], n, harness_out,
                                              HARNESS_OUT_LEN, &produced);
    return (uint32_t)produced;
}}

/* One input as the hardware delivers it, through the scheme's ISR function(s). */
void harness_isr(uint32_t value)
{{
{call}}}

void harness_isr_feed(uint32_t first, uint32_t n)
{{
    uint32_t i;
    for (i = 0u; i < n; i++) {{
        harness_isr((uint32_t)harness_in[first + i]);
    }}
}}

uint32_t harness_service(void)
{{
    return (uint32_t){p}_service(&harness_state, harness_out, HARNESS_OUT_LEN);
}}

uint32_t harness_counter(uint32_t which)
{{
    switch (which) {{
    case 0u: return {p}_gap_count(&harness_state);
    case 1u: return {p}_clamp_count(&harness_state);
    case 2u: return {p}_overrun_count(&harness_state);
    case 3u: return {p}_saturation_count(&harness_state);
    case 4u: return {p}_clip_count(&harness_state);
    case 5u: return {p}_carrier_present(&harness_state) ? 1u : 0u;
    case 6u: return (uint32_t){p}_offset(&harness_state);
    default: return {P}_QUEUE_LEN;
    }}
}}
"""


COUNTERS = ("gaps", "clamps", "overruns", "saturations", "clips", "carrier", "offset")


def _cc(cmd: list[str], cwd: Path) -> str:
    res = subprocess.run(cmd, capture_output=True, text=True, cwd=cwd)
    if res.returncode != 0 or res.stderr.strip():
        raise TargetBuildError(f"{' '.join(cmd)}\n{res.stdout}{res.stderr}")
    return res.stdout


def cross_build(design: Design, core: str, opt: str = "-Os", workdir: Path | str | None = None) -> TargetBuild:
    """Emit the C, add the harness, compile and link for ``core`` ("cortex-m0plus" or "cortex-m4")
    with the strict flags (warnings are errors). Files go to ``workdir`` (made if needed) or a new
    temp folder."""
    if core not in CORE_FLAGS:
        raise ValueError(f"unknown core {core!r}; known: {', '.join(CORE_FLAGS)}")
    cc = toolchain()
    if cc is None:
        raise TargetBuildError("arm-none-eabi-gcc not found (Debian package gcc-arm-none-eabi)")
    wd = Path(workdir) if workdir is not None else Path(tempfile.mkdtemp(prefix=f"edgetally-{design.name}-"))
    wd.mkdir(parents=True, exist_ok=True)
    p = design.name
    for name, text in emit(design).items():
        (wd / name).write_text(text, encoding="utf-8")
    (wd / "harness.c").write_text(_harness(design), encoding="utf-8")
    (wd / "link.ld").write_text(LINKER_SCRIPT, encoding="utf-8")
    # -g only adds debug sections (the DWARF ranges measure() uses); it does not change the code.
    flags = [*STRICT_FLAGS, opt, *CORE_FLAGS[core], *FREESTANDING_FLAGS, "-gdwarf-4"]
    log = _cc([cc, *flags, "-c", f"{p}.c", "-o", f"{p}.o"], wd)
    log += _cc([cc, *flags, "-c", "harness.c", "-o", "harness.o"], wd)
    elf = wd / f"{p}.elf"
    log += _cc([cc, *CORE_FLAGS[core], *FREESTANDING_FLAGS, "-T", "link.ld", f"{p}.o", "harness.o", "-lgcc",
                "-o", elf.name], wd)
    return _describe(design, core, opt, elf, wd, log)


def _describe(design: Design, core: str, opt: str, elf_path: Path, wd: Path, log: str) -> TargetBuild:
    from elftools.elf.elffile import ELFFile

    p = design.name
    syms: dict[str, Symbol] = {}
    with open(elf_path, "rb") as f:
        elf = ELFFile(f)
        secnames = {i: s.name for i, s in enumerate(elf.iter_sections())}
        sec_sizes = {s.name: s["sh_size"] for s in elf.iter_sections()}
        for s in elf.get_section_by_name(".symtab").iter_symbols():
            kind = s["st_info"]["type"]
            if kind not in ("STT_FUNC", "STT_OBJECT") or not s.name or not isinstance(s["st_shndx"], int):
                continue
            syms[s.name] = Symbol(s.name, s["st_value"] & ~1, s["st_size"], kind[4:], secnames[s["st_shndx"]])
        state_sym = syms["harness_state_size"]
        ro = elf.get_section_by_name(".rodata")
        off = state_sym.addr - ro["sh_addr"]
        state_size = int.from_bytes(ro.data()[off:off + 4], "little")

    def ours(n: str) -> bool:
        return n.startswith(p + "_")

    fn = {n: s.size for n, s in syms.items() if s.kind == "FUNC" and ours(n)}
    fobj = {n: s.size for n, s in syms.items() if s.kind == "OBJECT" and ours(n) and s.section in (".rodata", ".text")}
    ram = {n: s.size for n, s in syms.items() if s.kind == "OBJECT" and s.section in (".data", ".bss")}
    runtime = sum(s.size for n, s in syms.items() if s.kind == "FUNC" and not ours(n) and not n.startswith("harness_"))
    flash_total = sum(sec_sizes.get(n, 0) for n in (".text", ".rodata", ".ARM.exidx", ".data"))
    ram_total = sum(sec_sizes.get(n, 0) for n in (".data", ".bss"))
    return TargetBuild(
        design_name=p, core=core, opt=opt, elf=elf_path, workdir=wd, symbols=syms,
        flash_by_function=dict(sorted(fn.items())), flash_by_object=dict(sorted(fobj.items())),
        ram_by_object=dict(sorted(ram.items())), flash_demod=sum(fn.values()) + sum(fobj.values()),
        flash_runtime=runtime, flash_total=flash_total, ram_state=state_size, ram_total=ram_total,
        input_ctype=input_type(design),
        sample_dtype=np.int16 if design.output.ctype == "int16_t" else np.uint16,
        input_dtype=np.uint16 if input_type(design) == "uint16_t" else np.uint32, compile_log=log)


# --------------------------------------------------------------------------------------------
# emulator


class _Machine:
    """One unicorn instance with the ELF loaded; call(name, *args) runs a function to its return."""

    def __init__(self, build: TargetBuild):
        import unicorn as uc
        from unicorn import arm_const as A
        from elftools.elf.elffile import ELFFile

        self.uc_mod, self.A, self.build = uc, A, build
        mode = uc.UC_MODE_THUMB | uc.UC_MODE_MCLASS
        self.mu = mu = uc.Uc(uc.UC_ARCH_ARM, mode)
        model = A.UC_CPU_ARM_CORTEX_M0 if build.core == "cortex-m0plus" else A.UC_CPU_ARM_CORTEX_M4
        mu.ctl_set_cpu_model(model)
        mu.mem_map(FLASH_BASE, FLASH_SIZE, uc.UC_PROT_READ | uc.UC_PROT_EXEC)
        mu.mem_map(RAM_BASE, RAM_SIZE, uc.UC_PROT_READ | uc.UC_PROT_WRITE)
        mu.mem_map(STOP_BASE, 0x1000, uc.UC_PROT_READ | uc.UC_PROT_EXEC)
        mu.mem_write(STOP_BASE, b"\x00\xbf" * 8)           # NOPs; never executed (emulation stops here)
        with open(build.elf, "rb") as f:
            for seg in ELFFile(f).iter_segments():
                if seg["p_type"] == "PT_LOAD" and seg["p_filesz"]:
                    mu.mem_write(seg["p_paddr"], seg.data())
        self.steps = 0

    def call(self, name: str, *args: int) -> int:
        A, mu = self.A, self.mu
        for reg, v in zip((A.UC_ARM_REG_R0, A.UC_ARM_REG_R1, A.UC_ARM_REG_R2, A.UC_ARM_REG_R3), args):
            mu.reg_write(reg, v & 0xFFFFFFFF)
        mu.reg_write(A.UC_ARM_REG_SP, STACK_TOP)
        mu.reg_write(A.UC_ARM_REG_LR, STOP_BASE | 1)
        try:
            mu.emu_start(self.build.address(name) | 1, STOP_BASE, count=MAX_INSNS_PER_CALL)
        except self.uc_mod.UcError as e:
            pc = mu.reg_read(A.UC_ARM_REG_PC)
            raise TargetRunError(f"{name}: {e} at pc=0x{pc:08x}") from e
        pc = mu.reg_read(A.UC_ARM_REG_PC)
        if pc & ~1 != STOP_BASE:
            raise TargetRunError(f"{name} did not return (pc=0x{pc:08x}; instruction limit?)")
        return mu.reg_read(A.UC_ARM_REG_R0)

    def write(self, name: str, arr: np.ndarray) -> None:
        self.mu.mem_write(self.build.address(name), arr.tobytes())

    def read(self, name: str, count: int, dtype) -> np.ndarray:
        nbytes = count * np.dtype(dtype).itemsize
        return np.frombuffer(bytes(self.mu.mem_read(self.build.address(name), nbytes)), dtype=dtype).copy()

    def stack_used(self) -> int:
        """Deepest stack use so far: RAM starts zeroed, so the lowest nonzero word below the top."""
        size = 0x4000
        data = bytes(self.mu.mem_read(STACK_TOP - size, size))
        nz = next((i for i in range(0, size, 4) if data[i:i + 4] != b"\0\0\0\0"), size)
        return size - nz


@dataclass
class TargetRun:
    outputs: np.ndarray
    counters: dict
    inputs: int
    stack_bytes: int


def _counters(m: _Machine) -> dict:
    vals = {k: int(m.call("harness_counter", i)) for i, k in enumerate(COUNTERS)}
    vals["carrier"] = bool(vals["carrier"])
    vals["offset"] = vals["offset"] - (1 << 32) if vals["offset"] >= 1 << 31 else vals["offset"]
    return vals


def _feed_process(m: _Machine, build: TargetBuild, inputs: np.ndarray, block: int) -> list[np.ndarray]:
    chunks = []
    for start in range(0, inputs.size, block):
        blk = inputs[start:start + block]
        m.write("harness_in", blk)
        done = 0
        while done < blk.size:
            k = m.call("harness_process", done, blk.size - done)
            done += int(m.read("harness_consumed", 1, np.uint32)[0])
            chunks.append(m.read("harness_out", k, build.sample_dtype))
    return chunks


def _feed_isr(m: _Machine, build: TargetBuild, inputs: np.ndarray, service_every: int) -> list[np.ndarray]:
    chunks = []

    def drain():
        while True:
            k = m.call("harness_service")
            chunks.append(m.read("harness_out", k, build.sample_dtype))
            if k < OUT_LEN:
                return

    for start in range(0, inputs.size, service_every):
        blk = inputs[start:start + service_every]
        m.write("harness_in", blk)
        m.call("harness_isr_feed", 0, blk.size)
        if blk.size == service_every:
            drain()
    drain()
    return chunks


def run(build: TargetBuild, design: Design, inputs: np.ndarray, block: int = IN_LEN, isr: bool = False,
        service_every: int | None = None) -> TargetRun:
    """Run the cross-built C in the emulator on ``inputs``. Default: blocks of ``block`` inputs
    through <name>_process. ``isr=True``: one input at a time through the scheme's ISR function(s)
    (for an edge-counting interrupt design, the edge ISR once per new edge, then the tick ISR),
    <name>_service every ``service_every`` inputs (default: a quarter of the queue)."""
    if design.name != build.design_name:
        raise ValueError("build and design differ")
    inputs = np.ascontiguousarray(inputs, dtype=build.input_dtype)
    block = max(1, min(block, IN_LEN))
    m = _Machine(build)
    m.call("harness_init")
    if isr:
        every = max(1, min(service_every or design.queue_len // 4, IN_LEN))
        chunks = _feed_isr(m, build, inputs, every)
    else:
        chunks = _feed_process(m, build, inputs, block)
    out = np.concatenate(chunks) if chunks else np.zeros(0, dtype=build.sample_dtype)
    return TargetRun(outputs=out, counters=_counters(m), inputs=int(inputs.size), stack_bytes=m.stack_used())


# --------------------------------------------------------------------------------------------
# measurement

# Cycles per instruction class. Source: from memory of the Cortex-M0+ and Cortex-M4 technical
# reference manuals' instruction timing tables (not checked against the printed page); zero-wait-
# state memory, no bus contention. "n" is the number of registers moved; a taken branch refills the
# pipeline. M0+: ALU 1, LDR/STR 2, LDM/STM/PUSH/POP 1+n, POP with PC 3+n, B taken 2 (not taken 1),
# BL 3, BX/BLX 2, MULS 1 (the fast single-cycle multiplier option; the small one takes 32).
# M4: ALU 1, LDR/STR 2 (back-to-back loads pipeline to 1: not modelled), LDM/STM/PUSH/POP 1+n,
# POP with PC 1+n+2, B taken 1+2 (the refill is 1..3; 2 used, estimate) not taken 1, BL 3, BX 3,
# MUL/MLA and the 32x32->64 UMULL/SMULL/UMLAL/SMLAL 1, UDIV/SDIV 2..12 (data dependent; 12 used, the
# worst case), IT 1 (may fold into the previous instruction: not modelled).
CYCLES = {
    "cortex-m0plus": dict(alu=1, mem=2, multi_base=1, pop_pc_extra=2, branch_taken=2, branch_not=1, bl=3, bx=2,
                          mul=1, mul_long=1, div=12),   # no long multiply or divide on ARMv6-M
    "cortex-m4": dict(alu=1, mem=2, multi_base=1, pop_pc_extra=2, branch_taken=3, branch_not=1, bl=3, bx=3,
                      mul=1, mul_long=1, div=12),
}
# Without capstone: one CPI per core. Estimate (a mix of about a third loads and stores and one
# taken branch in six, at the timings above).
SINGLE_CPI = {"cortex-m0plus": 1.5, "cortex-m4": 1.4}


@dataclass
class Costs:
    core: str
    opt: str
    method: str                      # "classes (capstone)" or "single CPI estimate"
    inputs: int
    grid_instants: int
    outputs: int
    instr_per_input: float           # <name>_process/_input and the front end, per input
    instr_per_grid: float            # <name>_grid without post, per grid instant (CIC, 1-in-R combs)
    instr_per_output: float          # <name>_post, per output sample
    instr_per_output_total: float    # the whole process run divided by the outputs
    cycles_per_input: float
    cycles_per_grid: float
    cycles_per_output: float
    cycles_per_output_total: float
    isr_instr: dict[str, float]      # per call of each ISR function (body only, no entry/exit)
    isr_cycles: dict[str, float]
    isr_cycles_with_entry: dict[str, float]   # + exception entry and exit from edgetally.cores (estimate)
    class_counts: dict[str, int] = field(default_factory=dict)
    stack_bytes: int = 0


def _is_32bit(hw: int) -> bool:
    return (hw >> 11) in (0b11101, 0b11110, 0b11111)


class _Profiler:
    """Attributes executed instructions to categories through a basic-block hook. Instructions in
    functions outside the anchors (run-time helpers, outlined shared helpers) count for the
    category of the code that called them (the category of the last anchored instruction run)."""

    def __init__(self, m: _Machine, anchors: list[tuple[str, list[tuple[int, int]]]], entries: dict[int, str]):
        self.m, self.anchors, self.entries = m, anchors, entries
        self.counts: dict[str, int] = {}
        self.cycles: dict[str, float] = {}
        self.calls: dict[str, int] = {}
        self.classes: dict[str, int] = {}
        self.context = "other"
        self.prev_last = None          # (kind of the last instruction, end address of the block)
        self.cache: dict[tuple[int, int], list] = {}
        self.cyc = CYCLES[m.build.core]
        try:
            import capstone
            self.cs = capstone.Cs(capstone.CS_ARCH_ARM, capstone.CS_MODE_THUMB | capstone.CS_MODE_MCLASS)
            self.cs.detail = True
        except ImportError:
            self.cs = None
        self.method = "classes (capstone)" if self.cs else "single CPI estimate"
        # the hook is installed before anything runs (unicorn applies a block hook only to code
        # translated after it was added) and counts only while active
        self.active = False
        m.mu.hook_add(m.uc_mod.UC_HOOK_BLOCK, self.hook, begin=FLASH_BASE, end=FLASH_BASE + FLASH_SIZE - 1)

    def category(self, addr: int) -> str | None:
        for name, ranges in self.anchors:
            for lo, hi in ranges:
                if lo <= addr < hi:
                    return name
        return None

    def _classify(self, insn) -> tuple[str, float, str]:
        """(class, cycles if not a taken branch, branch kind) of one capstone instruction."""
        c = self.cyc
        mn = insn.mnemonic.split(".")[0]
        regs = [op for op in insn.operands]
        if mn in ("push", "pop") or mn.startswith(("ldm", "stm")):
            n = len(regs) - (0 if mn in ("push", "pop") else 1)
            if mn == "pop" and any(insn.reg_name(op.reg) == "pc" for op in regs):
                return "branch", c["multi_base"] + n + c["pop_pc_extra"], "always"
            return "mem", c["multi_base"] + n, ""
        if mn.startswith(("ldr", "str", "ldrex", "strex")):
            return "mem", c["mem"], ""
        if mn in ("bl", "blx"):
            return "branch", c["bl"], "always"
        if mn == "bx":
            return "branch", c["bx"], "always"
        if mn in ("cbz", "cbnz") or (mn.startswith("b") and len(mn) in (1, 3) and mn not in ("bic", "bfc", "bfi")):
            kind = "always" if mn == "b" else "cond"
            return "branch", c["branch_taken"], kind
        if mn in ("udiv", "sdiv"):
            return "div", c["div"], ""
        if mn in ("umull", "smull", "umlal", "smlal"):
            return "mul", c["mul_long"], ""
        if mn in ("mul", "muls", "mla", "mls") or mn.startswith("smul") or mn.startswith("smla"):
            return "mul", c["mul"], ""
        if any(insn.reg_name(op.reg) == "pc" for op in regs[:1] if op.type == 1) and mn in ("mov", "add"):
            return "branch", c["bx"], "always"
        return "alu", c["alu"], ""

    def _decode(self, addr: int, size: int) -> list:
        key = (addr, size)
        got = self.cache.get(key)
        if got is not None:
            return got
        code = bytes(self.m.mu.mem_read(addr, size))
        items = []
        if self.cs is not None:
            for insn in self.cs.disasm(code, addr):
                cls, cyc, kind = self._classify(insn)
                items.append((insn.address, cls, cyc, kind, insn.address + insn.size))
        else:
            off = 0
            while off < size:
                hw = int.from_bytes(code[off:off + 2], "little")
                n = 4 if _is_32bit(hw) else 2
                items.append((addr + off, "all", SINGLE_CPI[self.m.build.core], "", addr + off + n))
                off += n
        res = []
        for a, cls, cyc, kind, end in items:
            res.append((self.category(a), cls, cyc, kind, end))
        self.cache[key] = res
        return res

    def hook(self, mu, addr, size, _user):
        if not self.active:
            return
        if addr in self.entries:
            name = self.entries[addr]
            self.calls[name] = self.calls.get(name, 0) + 1
        # a conditional branch that ended the previous block was not taken if we fell through
        if self.prev_last is not None:
            pcat, kind, end = self.prev_last
            if kind == "cond" and addr == end:
                self.cycles[pcat] = self.cycles.get(pcat, 0.0) - (self.cyc["branch_taken"] - self.cyc["branch_not"])
        last = None
        for cat, cls, cyc, kind, end in self._decode(addr, size):
            if cat is not None:
                self.context = cat
            k = self.context
            self.counts[k] = self.counts.get(k, 0) + 1
            self.cycles[k] = self.cycles.get(k, 0.0) + cyc
            self.classes[cls] = self.classes.get(cls, 0) + 1
            last = (k, kind, end)
        self.prev_last = last


def _dwarf_ranges(elf_path: Path) -> dict[str, list[tuple[int, int]]]:
    """Function name -> address ranges of its code, out-of-line and inlined instances alike."""
    from elftools.elf.elffile import ELFFile

    out: dict[str, list[tuple[int, int]]] = {}
    with open(elf_path, "rb") as f:
        elf = ELFFile(f)
        if not elf.has_dwarf_info():
            return out
        dw = elf.get_dwarf_info()
        rl = dw.range_lists()

        def name_of(die):
            seen = 0
            while die is not None and seen < 8:
                if "DW_AT_name" in die.attributes:
                    return die.attributes["DW_AT_name"].value.decode()
                for a in ("DW_AT_abstract_origin", "DW_AT_specification"):
                    if a in die.attributes:
                        die = die.get_DIE_from_attribute(a)
                        break
                else:
                    return None
                seen += 1
            return None

        for cu in dw.iter_CUs():
            top = cu.get_top_DIE()
            base0 = top.attributes["DW_AT_low_pc"].value if "DW_AT_low_pc" in top.attributes else 0
            for die in cu.iter_DIEs():
                if die.tag not in ("DW_TAG_subprogram", "DW_TAG_inlined_subroutine"):
                    continue
                ranges = []
                at = die.attributes
                if "DW_AT_low_pc" in at and "DW_AT_high_pc" in at:
                    lo = at["DW_AT_low_pc"].value
                    hi = at["DW_AT_high_pc"]
                    hi = lo + hi.value if hi.form != "DW_FORM_addr" else hi.value
                    ranges.append((lo, hi))
                elif "DW_AT_ranges" in at and rl is not None:
                    base = base0
                    for e in rl.get_range_list_at_offset(at["DW_AT_ranges"].value, cu=cu):
                        if type(e).__name__ == "BaseAddressEntry":
                            base = e.base_address
                        elif getattr(e, "is_absolute", False):
                            ranges.append((e.begin_offset, e.end_offset))
                        else:
                            ranges.append((base + e.begin_offset, base + e.end_offset))
                if not ranges:
                    continue
                n = name_of(die)
                if n:
                    out.setdefault(n, []).extend((lo & ~1, hi & ~1) for lo, hi in ranges)
    return out


def isr_functions(design: Design) -> list[str]:
    """The ISR functions of the design (their one definition is edgetally.emit.api)."""
    return isr_names(design)


def measure(build: TargetBuild, design: Design, inputs: np.ndarray, max_inputs: int = 3000) -> Costs:
    """Instructions and estimated cycles per event, from an emulated run of the first
    ``max_inputs`` inputs through <name>_process and of the ISR path on the same inputs."""
    from . import model
    from .cores import CORES

    p = design.name
    inputs = np.ascontiguousarray(inputs[:max_inputs], dtype=build.input_dtype)
    ref = model.run(design, inputs)
    ranges = _dwarf_ranges(build.elf)
    isr_names = isr_functions(design)
    # innermost first: post is inlined into grid, grid into phase/gap/input, those into process
    anchors = [("output", ranges.get(f"{p}_post", []) + ranges.get(f"{p}_clip_data", [])),
               ("grid", ranges.get(f"{p}_grid", []))]
    anchors += [(n, ranges.get(n, [])) for n in isr_names]
    anchors.append(("input", sum((ranges.get(f"{p}_{n}", []) for n in
                                  ("process", "service", "input", "phase", "gap", "full", "queue")), [])))
    anchors.append(("harness", sum((r for n, r in ranges.items() if n.startswith("harness_")), [])))
    entries = {build.address(n): n for n in isr_names}

    # the block-function path
    m = _Machine(build)
    prof = _Profiler(m, anchors, entries)
    m.call("harness_init")
    prof.active = True
    chunks = _feed_process(m, build, inputs, min(IN_LEN, 1024))
    produced = sum(c.size for c in chunks)
    n_grid, n_out, n_in = int(ref.steps.size), int(ref.out.size), int(inputs.size)
    if produced != n_out:
        raise TargetRunError(f"measured run made {produced} outputs, the model {n_out}")
    stack = m.stack_used()
    cnt, cyc = prof.counts, prof.cycles

    # the ISR path: only the ISR functions' own instructions (and helpers they call) count
    m2 = _Machine(build)
    prof2 = _Profiler(m2, anchors, entries)
    m2.call("harness_init")
    prof2.active = True
    n_isr = min(n_in, 1000)
    _feed_isr(m2, build, inputs[:n_isr], max(1, design.queue_len // 4))
    stack = max(stack, m2.stack_used())

    def per(d, k, n):
        return round(d.get(k, 0) / n, 2) if n else 0.0

    entry = CORES[build.core].isr_cycles
    isr_instr = {n: per(prof2.counts, n, prof2.calls.get(n, 0)) for n in isr_names}
    isr_cyc = {n: per(prof2.cycles, n, prof2.calls.get(n, 0)) for n in isr_names}
    work = ("input", "grid", "output")
    classes = dict(prof.classes)
    classes.pop("all", None)
    return Costs(
        core=build.core, opt=build.opt, method=prof.method, inputs=n_in, grid_instants=n_grid, outputs=n_out,
        instr_per_input=per(cnt, "input", n_in), instr_per_grid=per(cnt, "grid", n_grid),
        instr_per_output=per(cnt, "output", n_out),
        instr_per_output_total=round(sum(cnt.get(k, 0) for k in work) / n_out, 2) if n_out else 0.0,
        cycles_per_input=per(cyc, "input", n_in), cycles_per_grid=per(cyc, "grid", n_grid),
        cycles_per_output=per(cyc, "output", n_out),
        cycles_per_output_total=round(sum(cyc.get(k, 0) for k in work) / n_out, 2) if n_out else 0.0,
        isr_instr=isr_instr, isr_cycles=isr_cyc,
        isr_cycles_with_entry={n: round(v + entry, 2) for n, v in isr_cyc.items()},
        class_counts=classes, stack_bytes=stack)


def total_cycles(build: TargetBuild, entry: str, *args: int, setup=None) -> tuple[int, float, int]:
    """(instructions, estimated cycles, r0) of one call of ``entry`` with every instruction counted,
    whatever function it is in; ``setup(machine)`` runs first (e.g. to write the input buffer).
    For benchmarks of code without DWARF anchors."""
    m = _Machine(build)
    prof = _Profiler(m, [("all", [(FLASH_BASE, FLASH_BASE + FLASH_SIZE)])], {})
    if setup is not None:
        setup(m)
    prof.active = True
    prof.prev_last = None
    r0 = m.call(entry, *args)
    return prof.counts.get("all", 0), prof.cycles.get("all", 0.0), r0
