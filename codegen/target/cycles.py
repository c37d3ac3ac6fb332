"""Instructions and cycles of a cross-compiled build, per event.

``measure(build, design, inputs)`` counts the instructions executed per event (per ISR call, per
input, per grid instant, per output sample) by attributing every executed instruction to the role
of the code it belongs to (DWARF ranges of the emitted C's functions, so inlined code counts for
the function it was inlined from; the functions of each role come from
``edgetally.emit.internal_functions``), and turns them into cycles:

- AVR class (simavr): the simulator's own cycle counter, exact for the core (no wait states exist);
- Arm and RISC-V classes (unicorn): a per-class timing table (``TIMING``), so the cycles are
  estimates, with zero wait states and no bus contention.

Counting costs no Python call per executed block: a C block hook (csrc/tally.c) counts each
translated block's executions by entry context; each block is decoded once (capstone) and its
instructions multiplied by its count. Exception entry and exit of a real interrupt are not executed
here; they are added from ``edgetally.cores`` where stated.
"""

from __future__ import annotations

import hashlib
import io
from dataclasses import dataclass, field

import numpy as np

from ..emit import internal_functions, isr_names
from ..ir import Design
from .build import FLASH_BASE, TargetBuild, TargetRunError
from .run import feed_isr, feed_process, machine

# Cycles per instruction class of the unicorn-run cores.
# Arm: from memory of the Cortex-M0+ and Cortex-M4 technical reference manuals' instruction timing
# tables (not checked against the printed page); zero-wait-state memory, no bus contention. "n" is
# the number of registers moved; a taken branch refills the pipeline. M0+: ALU 1, LDR/STR 2,
# LDM/STM/PUSH/POP 1+n, POP with PC 3+n, B taken 2 (not taken 1), BL 3, BX/BLX 2, MULS 1 (the fast
# single-cycle multiplier option; the small one takes 32). M4: ALU 1, LDR/STR 2 (back-to-back loads
# pipeline to 1: not modelled), LDM/STM/PUSH/POP 1+n, POP with PC 1+n+2, B taken 1+2 (the refill is
# 1..3; 2 used, estimate) not taken 1, BL 3, BX 3, MUL/MLA and the 32x32->64 UMULL/SMULL/UMLAL/SMLAL
# 1, UDIV/SDIV 2..12 (data dependent; 12 used, the worst case), IT 1 (may fold: not modelled).
# M4 FPU (fpv4-sp-d16), from memory of the same manual's FPU table: VADD/VSUB/VMUL/VABS/VNEG/VCMP/
# VCVT/VMOV 1, VLDR/VSTR 2, VLDM/VSTM/VPUSH/VPOP 1+n, VMLA/VMLS/VNMLA/VNMLS/VFMA 3, VDIV/VSQRT 14.
# RISC-V: estimate (no vendor table): a small in-order 2- or 3-stage RV32 core with a fast
# multiplier option: ALU 1, load 2, store 1, branch taken 3 (not taken 1), JAL 2, JALR 3, MUL/MULH 1,
# DIV/REM 34 (a bit-serial divider). The RV32EC class has no multiply or divide instruction.
TIMING = {
    "cortex-m0plus": dict(
        alu=1,
        load=2,
        store=2,
        multi_base=1,
        pop_pc_extra=2,
        branch_taken=2,
        branch_not=1,
        bl=3,
        bx=2,
        mul=1,
        mul_long=1,
        div=12,
        fpu=1,
        fpu_mem=2,
        fpu_mac=3,
        fpu_div=14,
    ),
    "cortex-m4": dict(
        alu=1,
        load=2,
        store=2,
        multi_base=1,
        pop_pc_extra=2,
        branch_taken=3,
        branch_not=1,
        bl=3,
        bx=3,
        mul=1,
        mul_long=1,
        div=12,
        fpu=1,
        fpu_mem=2,
        fpu_mac=3,
        fpu_div=14,
    ),
    "rv32imc": dict(alu=1, load=2, store=1, branch_taken=3, branch_not=1, jal=2, jalr=3, mul=1, div=34),
    "rv32ec": dict(alu=1, load=2, store=1, branch_taken=3, branch_not=1, jal=2, jalr=3, mul=1, div=34),
}
CYCLE_SOURCE = {
    "cortex-m0plus": "estimate: per-class table from memory of the core's published instruction timings",
    "cortex-m4": "estimate: per-class table from memory of the core's published instruction timings",
    "rv32imc": "estimate: per-class table of a typical small in-order core (no vendor table)",
    "rv32ec": "estimate: per-class table of a typical small in-order core (no vendor table)",
    "avr": "exact: simavr's cycle counter",
}


