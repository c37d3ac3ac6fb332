"""Built-in core profiles: what a class of MCU usually has, and rough cycle costs for planning.

A profile gives the default of every capability field of a spec's [target] table; the spec may
override any of them field by field. Every cycle figure is a planning estimate, not a
measurement; the source of each is given beside it. "Architecture manual" figures are from memory
of the vendor-neutral architecture references (exception entry and exit, divide and multiply
timings) and were not checked against the printed page.
"""

from __future__ import annotations

from dataclasses import dataclass

HW_DIV32_CYCLES = 12  # architecture manual, from memory: a 32/32 divide instruction, 2..12 cycles, worst case
HW_MAC64_CYCLES = 2  # architecture manual, from memory: single-issue 32x32->64 multiply-accumulate, +1 load


@dataclass(frozen=True)
class Core:
    name: str
    note: str
    # capability defaults (the spec's [target] fields of the same name override them)
    has_capture: bool  # timer input capture that can latch IF edges
    has_edge_irq: bool  # comparator or pin-change interrupt on the IF
    has_counter: bool  # a timer that can be clocked by the IF (external clock input)
    capture_prescalers: tuple[int, ...]
    hw_divide: bool
    mul64: bool  # a 32x32 -> 64 multiply instruction
    isr_cycles: int  # exception entry + exit with a minimal prologue, no work
    irq_jitter_cycles: int  # peak-to-peak spread of the edge-interrupt latency
    # costs of what the core lacks, done in software
    soft_div32_cycles: int
    soft_mac64_cycles: int
    mul32_cycles: int  # one 16x16 -> 32 (or 32x32 -> 32) multiply
    op_cycles: int  # one plain 32-bit ALU step with its load/store share


CORES = {
    "cortex-m0plus": Core(
        name="cortex-m0plus",
        note="ARMv6-M class: no divide instruction, 32x32->32 multiply",
        has_capture=True,
        has_edge_irq=True,
        has_counter=True,
        capture_prescalers=(1, 2, 4, 8),
        hw_divide=False,
        mul64=False,
        isr_cycles=31,  # architecture manual, from memory: 15 entry + 16 exit incl. a short prologue
        irq_jitter_cycles=4,  # estimate: waiting for the longest multi-cycle instruction to finish
        soft_div32_cycles=90,  # estimate: a run-time library division loop
        soft_mac64_cycles=30,  # estimate: 32x32->64 from 16x16 partial products
        mul32_cycles=1,  # architecture manual, from memory: MULS is 1 cycle with the fast multiplier
        op_cycles=2,  # estimate
    ),
    "cortex-m4": Core(
        name="cortex-m4",
        note="ARMv7E-M class: divide instruction, single-cycle 32x32->64 multiply-accumulate",
        has_capture=True,
        has_edge_irq=True,
        has_counter=True,
        capture_prescalers=(1, 2, 4, 8),
        hw_divide=True,
        mul64=True,
        isr_cycles=24,  # architecture manual, from memory: 12 entry + 12 exit (tail-chaining aside)
        irq_jitter_cycles=12,  # estimate: a divide or load-multiple in progress delays entry
        soft_div32_cycles=90,
        soft_mac64_cycles=30,
        mul32_cycles=1,  # architecture manual, from memory: MUL is single-cycle
        op_cycles=1,  # estimate
    ),
    "generic-8bit": Core(
        name="generic-8bit",
        note="8-bit class: 16-bit int, everything wide is done in software",
        has_capture=True,
        has_edge_irq=True,
        has_counter=True,
        capture_prescalers=(1, 8),
        hw_divide=False,
        mul64=False,
        isr_cycles=40,  # estimate: register save and restore of an 8-bit core with a C ISR
        irq_jitter_cycles=4,  # estimate: instructions take 1 to 4 cycles
        soft_div32_cycles=600,  # estimate: 32-bit division on an 8-bit ALU
        soft_mac64_cycles=250,  # estimate: 32x32->64 from 8x8 partial products
        mul32_cycles=40,  # estimate: 16x16->32 from four 8x8 hardware multiplies and adds
        op_cycles=8,  # estimate: a 32-bit op is four 8-bit ops plus loads
    ),
    # RISC-V classes: the ISA names are the open standard's (RISC-V unprivileged spec: I base, E base
    # with 16 registers, M multiply/divide, C compressed). No vendor's timing is assumed: the cycle
    # figures are estimates for a small in-order 2- or 3-stage core (as in edgetally.target.cycles).
    "rv32imc": Core(
        name="rv32imc",
        note="RV32IMC class: 32 registers, multiply and divide instructions, no FPU",
        has_capture=True,
        has_edge_irq=True,
        has_counter=True,
        capture_prescalers=(1, 2, 4, 8),
        hw_divide=True,  # DIVU exists (M); a small core's divider is slow (about 34 cycles, estimate)
        mul64=True,  # MUL + MULHU give the 64-bit product in two instructions
        isr_cycles=40,  # estimate: no hardware stacking; a C handler saves and restores the 16
        # caller-saved registers (ra, t0-t6, a0-a7) and returns with MRET
        irq_jitter_cycles=4,  # estimate: a load or a taken branch in progress
        soft_div32_cycles=90,
        soft_mac64_cycles=30,  # not used while hw_divide and mul64 hold
        mul32_cycles=1,  # estimate: the fast single-cycle multiplier option
        op_cycles=1,  # estimate
    ),
    "rv32ec": Core(
        name="rv32ec",
        note="RV32EC class: 16 registers, no multiply or divide instruction, no FPU",
        has_capture=True,
        has_edge_irq=True,
        has_counter=True,
        capture_prescalers=(1, 2, 4, 8),
        hw_divide=False,
        mul64=False,
        isr_cycles=26,  # estimate: a C handler saves and restores the 10 caller-saved registers
        # of the E base (ra, t0-t2, a0-a5) and returns with MRET
        irq_jitter_cycles=4,  # estimate
        soft_div32_cycles=150,  # estimate: libgcc's shift-and-subtract __udivsi3, 32 steps
        soft_mac64_cycles=400,  # estimate: a 64-bit product from libgcc's shift-and-add __mulsi3 calls
        mul32_cycles=100,  # estimate: one __mulsi3 call (shift-and-add loop)
        op_cycles=1,  # estimate
    ),
    # The 8-bit AVR class as emulated (simavr, an ATmega1284P-class part). Source for the interrupt
    # response: the AVR datasheets' "interrupt response time" (4 cycles to the vector, a JMP of 3 and a
    # RETI of 4), from memory, plus the register saving of a C handler (estimate).
    "avr": Core(
        name="avr",
        note="8-bit AVR class (ATmega, hardware 8x8 multiply): 16-bit int, wide arithmetic in software",
        has_capture=True,
        has_edge_irq=True,
        has_counter=True,
        capture_prescalers=(1,),  # datasheet, from memory: the input capture unit latches every selected
        # edge (the clock select divides the timer clock, not the edges)
        hw_divide=False,
        mul64=False,
        isr_cycles=40,  # 11 (datasheet, from memory) + about 30 for the saving of a C handler (estimate)
        irq_jitter_cycles=4,  # datasheet, from memory: instructions take 1 to 4 cycles (5 with a 3-byte PC)
        soft_div32_cycles=600,  # estimate: 32-bit division on an 8-bit ALU
        soft_mac64_cycles=250,  # estimate: 32x32->64 from 8x8 partial products
        mul32_cycles=40,  # estimate: 16x16->32 from four 8x8 hardware multiplies and adds
        op_cycles=8,  # estimate: a 32-bit op is four 8-bit ops plus loads
    ),
}
