"""Cross-compile the emitted C for an emulated core (the build half of the target check).

``cross_build(design, core)`` emits the C, adds a small freestanding harness (global state, global
input and output buffers, entry functions the emulator calls) and builds an ELF with the core's
cross compiler under the same strict flags as the host build, plus ``-ffreestanding -nostdlib`` and
libgcc for the run-time helpers (division, 64-bit multiply, soft float). There is no startup code:
the emulator (``edgetally.target.run``) loads the image itself, sets the stack pointer and calls a
function with the return address pointing at a stop address; ``edgetally.target.cycles`` counts
what it executes.

The emulated cores are listed once, in ``TARGETS``:
- Arm Cortex-M0+ and Cortex-M4 classes: arm-none-eabi-gcc (Debian gcc-arm-none-eabi), unicorn's
  Thumb M-profile mode;
- RV32IMC and RV32EC classes: riscv64-unknown-elf-gcc (Debian gcc-riscv64-unknown-elf) with
  ``-march=rv32imc -mabi=ilp32`` and ``-march=rv32ec -mabi=ilp32e``, unicorn's RISC-V 32 mode;
- the 8-bit AVR class: avr-gcc (Debian gcc-avr), an ATmega1284P in simavr (Debian libsimavr-dev),
  the part with 16 KB of SRAM so that the harness's buffers fit beside the state (the state of every
  bundled example is a few hundred bytes and would fit a 2 KB part on its own).

Pure API: nothing is printed. The build folder is ``workdir`` when given (kept); otherwise a
temporary folder that is removed before ``cross_build`` returns, and the ELF's bytes are kept in
the result and in the bounded cache of ``edgetally.target.cache`` (keyed by the sources, the flags
and the compiler binary, so a second build of the same design is not compiled again).
"""

from __future__ import annotations

import io
import os
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..check.hostbuild import STRICT_FLAGS
from ..emit import emit, input_type
from ..ir import Design, Topology

FREESTANDING_FLAGS = ("-ffreestanding", "-nostdlib", "-fno-common")


@dataclass(frozen=True)
class CoreTarget:
    """How one emulated core is built and run."""

    name: str  # the core profile's name in edgetally.cores
    arch: str  # "arm", "riscv" or "avr"
    cc: str  # the cross compiler (overridable through the environment variable env)
    env: str
    package: str  # the Debian package that has the compiler
    flags: tuple[str, ...]  # code generation flags of the integer build
    float_flags: tuple[str, ...]  # the same for the single-precision float baseline
    float_hw: bool  # the float baseline uses a hardware FPU
    emulator: str  # "unicorn" or "simavr"
    in_len: int  # harness input buffer, elements
    out_len: int  # harness output buffer, samples
    link: tuple[str, ...] = ()  # extra link flags
    libs: tuple[str, ...] = ("-lgcc",)  # run-time libraries (avr-libc keeps the soft float in libm)


_M0 = ("-mcpu=cortex-m0plus", "-mthumb", "-mfloat-abi=soft")
_M4 = ("-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=soft")
_RV_IMC = ("-march=rv32imc", "-mabi=ilp32", "-mcmodel=medlow")
_RV_EC = ("-march=rv32ec", "-mabi=ilp32e", "-mcmodel=medlow")
AVR_PART = "atmega1284p"
_AVR = (f"-mmcu={AVR_PART}",)

TARGETS: dict[str, CoreTarget] = {
    "cortex-m0plus": CoreTarget(
        "cortex-m0plus",
        "arm",
        "arm-none-eabi-gcc",
        "ARM_CC",
        "gcc-arm-none-eabi",
        _M0,
        _M0,
        False,
        "unicorn",
        4096,
        4096,
    ),
    # the M4F class: the integer build as on any M4; the float baseline on its single-precision FPU
    "cortex-m4": CoreTarget(
        "cortex-m4",
        "arm",
        "arm-none-eabi-gcc",
        "ARM_CC",
        "gcc-arm-none-eabi",
        _M4,
        ("-mcpu=cortex-m4", "-mthumb", "-mfpu=fpv4-sp-d16", "-mfloat-abi=hard"),
        True,
        "unicorn",
        4096,
        4096,
    ),
    "rv32imc": CoreTarget(
        "rv32imc",
        "riscv",
        "riscv64-unknown-elf-gcc",
        "RISCV_CC",
        "gcc-riscv64-unknown-elf",
        _RV_IMC,
        _RV_IMC,
        False,
        "unicorn",
        4096,
        4096,
    ),
    "rv32ec": CoreTarget(
        "rv32ec",
        "riscv",
        "riscv64-unknown-elf-gcc",
        "RISCV_CC",
        "gcc-riscv64-unknown-elf",
        _RV_EC,
        _RV_EC,
        False,
        "unicorn",
        4096,
        4096,
    ),
    "avr": CoreTarget(
        "avr",
        "avr",
        "avr-gcc",
        "AVR_CC",
        "gcc-avr",
        _AVR,
        _AVR,
        False,
        "simavr",
        512,
        512,
        link=("-Wl,--section-start=.text=0x100",),
        libs=("-lm", "-lgcc"),
    ),
}