@dataclass
class Costs:
    core: str
    opt: str
    method: str  # where the cycles come from (CYCLE_SOURCE)
    inputs: int
    grid_instants: int
    outputs: int
    instr_per_input: float  # <name>_process/_input and the front end, per input
    instr_per_grid: float  # <name>_grid without post, per grid instant (CIC, 1-in-R combs)
    instr_per_output: float  # <name>_post, per output sample
    instr_per_output_total: float  # the whole process run divided by the outputs
    cycles_per_input: float
    cycles_per_grid: float
    cycles_per_output: float
    cycles_per_output_total: float
    isr_instr: dict[str, float]  # per call of each ISR function (body only, no entry/exit)
    isr_cycles: dict[str, float]
    isr_cycles_with_entry: dict[str, float]  # + exception entry and exit from ..cores (estimate)
    class_counts: dict[str, int] = field(default_factory=dict)
    stack_bytes: int = 0


# --------------------------------------------------------------------------------------------
# instruction classes


def _arm_class(insn, c) -> tuple[str, float, str]:
    """(class, cycles if not a taken branch, branch kind) of one capstone Thumb instruction."""
    mn = insn.mnemonic.split(".")[0]
    regs = list(insn.operands)
    if mn.startswith("v"):
        if mn in ("vpush", "vpop") or mn.startswith(("vldm", "vstm")):
            return "fpu", c["multi_base"] + len(regs) - (0 if mn in ("vpush", "vpop") else 1), ""
        if mn in ("vldr", "vstr"):
            return "fpu", c["fpu_mem"], ""
        if mn in ("vdiv", "vsqrt"):
            return "fpu", c["fpu_div"], ""
        if mn in ("vmla", "vmls", "vnmla", "vnmls", "vfma", "vfms", "vfnma", "vfnms"):
            return "fpu", c["fpu_mac"], ""
        return "fpu", c["fpu"], ""
    if mn in ("push", "pop") or mn.startswith(("ldm", "stm")):
        n = len(regs) - (0 if mn in ("push", "pop") else 1)
        if mn == "pop" and any(insn.reg_name(op.reg) == "pc" for op in regs):
            return "branch", c["multi_base"] + n + c["pop_pc_extra"], "always"
        return "mem", c["multi_base"] + n, ""
    if mn.startswith(("ldr", "ldrex")):
        return "mem", c["load"], ""
    if mn.startswith(("str", "strex")):
        return "mem", c["store"], ""
    if mn in ("bl", "blx"):
        return "branch", c["bl"], "always"
    if mn == "bx":
        return "branch", c["bx"], "always"
    if mn in ("cbz", "cbnz") or (mn.startswith("b") and len(mn) in (1, 3) and mn not in ("bic", "bfc", "bfi")):
        return "branch", c["branch_taken"], "always" if mn == "b" else "cond"
    if mn in ("udiv", "sdiv"):
        return "div", c["div"], ""
    if mn in ("umull", "smull", "umlal", "smlal"):
        return "mul", c["mul_long"], ""
    if mn in ("mul", "muls", "mla", "mls") or mn.startswith(("smul", "smla")):
        return "mul", c["mul"], ""
    if mn in ("mov", "add") and regs and regs[0].type == 1 and insn.reg_name(regs[0].reg) == "pc":
        return "branch", c["bx"], "always"
    return "alu", c["alu"], ""


_RV_COND = {
    "beq",
    "bne",
    "blt",
    "bge",
    "bltu",
    "bgeu",
    "beqz",
    "bnez",
    "blez",
    "bgez",
    "bltz",
    "bgtz",
    "bgt",
    "ble",
    "bgtu",
    "bleu",
}


def _rv_class(insn, c) -> tuple[str, float, str]:
    mn = insn.mnemonic
    base = mn[2:] if mn.startswith("c.") else mn
    if base in _RV_COND:
        return "branch", c["branch_taken"], "cond"
    if base in ("j", "jal"):
        return "branch", c["jal"], "always"
    if base in ("jr", "jalr", "ret"):
        return "branch", c["jalr"], "always"
    if base in ("lw", "lh", "lhu", "lb", "lbu", "lwsp"):
        return "mem", c["load"], ""
    if base in ("sw", "sh", "sb", "swsp"):
        return "mem", c["store"], ""
    if base.startswith("mul"):
        return "mul", c["mul"], ""
    if base.startswith(("div", "rem")):
        return "div", c["div"], ""
    return "alu", c["alu"], ""


def disassembler(arch: str):
    """A capstone disassembler with details for the unicorn-run architectures."""
    import capstone

    if arch == "arm":
        cs = capstone.Cs(capstone.CS_ARCH_ARM, capstone.CS_MODE_THUMB | capstone.CS_MODE_MCLASS)
    else:
        cs = capstone.Cs(capstone.CS_ARCH_RISCV, capstone.CS_MODE_RISCV32 | capstone.CS_MODE_RISCVC)
    cs.detail = True
    return cs


