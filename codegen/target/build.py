"""Cross-compile the emitted C for an Arm Cortex-M core (the build half of the target check).

``cross_build(design, core)`` emits the C, adds a small freestanding harness (global state, global
input and output buffers, entry functions the emulator calls) and builds an ELF with
arm-none-eabi-gcc under the same strict flags as the host build, plus ``-ffreestanding -nostdlib``
and libgcc for the run-time helpers (division, 64-bit multiply). There is no startup code: the
emulator (``edgetally.target_run``) maps zeroed RAM, loads the ELF's loadable segments, sets SP and
calls a function by setting PC to its address | 1 and LR to a stop address; ``edgetally.target_cycles``
counts what it executes.

Needs: arm-none-eabi-gcc with libgcc (Debian: gcc-arm-none-eabi), the Python packages unicorn and
pyelftools; capstone (optional) for the per-class cycle table, otherwise one CPI per core.
Pure API: nothing is printed; files are written only under ``workdir`` or a fresh temp folder.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..emit import emit, input_type
from ..check.hostbuild import STRICT_FLAGS
from ..ir import Design, Topology

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
    topo = design.topology
    if topo is Topology.CAPTURE:
        call = f"    {p}_capture_isr(&harness_state, ({p}_input_t)value);\n"
    elif topo is Topology.EDGE_STAMP:
        call = f"    {p}_edge_isr(&harness_state, ({p}_input_t)value);\n"
    elif topo is Topology.EDGE_COUNT:
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
