"""The instruction-set check: disassemble a target ELF's code and list the instructions the named
core does not have, so that a build for the wrong architecture cannot pass in an emulator that is
more permissive than the core (unicorn's M-profile model runs a divide instruction on the M0, its
RISC-V model runs multiplies for an RV32E build).

Sources of the rules (the architectures' open references, from memory): ARMv6-M has the 16-bit
Thumb instructions without CBZ/CBNZ/IT, and of the 32-bit encodings only BL, MRS, MSR, DMB, DSB,
ISB (Armv6-M Architecture Reference Manual, A5); Armv7E-M without an FPU has no VFP instructions,
with fpv4-sp-d16 no double-precision ones; the RISC-V unprivileged spec: RV32E has registers
x0..x15 only, the M extension adds MUL*/DIV*/REM*, F/D add the f* instructions, A adds LR/SC/AMO*;
the AVR instruction set manual: EICALL/EIJMP exist only on parts with more than 128 KB of flash,
DES/XCH/LAS/LAC/LAT on XMEGA only. Disassembly: capstone for Arm and RISC-V, avr-objdump for AVR.
"""

from __future__ import annotations

import io
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

from .build import TargetBuild

_V6M_32BIT = {"bl", "mrs", "msr", "dmb", "dsb", "isb"}
_RV_UPPER = re.compile(r"\b(a6|a7|s[2-9]|s1[01]|t[3-6]|x(1[6-9]|2\d|3[01]))\b")
_AVR_ABSENT = {"eicall", "eijmp", "des", "xch", "las", "lac", "lat"}


@dataclass(frozen=True)
class Violation:
    address: int
    text: str  # the instruction as disassembled
    reason: str

    def __str__(self) -> str:
        return f"0x{self.address:08x}: {self.text} ({self.reason})"


def _arm_data_ranges(elf) -> list[tuple[int, int]]:
    """Literal pools inside .text: from a $d mapping symbol to the next $t (ARM ELF ABI)."""
    marks = sorted(
        (s["st_value"], s.name[:2])
        for s in elf.get_section_by_name(".symtab").iter_symbols()
        if s.name in ("$d", "$t") or s.name.startswith(("$d.", "$t."))
    )
    out = []
    for i, (addr, kind) in enumerate(marks):
        if kind == "$d":
            end = next((a for a, k in marks[i + 1 :] if k == "$t"), 1 << 32)
            out.append((addr, end))
    return out


def _arm_rule(core: str, fpu: bool):
    def rule(insn) -> str | None:
        mn = insn.mnemonic.split(".")[0]
        if core == "cortex-m0plus":
            if insn.size == 4 and mn not in _V6M_32BIT:
                return "a 32-bit Thumb-2 instruction: ARMv6-M has none but BL, MRS, MSR, DMB, DSB, ISB"
            if mn in ("cbz", "cbnz") or mn.startswith("it"):
                return "not in ARMv6-M"
        if mn.startswith("v"):
            if not fpu:
                return "an FPU instruction in a build without an FPU"
            if ".f64" in insn.mnemonic or re.search(r"\bd\d+\b", insn.op_str):
                return "double precision: fpv4-sp-d16 is single precision only"
        return None

    return rule


def _rv_rule(core: str):
    def rule(insn) -> str | None:
        mn = insn.mnemonic
        base = mn[2:] if mn.startswith("c.") else mn
        if base.startswith("f") and not base.startswith("fence"):
            return "a floating-point instruction (no F/D extension)"
        if base.startswith(("lr.", "sc.", "amo")):
            return "an atomic instruction (no A extension)"
        if core == "rv32ec":
            if base.startswith(("mul", "div", "rem")):
                return "a multiply/divide instruction: RV32EC has no M extension"
            if _RV_UPPER.search(insn.op_str):
                return "a register above x15: RV32E has 16 registers"
        return None

    return rule


def _capstone_violations(build: TargetBuild, fpu: bool) -> list[Violation]:
    import capstone
    from elftools.elf.elffile import ELFFile

    arch = build.target.arch
    elf = ELFFile(io.BytesIO(build.elf_bytes))
    if arch == "arm":
        cs = capstone.Cs(capstone.CS_ARCH_ARM, capstone.CS_MODE_THUMB | capstone.CS_MODE_MCLASS)
        rule, data, step = _arm_rule(build.core, fpu), _arm_data_ranges(elf), 2
    else:
        cs = capstone.Cs(capstone.CS_ARCH_RISCV, capstone.CS_MODE_RISCV32 | capstone.CS_MODE_RISCVC)
        rule, data, step = _rv_rule(build.core), [], 2
    out: list[Violation] = []
    for sec in elf.iter_sections():
        if not sec["sh_flags"] & 0x4 or sec["sh_type"] != "SHT_PROGBITS":  # SHF_EXECINSTR
            continue
        code, base = sec.data(), sec["sh_addr"]
        off = 0
        while off < len(code):
            addr = base + off
            hole = next(((lo, hi) for lo, hi in data if lo <= addr < hi), None)
            if hole is not None:
                off = hole[1] - base
                continue
            if code[off : off + 2] == b"\0\0" and arch == "riscv":  # alignment padding
                off += 2
                continue
            insn = next(cs.disasm(code[off : off + 4], addr, 1), None)
            if insn is None:
                out.append(Violation(addr, code[off : off + 4].hex(), "not a valid instruction"))
                off += step
                continue
            why = rule(insn)
            if why:
                out.append(Violation(addr, f"{insn.mnemonic} {insn.op_str}".strip(), why))
            off += insn.size
    return out


def _avr_violations(build: TargetBuild) -> list[Violation]:
    objdump = shutil.which("avr-objdump")
    if objdump is None:
        raise RuntimeError("avr-objdump not found (Debian package binutils-avr)")
    with tempfile.TemporaryDirectory(prefix="edgetally-isa-") as wd:
        p = Path(wd) / "a.elf"
        p.write_bytes(build.elf_bytes)
        text = subprocess.run([objdump, "-d", str(p)], capture_output=True, text=True, check=True).stdout
    out = []
    for line in text.splitlines():
        m = re.match(r"\s*([0-9a-f]+):\s+(?:[0-9a-f]{2} )+\s*(\S+)\s*(.*)", line)
        if m and m.group(2) in _AVR_ABSENT:
            out.append(
                Violation(
                    int(m.group(1), 16),
                    f"{m.group(2)} {m.group(3)}".strip(),
                    "not on this AVR part (more than 128 KB of flash or XMEGA only)",
                )
            )
        elif m and m.group(2) == ".word":
            out.append(Violation(int(m.group(1), 16), m.group(3), "not a valid instruction"))
    return out


def violations(build: TargetBuild, fpu: bool = False) -> list[Violation]:
    """The instructions in ``build``'s code that its core lacks (empty: the build passes).
    ``fpu``: the build is allowed the core's single-precision FPU (the M4F float baseline)."""
    if build.target.arch == "avr":
        return _avr_violations(build)
    return _capstone_violations(build, fpu)