# --------------------------------------------------------------------------------------------
# roles and tallies


def dwarf_ranges(elf_bytes: bytes) -> dict[str, list[tuple[int, int]]]:
    """Function name -> address ranges of its code, out-of-line and inlined instances alike
    (cached by the ELF's hash: reading DWARF with pyelftools takes a noticeable fraction of a
    second)."""
    from . import cache

    k = cache.key("dwarf-ranges", 1, hashlib.sha256(elf_bytes).hexdigest())
    got = cache.load_json(k)
    if got is None:
        got = _read_dwarf_ranges(elf_bytes)
        cache.store_json(k, got)
    return {n: [tuple(r) for r in rs] for n, rs in got.items()}


def _read_dwarf_ranges(elf_bytes: bytes) -> dict[str, list[tuple[int, int]]]:
    from elftools.elf.elffile import ELFFile

    out: dict[str, list[tuple[int, int]]] = {}
    elf = ELFFile(io.BytesIO(elf_bytes))
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


@dataclass
class Tally:
    """Executed instructions and cycles by role, calls of the entry functions, instruction classes."""

    counts: dict[str, int]
    cycles: dict[str, float]
    calls: dict[str, int]
    classes: dict[str, int]


def code_end(build: TargetBuild) -> int:
    return max(s.addr + s.size for s in build.symbols.values() if s.kind == "FUNC")