# Memory map of the unicorn machines (the AVR's is the part's own).
FLASH_BASE, FLASH_SIZE = 0x08000000, 0x00100000
RAM_BASE, RAM_SIZE = 0x20000000, 0x00040000
STOP_BASE = 0x00F00000  # an extra mapped page; the return address points here
STACK_TOP = RAM_BASE + RAM_SIZE - 16
MAX_INSNS_PER_CALL = 200_000_000  # a runaway guard for one emulated call

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
    .rodata : {{ *(.rodata .rodata.* .srodata .srodata.*) }} > FLASH
    .ARM.exidx : {{ *(.ARM.exidx*) }} > FLASH
    .data   : {{ *(.data .data.* .sdata .sdata.*) }} > RAM
    .bss    : {{ *(.bss .bss.* .sbss .sbss.*) *(COMMON) }} > RAM
}}
"""


class TargetBuildError(RuntimeError):
    """The cross build failed (the compiler's or linker's messages are in the text)."""


class TargetRunError(RuntimeError):
    """The emulated code did not return normally."""


def _target(core: str) -> CoreTarget:
    if core not in TARGETS:
        raise ValueError(f"unknown core {core!r}; known: {', '.join(TARGETS)}")
    return TARGETS[core]


def compiler(core: str) -> str | None:
    """The core's cross compiler's path, or None when it is not installed."""
    t = _target(core)
    return shutil.which(os.environ.get(t.env, t.cc))


def emulator_available(core: str = "cortex-m0plus") -> bool:
    """True when the core's emulator can run here: unicorn and pyelftools (ARM, RISC-V), or
    pyelftools and simavr's library with its headers and a host C compiler (AVR)."""
    try:
        import elftools  # noqa: F401

        if _target(core).emulator == "unicorn":
            import unicorn  # noqa: F401

            return True
    except ImportError:
        return False
    from . import simavr

    return simavr.available()


def available(core: str) -> bool:
    """The core can be built and run here."""
    return compiler(core) is not None and emulator_available(core)


def toolchain() -> str | None:
    """The Arm cross compiler's path (the first emulated core's), or None."""
    return compiler("cortex-m0plus")


# --------------------------------------------------------------------------------------------
# build


@dataclass(frozen=True)
class Symbol:
    name: str
    addr: int  # Thumb bit cleared; AVR: byte address in flash, or in data space for RAM
    size: int
    kind: str  # "FUNC" or "OBJECT"
    section: str


@dataclass
class TargetBuild:
    design_name: str
    core: str
    opt: str
    elf: Path | None  # the ELF file while the build folder exists (workdir given)
    elf_bytes: bytes
    workdir: Path | None
    symbols: dict[str, Symbol]
    flash_by_function: dict[str, int]  # FUNC symbols of the demodulator (code bytes)
    flash_by_object: dict[str, int]  # const tables of the demodulator (flash)
    ram_by_object: dict[str, int]  # RAM objects: the state and the harness buffers
    flash_demod: int  # demodulator code + constants
    flash_runtime: int  # libgcc helpers the demodulator pulled in
    flash_total: int  # everything in flash, harness included
    ram_state: int  # sizeof(<name>_state_t)
    ram_total: int  # .data + .bss, harness buffers included
    input_ctype: str
    sample_dtype: type
    input_dtype: type
    target: CoreTarget
    compile_log: str = ""

    def address(self, name: str) -> int:
        return self.symbols[name].addr

    @property
    def in_len(self) -> int:
        return self.target.in_len

    @property
    def out_len(self) -> int:
        return self.target.out_len


