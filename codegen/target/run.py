"""Run a cross-compiled build (``edgetally.target.build.cross_build``) in its core's emulator.

``run(build, design, inputs)`` feeds the inputs through <name>_process (or, with ``isr=True``,
through the scheme's ISR functions and <name>_service) and returns the outputs and counters.
``machine(build)`` is the emulated core itself (unicorn for the Arm and RISC-V classes, simavr for
the AVR class): ``call``, ``write``, ``read``, ``stack_used``, and a tally of the executed code by
role that ``edgetally.target.cycles`` turns into instructions and cycles.
"""

from __future__ import annotations

import ctypes
from dataclasses import dataclass

import numpy as np

from ..ir import Design
from .build import (
    COUNTERS,
    FLASH_BASE,
    FLASH_SIZE,
    RAM_BASE,
    RAM_SIZE,
    STACK_TOP,
    STOP_BASE,
    TargetBuild,
    TargetRunError,
)

# A runaway guard for one emulated call, in executed blocks (csrc/tally.c counts them in C). unicorn's
# own instruction-count limit adds a hook to every instruction and its timeout a thread to every
# call (measured here: 1.5x to 2.7x slower on the ISR path's many short calls).
MAX_BLOCKS_PER_CALL = 50_000_000
SCS_BASE = 0xE000E000


class _GuardStruct(ctypes.Structure):
    _fields_ = [("blocks", ctypes.c_uint64), ("limit", ctypes.c_uint64), ("stop", ctypes.c_void_p)]


class _TallyStruct(ctypes.Structure):
    _fields_ = [
        ("base", ctypes.c_uint64),
        ("nslots", ctypes.c_uint64),
        ("nctx", ctypes.c_uint32),
        ("ctx", ctypes.c_uint32),
        ("role", ctypes.c_void_p),
        ("count", ctypes.c_void_p),
        ("fall", ctypes.c_void_p),
        ("size", ctypes.c_void_p),
        ("prev", ctypes.c_int64),
        ("prev_end", ctypes.c_uint64),
        ("active", ctypes.c_uint32),
    ]


@dataclass
class BlockTally:
    """Executions of each translated block by entry context, counted in C (csrc/tally.c) with no
    Python call per executed block. ``role`` maps each 2-byte slot of the code to a role index."""

    base: int
    role: np.ndarray  # uint8 [nslots]
    nctx: int
    count: np.ndarray  # uint64 [nslots * nctx]
    fall: np.ndarray
    size: np.ndarray  # uint32 [nslots]
    struct: _TallyStruct

    def start(self) -> None:
        self.struct.prev = -1
        self.struct.active = 1

    def blocks(self):
        """(address, size, entry context, executions, fall-throughs) of every block that ran."""
        for k in np.flatnonzero(self.count):
            s, ctx = divmod(int(k), self.nctx)
            yield self.base + 2 * s, int(self.size[s]), ctx, int(self.count[k]), int(self.fall[k])


_TALLY_LIB = None


def _tally_lib():
    global _TALLY_LIB
    if _TALLY_LIB is None:
        from .cache import host_library

        _TALLY_LIB = ctypes.CDLL(str(host_library("tally")))
    return _TALLY_LIB