class Profiler:
    """Counts what runs on machine ``m`` by role: ``roles`` is [(name, address ranges)], innermost
    first (an instruction takes the first role whose ranges hold it); instructions outside every
    role count for the role of the code that ran last (its caller). ``entries`` maps function
    addresses to the names whose calls are counted. Call ``start()`` before the measured part."""

    def __init__(self, m, build: TargetBuild, roles: list[tuple[str, list[tuple[int, int]]]], entries: dict[int, str]):
        self.m, self.build, self.entries = m, build, entries
        self.names = ["other"] + [n for n, _ in roles]
        avr = build.target.arch == "avr"
        base = 0 if avr else FLASH_BASE
        nslots = (code_end(build) - base) // 2 + 2
        role = np.zeros(nslots, np.uint8)
        for i, (_, ranges) in reversed(list(enumerate(roles, start=1))):
            for lo, hi in ranges:
                a, b = max(0, (lo - base) // 2), min(nslots, (hi - base + 1) // 2)
                if b > a:
                    role[a:b] = i
        self.base = base
        if avr:
            ent = np.zeros(nslots, np.uint8)
            for addr in entries:
                ent[addr // 2] = 1
            self.t = m.role_tally(role, len(self.names), ent)
        else:
            self.t = m.block_tally(role, len(self.names))
            self.role = role

    def start(self) -> None:
        self.t.start()

    def stop(self) -> None:
        self.t.struct.active = 0

    def result(self) -> Tally:
        names = self.names
        if self.build.target.arch == "avr":
            t = self.t
            counts: dict[str, int] = {names[i]: int(v) for i, v in enumerate(t.insns) if v}
            cycles: dict[str, float] = {names[i]: float(v) for i, v in enumerate(t.cycles) if v}
            calls: dict[str, int] = {n: int(t.calls[a // 2]) for a, n in self.entries.items()}
            return Tally(counts, cycles, calls, {})
        arch = self.build.target.arch
        c = TIMING[self.build.core]
        classify = _arm_class if arch == "arm" else _rv_class
        cs = disassembler(arch)
        counts = {}
        cycles = {}
        calls = {n: 0 for n in self.entries.values()}
        classes: dict[str, int] = {}
        decoded: dict[tuple[int, int], list] = {}
        for addr, size, ctx, n, fall in self.t.blocks():
            if addr in self.entries:
                calls[self.entries[addr]] += n
            items = decoded.get((addr, size))
            if items is None:
                code = bytes(self.m.mu.mem_read(addr, size))
                items = []
                for insn in cs.disasm(code, addr):
                    cls, cyc, kind = classify(insn, c)
                    items.append((int(self.role[(insn.address - self.base) // 2]), cls, cyc, kind))
                decoded[(addr, size)] = items
            k, kind = ctx, ""
            for r, cls, cyc, kind in items:  # noqa: B007 (the last instruction's kind is read below)
                if r:
                    k = r
                counts[names[k]] = counts.get(names[k], 0) + n
                cycles[names[k]] = cycles.get(names[k], 0.0) + n * cyc
                classes[cls] = classes.get(cls, 0) + n
            if kind == "cond" and fall:
                cycles[names[k]] -= fall * (c["branch_taken"] - c["branch_not"])
        return Tally(counts, cycles, calls, classes)


def roles(build: TargetBuild, design: Design) -> tuple[list[tuple[str, list[tuple[int, int]]]], dict[int, str]]:
    """The roles of the build's code, innermost first (post is inlined into grid, grid into the
    front end, those into process), and the ISR entry addresses."""
    ranges = dwarf_ranges(build.elf_bytes)
    fns = internal_functions(design)
    isrs = isr_names(design)

    def of(names):
        return sum((ranges.get(n, []) for n in names), [])

    out = [("output", of(fns["output"])), ("grid", of(fns["grid"]))]
    out += [(n, ranges.get(n, [])) for n in isrs]
    out.append(("input", of(fns["input"])))
    out.append(("harness", of([n for n in ranges if n.startswith("harness_")])))
    return out, {build.address(n): n for n in isrs}


# --------------------------------------------------------------------------------------------
# measurements


def isr_tally(build: TargetBuild, design: Design, inputs: np.ndarray, rl, entries) -> tuple[Tally, int]:
    """The ISR path on ``inputs``: only the ISR functions' own instructions (and helpers they call)
    count for them. Returns the tally and the deepest stack use."""
    m = machine(build)
    prof = Profiler(m, build, rl, entries)
    m.call("harness_init")
    prof.start()
    feed_isr(m, build, inputs, max(1, min(design.queue_len // 4, build.in_len)))
    return prof.result(), m.stack_used()


def costs(
    build: TargetBuild, design: Design, t: Tally, n_in: int, n_grid: int, n_out: int, t_isr: Tally, stack: int
) -> Costs:
    """Per-event figures from a process-path tally over ``n_in`` inputs (that made ``n_grid`` grid
    instants and ``n_out`` samples) and an ISR-path tally."""
    from ..cores import CORES

    def per(d, k, n):
        return round(d.get(k, 0) / n, 2) if n else 0.0

    entry = CORES[build.core].isr_cycles
    names = isr_names(design)
    isr_instr = {n: per(t_isr.counts, n, t_isr.calls.get(n, 0)) for n in names}
    isr_cyc = {n: per(t_isr.cycles, n, t_isr.calls.get(n, 0)) for n in names}
    work = ("input", "grid", "output")
    cnt, cyc = t.counts, t.cycles
    return Costs(
        core=build.core,
        opt=build.opt,
        method=CYCLE_SOURCE[build.core],
        inputs=n_in,
        grid_instants=n_grid,
        outputs=n_out,
        instr_per_input=per(cnt, "input", n_in),
        instr_per_grid=per(cnt, "grid", n_grid),
        instr_per_output=per(cnt, "output", n_out),
        instr_per_output_total=round(sum(cnt.get(k, 0) for k in work) / n_out, 2) if n_out else 0.0,
        cycles_per_input=per(cyc, "input", n_in),
        cycles_per_grid=per(cyc, "grid", n_grid),
        cycles_per_output=per(cyc, "output", n_out),
        cycles_per_output_total=round(sum(cyc.get(k, 0) for k in work) / n_out, 2) if n_out else 0.0,
        isr_instr=isr_instr,
        isr_cycles=isr_cyc,
        isr_cycles_with_entry={n: round(v + entry, 2) for n, v in isr_cyc.items()},
        class_counts=dict(t.classes),
        stack_bytes=stack,
    )


def measure(build: TargetBuild, design: Design, inputs: np.ndarray, max_inputs: int = 3000, ref=None) -> Costs:
    """Instructions and cycles per event, from an emulated run of the first ``max_inputs`` inputs
    through <name>_process and of the ISR path on the first 1000 of them. ``ref``: the integer
    model's run on those inputs, if the caller has it."""
    from ..check import model

    inputs = np.ascontiguousarray(inputs[:max_inputs], dtype=build.input_dtype)
    if ref is None:
        ref = model.run(design, inputs)
    rl, entries = roles(build, design)
    m = machine(build)
    prof = Profiler(m, build, rl, entries)
    m.call("harness_init")
    prof.start()
    chunks = feed_process(m, build, inputs, min(build.in_len, 1024))
    produced = sum(c.size for c in chunks)
    n_grid, n_out, n_in = int(ref.steps.size), int(ref.out.size), int(inputs.size)
    if produced != n_out:
        raise TargetRunError(f"measured run made {produced} outputs, the model {n_out}")
    t_isr, isr_stack = isr_tally(build, design, inputs[: min(n_in, 1000)], rl, entries)
    return costs(build, design, prof.result(), n_in, n_grid, n_out, t_isr, max(m.stack_used(), isr_stack))
