"""Instructions and estimated cycles of a cross-compiled build, per event.

``measure(build, design, inputs)`` counts the instructions executed per event (per ISR call, per
input, per grid instant, per output sample) by attributing every executed instruction to the
function it belongs to (DWARF ranges, so inlined code is attributed to the function it was inlined
from), and turns them into cycles with a per-core timing table. The cycle figures are estimates:
the tables are from memory of the cores' published instruction timings, with no wait states and
no bus contention, and the exception entry and exit of a real interrupt are not executed here
(they are added from ``edgetally.cores`` where stated). ``total_cycles`` counts one whole call.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..emit import isr_names
from ..ir import Design
from .build import FLASH_BASE, FLASH_SIZE, IN_LEN, TargetBuild, TargetRunError
from .run import _feed_isr, _feed_process, _Machine


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
    from ..check import model
    from ..cores import CORES

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
