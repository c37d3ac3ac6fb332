"""Built-in core profiles: rough cycle costs the planner uses for CPU-load estimates.

Every figure is an estimate for planning, not a measurement; the source of each is given beside it.
"Architecture manual" figures are from memory of the vendor-neutral architecture reference
(exception entry/exit, divide and multiply timings) and were not checked against the printed page.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Core:
    name: str
    isr_cycles: int        # exception entry + exit, no work
    div32_cycles: int      # one unsigned 32/32 division
    mac64_cycles: int      # one 32x32 -> 64 multiply-accumulate
    op_cycles: int         # one plain 32-bit ALU step with its load/store share
    note: str


CORES = {
    "cortex-m0plus": Core(
        name="cortex-m0plus",
        isr_cycles=31,     # architecture manual, from memory: 15 entry + 16 exit incl. a short prologue
        div32_cycles=90,   # estimate: software division (no divide instruction on this class)
        mac64_cycles=30,   # estimate: 32x32->64 built from 16x16 partial products (MULS is 32x32->32)
        op_cycles=2,       # estimate: one ALU op plus a load/store share
        note="ARMv6-M class, no hardware divide, 32x32->32 multiply",
    ),
    "cortex-m4": Core(
        name="cortex-m4",
        isr_cycles=24,     # architecture manual, from memory: 12 entry + 12 exit (tail-chaining aside)
        div32_cycles=12,   # architecture manual, from memory: UDIV 2..12 cycles, worst case taken
        mac64_cycles=2,    # architecture manual, from memory: SMLAL single-cycle issue, +1 for loads
        op_cycles=1,
        note="ARMv7E-M class, hardware divide, single-cycle 32x32->64 multiply-accumulate",
    ),
    "generic-8bit": Core(
        name="generic-8bit",
        isr_cycles=40,     # estimate: register save/restore of an 8-bit core with a C ISR
        div32_cycles=600,  # estimate: software 32-bit division on an 8-bit ALU
        mac64_cycles=250,  # estimate: 32x32->64 from 8x8 partial products
        op_cycles=8,       # estimate: a 32-bit op is four 8-bit ops plus loads
        note="8-bit class; 16-bit int; everything wide is done in software",
    ),
}