def harness(design: Design, in_len: int, out_len: int) -> str:
    """The harness C: global state and buffers, entry points the emulator calls."""
    p, P = design.name, design.name.upper()
    fr = design.front
    topo = design.topology
    if topo is Topology.CAPTURE:
        call = f"    {p}_capture_isr(&harness_state, ({p}_input_t)value);\n"
    elif topo is Topology.EDGE_STAMP:
        call = f"    {p}_edge_isr(&harness_state, ({p}_input_t)value);\n"
    elif topo is Topology.EDGE_COUNT:
        mask = (1 << fr.counter_bits) - 1
        call = (
            f"    uint32_t k = (value - harness_last) & UINT32_C(0x{mask:X});\n"
            f"    harness_last = value;\n"
            f"    while (k > 0u) {{\n        {p}_edge_isr(&harness_state);\n        k--;\n    }}\n"
            f"    {p}_tick_isr(&harness_state);\n"
        )
    else:
        call = f"    {p}_tick_isr(&harness_state, ({p}_input_t)value);\n"
    cap, data = out_len, ""
    if design.data is not None:  # a process call makes at most half the bit ring's bits
        dl = design.data
        cap = min(out_len, (dl.ring_bits // 2) * int(dl.samples_per_bit))
        data = f"""
/* The data path's decided bits since the last call into harness_bits; returns their number. */
uint8_t harness_bits[{dl.ring_bits}u];
uint32_t harness_bits_read(void);
uint32_t harness_bits_read(void)
{{
    return (uint32_t){p}_bits_read(&harness_state, harness_bits, {dl.ring_bits}u);
}}
"""
    return f"""\
/* Test harness for the emulator: global state and buffers, entry points called with PC = address. */
#include "{p}.h"

#define HARNESS_IN_LEN  {in_len}u
#define HARNESS_OUT_LEN {out_len}u
#define HARNESS_OUT_CAP {cap}u

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
    harness_consumed = (uint32_t){p}_process(&harness_state, &harness_in[first], (size_t)n, harness_out,
                                              HARNESS_OUT_CAP, &produced);
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
{data}"""


COUNTERS = ("gaps", "clamps", "overruns", "saturations", "clips", "carrier", "offset")


def run_compiler(cmd: list[str], cwd: Path) -> str:
    """Run one compiler or linker command; any message (a warning included) is a TargetBuildError."""
    res = subprocess.run(cmd, capture_output=True, text=True, cwd=cwd)
    if res.returncode != 0 or res.stderr.strip():
        raise TargetBuildError(f"{' '.join(cmd)}\n{res.stdout}{res.stderr}")
    return res.stdout


def compile_and_link(core: str, sources: dict[str, str], cflags: list[str], wd: Path, elf_name: str) -> str:
    """Write ``sources`` (name -> text; the .c files are compiled) into ``wd``, compile each .c with
    ``cflags`` plus the core's freestanding flags, link with libgcc. Returns the compiler output."""
    t = _target(core)
    cc = compiler(core)
    if cc is None:
        raise TargetBuildError(f"{t.cc} not found (Debian package {t.package})")
    for name, text in sources.items():
        (wd / name).write_text(text, encoding="utf-8")
    link_script = []
    if t.arch != "avr":
        (wd / "link.ld").write_text(LINKER_SCRIPT, encoding="utf-8")
        link_script = ["-T", "link.ld"]
    # one compiler call compiles every .c (each its own translation unit) and links
    cfiles = [n for n in sources if n.endswith(".c")]
    return run_compiler([cc, *cflags, *FREESTANDING_FLAGS, *cfiles, *link_script, *t.link, *t.libs, "-o", elf_name], wd)


def cross_build(
    design: Design,
    core: str,
    opt: str = "-Os",
    workdir: Path | str | None = None,
    emitted: dict[str, str] | None = None,
) -> TargetBuild:
    """Emit the C (or take ``emitted``, the output of ``edgetally.emit.emit(design)``), add the
    harness, compile and link for ``core`` (a key of TARGETS) with the strict flags (warnings are
    errors). Files go to ``workdir`` (made if needed, kept) or to a temporary folder removed before
    returning."""
    t = _target(core)
    # the demodulator's header and source; the wiring skeleton (<name>_port.c) needs the user's
    # hardware functions and is compiled by its own tests
    sources = {
        n: t for n, t in (emitted if emitted is not None else emit(design)).items() if n != f"{design.name}_port.c"
    }
    sources["harness.c"] = harness(design, t.in_len, t.out_len)
    # -g only adds debug sections (the DWARF ranges cycles.measure uses); it does not change the code.
    flags = [*STRICT_FLAGS, opt, *t.flags, "-gdwarf-4"]
    p = design.name
    if workdir is None:
        # the ELF is kept in the bounded cache by the hash of everything that makes it (sources,
        # flags, the compiler binary), so that a second verify of the same design does not rebuild
        from . import cache

        cc = compiler(core)
        st = os.stat(cc) if cc else None
        k = cache.key("elf", 2, sources, flags, t, LINKER_SCRIPT, cc, st and (st.st_size, st.st_mtime_ns))
        data = cache.load_bytes(k)
        if data is None:
            with tempfile.TemporaryDirectory(prefix=f"edgetally-{p}-") as tmp:
                log = compile_and_link(core, sources, flags, Path(tmp), f"{p}.elf")
                data = (Path(tmp) / f"{p}.elf").read_bytes()
            cache.store_bytes(k, data)
        return describe(design, core, opt, data, None, "")
    wd = Path(workdir)
    wd.mkdir(parents=True, exist_ok=True)
    elf = wd / f"{p}.elf"
    log = compile_and_link(core, sources, flags, wd, elf.name)
    return describe(design, core, opt, elf, wd, log)


def describe(design: Design, core: str, opt: str, elf_path: Path | bytes, wd: Path | None, log: str) -> TargetBuild:
    """The sizes and symbols of a linked ELF, given as a file or its bytes (the demodulator's are
    those named <name>_*)."""
    from elftools.elf.elffile import ELFFile

    t = _target(core)
    p = design.name
    data = elf_path if isinstance(elf_path, bytes) else Path(elf_path).read_bytes()
    syms: dict[str, Symbol] = {}
    elf = ELFFile(io.BytesIO(data))
    secnames = {i: s.name for i, s in enumerate(elf.iter_sections())}
    sec_sizes = {s.name: s["sh_size"] for s in elf.iter_sections()}
    for s in elf.get_section_by_name(".symtab").iter_symbols():
        kind = s["st_info"]["type"]
        if kind not in ("STT_FUNC", "STT_OBJECT") or not s.name or not isinstance(s["st_shndx"], int):
            continue
        addr = s["st_value"] & ~1 if t.arch == "arm" else s["st_value"]
        syms[s.name] = Symbol(s.name, addr, s["st_size"], kind[4:], secnames[s["st_shndx"]])
    state_sym = syms["harness_state_size"]
    sec = elf.get_section_by_name(state_sym.section)
    assert sec is not None  # the symbol's own section
    off = state_sym.addr - sec["sh_addr"]
    state_size = int.from_bytes(sec.data()[off : off + 4], "little")

    def ours(n: str) -> bool:
        return n.startswith(p + "_")

    fn = {n: s.size for n, s in syms.items() if s.kind == "FUNC" and ours(n)}
    # avr-gcc keeps constants in .data (flash image copied to RAM) unless told otherwise
    const_secs = (".rodata", ".text", ".data") if t.arch == "avr" else (".rodata", ".text")
    fobj = {n: s.size for n, s in syms.items() if s.kind == "OBJECT" and ours(n) and s.section in const_secs}
    ram = {n: s.size for n, s in syms.items() if s.kind == "OBJECT" and s.section in (".data", ".bss")}
    runtime = sum(s.size for n, s in syms.items() if s.kind == "FUNC" and not ours(n) and not n.startswith("harness_"))
    flash_total = sum(sec_sizes.get(n, 0) for n in (".text", ".rodata", ".ARM.exidx", ".data"))
    ram_total = sum(sec_sizes.get(n, 0) for n in (".data", ".bss"))
    return TargetBuild(
        design_name=p,
        core=core,
        opt=opt,
        elf=None if isinstance(elf_path, bytes) else Path(elf_path),
        elf_bytes=data,
        workdir=wd,
        symbols=syms,
        flash_by_function=dict(sorted(fn.items())),
        flash_by_object=dict(sorted(fobj.items())),
        ram_by_object=dict(sorted(ram.items())),
        flash_demod=sum(fn.values()) + sum(fobj.values()),
        flash_runtime=runtime,
        flash_total=flash_total,
        ram_state=state_size,
        ram_total=ram_total,
        input_ctype=input_type(design),
        sample_dtype=np.int16 if design.output.ctype == "int16_t" else np.uint16,
        input_dtype=np.uint16 if input_type(design) == "uint16_t" else np.uint32,
        compile_log=log,
        target=t,
    )
