"""The instruction-set check (edgetally.target.isa) catches an instruction the named core lacks,
planted into a real build; and the float baseline is what it says (single precision in software,
or on the M4F class's FPU).

Encodings (from memory of the architecture references, each checked here by the disassembler
naming the planted instruction): Thumb-2 UDIV r0, r0, r1 = F0F1 FBB0 (halfwords FBB0 F0F1); Thumb
VADD.F32 s0, s0, s1 = EE30 0A20; RV32M MUL a0, a0, a1 = 0x02B50533; RV32I ADD a6, a6, a6 =
0x01080833; AVR EICALL = 0x9519.
"""

import dataclasses
import io

import pytest

from edgetally.target import build as target
from edgetally.target import isa

from conftest import ALL_DESIGNS

pytest.importorskip("capstone", reason="the Python package capstone is not installed")
pytest.importorskip("elftools", reason="the Python package pyelftools is not installed (pip install pyelftools)")

KEY = "campus_fm:timestamp"


def _build(core):
    if target.compiler(core) is None:
        pytest.skip(f"{target.TARGETS[core].cc} is not installed")
    return target.cross_build(ALL_DESIGNS[KEY], core)


def _plant(b, fn: str, code: bytes):
    """A copy of build ``b`` with ``code`` written over the first bytes of function ``fn``."""
    from elftools.elf.elffile import ELFFile

    elf = ELFFile(io.BytesIO(b.elf_bytes))
    addr = b.address(fn)
    for sec in elf.iter_sections():
        lo = sec["sh_addr"]
        if sec["sh_flags"] & 0x4 and lo <= addr < lo + sec["sh_size"]:
            off = sec["sh_offset"] + addr - lo
            data = bytearray(b.elf_bytes)
            data[off:off + len(code)] = code
            return dataclasses.replace(b, elf_bytes=bytes(data))
    raise AssertionError(f"{fn} is in no code section")


@pytest.mark.parametrize("core, code, mnemonic", [
    ("cortex-m0plus", bytes.fromhex("b0fbf1f0"), "udiv"),       # divide: not in ARMv6-M
    ("cortex-m4", bytes.fromhex("30ee200a"), "vadd"),           # FPU instruction in a build without FPU
    ("rv32ec", (0x02B50533).to_bytes(4, "little"), "mul"),      # M extension on RV32EC
    ("rv32ec", (0x01080833).to_bytes(4, "little"), "a6"),       # x16 on RV32E
    ("rv32imc", (0x00052007).to_bytes(4, "little"), "flw"),     # F extension: FLW ft0, 0(a0)
    ("avr", (0x9519).to_bytes(2, "little"), "eicall"),          # only on parts over 128 KB of flash
])
def test_planted_instruction_is_caught(core, code, mnemonic):
    b = _build(core)
    assert isa.violations(b) == []
    fn = f"{ALL_DESIGNS[KEY].name}_init"
    bad = isa.violations(_plant(b, fn, code))
    assert len(bad) >= 1
    assert bad[0].address == b.address(fn) and mnemonic in bad[0].text


def test_float_baseline_uses_the_fpu_on_m4f_and_software_on_m0(tmp_path):
    """The single-precision baseline has VFP instructions on the M4F class (and no double-precision
    one: the check with fpu=True passes), none on the M0+ class, where it calls libgcc's single-
    precision helpers (__aeabi_fadd and friends, the Arm run-time ABI names)."""
    from edgetally.target.float_baseline import float_build

    if target.compiler("cortex-m4") is None:
        pytest.skip("arm-none-eabi-gcc is not installed")
    d = ALL_DESIGNS[KEY]
    m4f = float_build(d, "cortex-m4", tmp_path / "m4f")
    assert any("FPU instruction" in v.reason for v in isa.violations(m4f, fpu=False))
    assert isa.violations(m4f, fpu=True) == []
    m0 = float_build(d, "cortex-m0plus", tmp_path / "m0")
    assert isa.violations(m0) == []
    assert "__aeabi_fadd" in m0.symbols and "__aeabi_dadd" not in m0.symbols
    m0d = float_build(d, "cortex-m0plus", tmp_path / "m0d", precision="double")
    assert "__aeabi_dadd" in m0d.symbols


def test_avr_cycles_are_the_manuals():
    """simavr's cycle count through our driver, on a planted sequence: LDI r24,1; LDI r25,0; RET.
    AVR Instruction Set Manual (from memory): LDI 1 cycle, RET 4 cycles on a part with a 16-bit PC
    (the ATmega1284P's 128 KB of flash are 64 K words): 3 instructions, 6 cycles, r24 = 1."""
    from edgetally.target.cycles import Profiler, code_end
    from edgetally.target.run import machine

    if not target.available("avr"):
        pytest.skip("avr-gcc or simavr is not installed")
    b = _build("avr")
    code = b"".join(w.to_bytes(2, "little") for w in (0xE081, 0xE090, 0x9508))
    planted = _plant(b, "harness_init", code)
    m = machine(planted)
    prof = Profiler(m, planted, [("all", [(0, code_end(planted))])], {})
    prof.start()
    assert m.call("harness_init") >> 16 == 1      # the driver returns r22..r25; r24:r25 hold 1
    t = prof.result()
    assert t.counts == {"all": 3} and t.cycles == {"all": 6.0}