class UnicornMachine:
    """One unicorn instance (Thumb M-profile or RISC-V 32) with the ELF loaded; ``call(name, *args)``
    runs a function to its return."""

    def __init__(self, build: TargetBuild):
        import io

        import unicorn as uc
        from elftools.elf.elffile import ELFFile

        self.uc_mod, self.build = uc, build
        arch = build.target.arch
        if arch == "arm":
            from unicorn import arm_const as A

            self.mu = mu = uc.Uc(uc.UC_ARCH_ARM, uc.UC_MODE_THUMB | uc.UC_MODE_MCLASS)
            mu.ctl_set_cpu_model(A.UC_CPU_ARM_CORTEX_M0 if build.core == "cortex-m0plus" else A.UC_CPU_ARM_CORTEX_M4)
            self.regs = (A.UC_ARM_REG_R0, A.UC_ARM_REG_R1, A.UC_ARM_REG_R2, A.UC_ARM_REG_R3)
            self.sp, self.ra, self.pc, self.thumb = A.UC_ARM_REG_SP, A.UC_ARM_REG_LR, A.UC_ARM_REG_PC, 1
        elif arch == "riscv":
            from unicorn import riscv_const as R

            self.mu = mu = uc.Uc(uc.UC_ARCH_RISCV, uc.UC_MODE_RISCV32)
            self.regs = (R.UC_RISCV_REG_A0, R.UC_RISCV_REG_A1, R.UC_RISCV_REG_A2, R.UC_RISCV_REG_A3)
            self.sp, self.ra, self.pc, self.thumb = R.UC_RISCV_REG_SP, R.UC_RISCV_REG_RA, R.UC_RISCV_REG_PC, 0
        else:
            raise ValueError(f"{build.core}: not a unicorn core")
        mu.mem_map(FLASH_BASE, FLASH_SIZE, uc.UC_PROT_READ | uc.UC_PROT_EXEC)
        mu.mem_map(RAM_BASE, RAM_SIZE, uc.UC_PROT_READ | uc.UC_PROT_WRITE)
        mu.mem_map(STOP_BASE, 0x1000, uc.UC_PROT_READ | uc.UC_PROT_EXEC)
        if arch == "arm":  # the System Control Space as plain memory: a startup write to CPACR lands here
            mu.mem_map(SCS_BASE, 0x1000, uc.UC_PROT_READ | uc.UC_PROT_WRITE)
        for seg in ELFFile(io.BytesIO(build.elf_bytes)).iter_segments():
            if seg["p_type"] == "PT_LOAD" and seg["p_filesz"]:
                mu.mem_write(seg["p_paddr"], seg.data())
        self._hooks: list[object] = []
        self.guard = _GuardStruct(0, MAX_BLOCKS_PER_CALL, None)
        from unicorn.unicorn_py3.unicorn import uclib

        self.guard.stop = ctypes.cast(uclib.uc_emu_stop, ctypes.c_void_p)
        self._hook_c(_tally_lib().et_guard_block, self.guard, FLASH_BASE, FLASH_BASE + FLASH_SIZE - 1)

    def _hook_c(self, fn, struct, begin: int, end: int) -> None:
        """Add a block hook written in C (``fn``) with ``struct`` as its user data. unicorn's Python
        binding only takes Python callbacks, so this calls the library's uc_hook_add through the
        binding's ctypes handle (``uclib``, ``Uc._uch``: the layout of unicorn 2.1's binding)."""
        from unicorn.unicorn_py3.unicorn import uc_hook_h, uclib

        handle = uc_hook_h()
        status = uclib.uc_hook_add(
            self.mu._uch,
            ctypes.byref(handle),
            self.uc_mod.UC_HOOK_BLOCK,
            ctypes.cast(fn, ctypes.c_void_p),
            ctypes.cast(ctypes.pointer(struct), ctypes.c_void_p),
            ctypes.c_uint64(begin),
            ctypes.c_uint64(end),
        )
        if status != 0:
            raise TargetRunError(f"unicorn refused a block hook (error {status})")

    def call(self, name: str, *args: int) -> int:
        mu = self.mu
        self.guard.blocks = 0
        for reg, v in zip(self.regs, args, strict=False):  # fewer args than registers
            mu.reg_write(reg, v & 0xFFFFFFFF)
        mu.reg_write(self.sp, STACK_TOP)
        mu.reg_write(self.ra, STOP_BASE | self.thumb)
        try:
            mu.emu_start(self.build.address(name) | self.thumb, STOP_BASE)
        except self.uc_mod.UcError as e:
            raise TargetRunError(f"{name}: {e} at pc=0x{mu.reg_read(self.pc):08x}") from e
        pc = mu.reg_read(self.pc)
        if pc & ~1 != STOP_BASE:
            raise TargetRunError(f"{name} did not return (pc=0x{pc:08x}; more than {MAX_BLOCKS_PER_CALL} blocks?)")
        return mu.reg_read(self.regs[0])

    def write(self, name: str, arr: np.ndarray) -> None:
        self.mu.mem_write(self.build.address(name), np.ascontiguousarray(arr).tobytes())

    def read(self, name: str, count: int, dtype) -> np.ndarray:
        nbytes = count * np.dtype(dtype).itemsize
        return np.frombuffer(bytes(self.mu.mem_read(self.build.address(name), nbytes)), dtype=dtype).copy()

    def stack_used(self) -> int:
        """Deepest stack use so far: RAM starts zeroed, so the lowest nonzero word below the top."""
        size = 0x4000
        data = bytes(self.mu.mem_read(STACK_TOP - size, size))
        nz = next((i for i in range(0, size, 4) if data[i : i + 4] != b"\0\0\0\0"), size)
        return size - nz

    def block_tally(self, role: np.ndarray, nctx: int) -> BlockTally:
        """Install the C block hook over the code (before anything runs: unicorn applies a block hook
        only to code translated after it was added); counting starts with ``start()``."""
        lib = _tally_lib()
        n = role.size
        t = BlockTally(
            FLASH_BASE,
            np.ascontiguousarray(role, dtype=np.uint8),
            nctx,
            np.zeros(n * nctx, np.uint64),
            np.zeros(n * nctx, np.uint64),
            np.zeros(n, np.uint32),
            _TallyStruct(),
        )
        s = t.struct
        s.base, s.nslots, s.nctx, s.ctx, s.prev, s.active = FLASH_BASE, n, nctx, 0, -1, 0
        s.role, s.count, s.fall, s.size = (a.ctypes.data for a in (t.role, t.count, t.fall, t.size))
        self._hook_c(lib.et_tally_block, s, FLASH_BASE, FLASH_BASE + 2 * n - 1)
        self._hooks.append(t)  # keeps the arrays alive as long as the machine
        return t


