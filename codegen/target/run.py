"""Run a cross-compiled build (``edgetally.target.cross_build``) in the unicorn Thumb emulator.

``run(build, design, inputs)`` feeds the inputs through <name>_process (or, with ``isr=True``,
through the scheme's ISR functions and <name>_service) and returns the outputs and counters.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..ir import Design
from .build import (COUNTERS, FLASH_BASE, FLASH_SIZE, IN_LEN, MAX_INSNS_PER_CALL, OUT_LEN, RAM_BASE, RAM_SIZE, STACK_TOP, STOP_BASE, TargetBuild, TargetRunError)


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