def machine(build: TargetBuild):
    """The emulated core for ``build``, with the ELF loaded and RAM zeroed."""
    if build.target.emulator == "simavr":
        from .simavr import AvrMachine

        return AvrMachine(build)
    return UnicornMachine(build)


@dataclass
class TargetRun:
    outputs: np.ndarray
    counters: dict
    inputs: int
    stack_bytes: int
    bits: np.ndarray | None = None  # a data design's decided bits (process runs)


def read_counters(m) -> dict:
    vals = {k: int(m.call("harness_counter", i)) for i, k in enumerate(COUNTERS)}
    vals["carrier"] = bool(vals["carrier"])
    vals["offset"] = vals["offset"] - (1 << 32) if vals["offset"] >= 1 << 31 else vals["offset"]
    return vals


def read_bits(m, ring: int, bits: list) -> None:
    """Drain a data design's bit ring through harness_bits_read into ``bits`` (arrays of 0/1)."""
    while True:
        k = int(m.call("harness_bits_read"))
        bits.append(m.read("harness_bits", k, np.uint8))
        if k < ring:
            return


def feed_process(
    m, build: TargetBuild, inputs: np.ndarray, block: int, bits: list | None = None, ring: int = 0
) -> list[np.ndarray]:
    """Feed ``inputs`` through harness_process in blocks of ``block``; the output chunks. ``bits``
    (data designs, with the bit ring's length ``ring``): gets the decided bits after every call."""
    chunks = []
    for start in range(0, inputs.size, block):
        blk = inputs[start : start + block]
        m.write("harness_in", blk)
        done = 0
        while done < blk.size:
            k = m.call("harness_process", done, blk.size - done)
            done += int(m.read("harness_consumed", 1, np.uint32)[0])
            chunks.append(m.read("harness_out", k, build.sample_dtype))
            if bits is not None:
                read_bits(m, ring, bits)
    return chunks


def feed_isr(m, build: TargetBuild, inputs: np.ndarray, service_every: int) -> list[np.ndarray]:
    """Feed ``inputs`` one at a time through the ISR function(s), <name>_service every
    ``service_every`` inputs and at the end; the output chunks."""
    chunks = []

    def drain():
        while True:
            k = m.call("harness_service")
            chunks.append(m.read("harness_out", k, build.sample_dtype))
            if k < build.out_len:
                return

    for start in range(0, inputs.size, service_every):
        blk = inputs[start : start + service_every]
        m.write("harness_in", blk)
        m.call("harness_isr_feed", 0, blk.size)
        if blk.size == service_every:
            drain()
    drain()
    return chunks


def run(
    build: TargetBuild,
    design: Design,
    inputs: np.ndarray,
    block: int | None = None,
    isr: bool = False,
    service_every: int | None = None,
) -> TargetRun:
    """Run the cross-built C in the emulator on ``inputs``. Default: blocks of ``block`` inputs
    (at most the harness buffer) through <name>_process. ``isr=True``: one input at a time through
    the scheme's ISR function(s) (for an edge-counting interrupt design, the edge ISR once per new
    edge, then the tick ISR), <name>_service every ``service_every`` inputs (default: a quarter of
    the queue)."""
    if design.name != build.design_name:
        raise ValueError("build and design differ")
    inputs = np.ascontiguousarray(inputs, dtype=build.input_dtype)
    block = max(1, min(block or build.in_len, build.in_len))
    m = machine(build)
    m.call("harness_init")
    bits: list | None = [] if design.data is not None and not isr else None
    if isr:
        every = max(1, min(service_every or design.queue_len // 4, build.in_len))
        chunks = feed_isr(m, build, inputs, every)
    else:
        chunks = feed_process(m, build, inputs, block, bits, design.data.ring_bits if design.data else 0)
    out = np.concatenate(chunks) if chunks else np.zeros(0, dtype=build.sample_dtype)
    return TargetRun(
        outputs=out,
        counters=read_counters(m),
        inputs=int(inputs.size),
        stack_bytes=m.stack_used(),
        bits=np.concatenate(bits) if bits else None,
    )
