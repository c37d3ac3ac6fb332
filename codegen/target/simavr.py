"""The AVR class in simavr (Debian libsimavr-dev), driven through a small C helper (csrc/avrsim.c,
compiled once against simavr's headers and loaded with ctypes).

simavr executes the AVR instruction set with the part's own cycle count per instruction (the cycle
counter is exact for the core; no peripherals run here), so the cycles per event of the AVR class
are counted, not estimated. ``int`` is 16 bits on this core: a promotion bug in the emitted C shows
up as a mismatch against the integer model.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import io
import shutil
from dataclasses import dataclass

import numpy as np

from .build import AVR_PART, MAX_INSNS_PER_CALL, TargetBuild, TargetRunError

DATA_SPACE = 0x800000  # avr-gcc's ELF address of data-space byte 0


def available() -> bool:
    """simavr's library and headers and a host C compiler are present."""
    import os

    return (
        shutil.which(os.environ.get("CC", "gcc")) is not None
        and os.path.isfile("/usr/include/simavr/sim_avr.h")
        and ctypes.util.find_library("simavr") is not None
    )


class _AvrTallyStruct(ctypes.Structure):
    _fields_ = [
        ("nslots", ctypes.c_uint32),
        ("nctx", ctypes.c_uint32),
        ("ctx", ctypes.c_uint32),
        ("role", ctypes.c_void_p),
        ("insns", ctypes.c_void_p),
        ("cycles", ctypes.c_void_p),
        ("calls", ctypes.c_void_p),
        ("entry", ctypes.c_void_p),
        ("active", ctypes.c_uint32),
    ]


@dataclass
class AvrTally:
    """Instructions and simavr's cycles by context, and calls at the entry words, counted in C."""

    role: np.ndarray
    entry: np.ndarray
    insns: np.ndarray
    cycles: np.ndarray
    calls: np.ndarray
    struct: _AvrTallyStruct

    def start(self) -> None:
        self.struct.active = 1


_LIB = None


def _lib():
    global _LIB
    if _LIB is None:
        from .cache import host_library

        lib = ctypes.CDLL(str(host_library("avrsim", libs=("simavr",))))
        lib.et_avr_new.restype = ctypes.c_void_p
        lib.et_avr_new.argtypes = [ctypes.c_char_p]
        for f in ("et_avr_ramend", "et_avr_ioend", "et_avr_flashend", "et_avr_sp"):
            getattr(lib, f).restype = ctypes.c_uint32
            getattr(lib, f).argtypes = [ctypes.c_void_p]
        for f in ("et_avr_flash", "et_avr_write", "et_avr_read"):
            getattr(lib, f).argtypes = [ctypes.c_void_p, ctypes.c_uint32, ctypes.c_void_p, ctypes.c_uint32]
        lib.et_avr_call.argtypes = [
            ctypes.c_void_p,
            ctypes.c_uint32,
            ctypes.c_uint32,
            ctypes.c_uint32,
            ctypes.c_uint64,
            ctypes.POINTER(ctypes.c_uint32),
            ctypes.c_void_p,
        ]
        lib.et_avr_call.restype = ctypes.c_int
        lib.et_avr_free.argtypes = [ctypes.c_void_p]
        _LIB = lib
    return _LIB


class AvrMachine:
    """One simavr part with the ELF loaded (flash image, and .data copied to RAM as a startup
    routine would; RAM otherwise zero); ``call(name, *args)`` runs a function to its return."""

    def __init__(self, build: TargetBuild):
        from elftools.elf.elffile import ELFFile

        self.build, self.lib = build, _lib()
        self.avr = self.lib.et_avr_new(AVR_PART.encode())
        if not self.avr:
            raise TargetRunError(f"simavr has no part {AVR_PART}")
        self.ramend = self.lib.et_avr_ramend(self.avr)
        self.flash_words = (self.lib.et_avr_flashend(self.avr) + 1) // 2
        elf = ELFFile(io.BytesIO(build.elf_bytes))
        for seg in elf.iter_segments():
            if seg["p_type"] != "PT_LOAD" or not seg["p_filesz"]:
                continue
            data = seg.data()
            self.lib.et_avr_flash(self.avr, seg["p_paddr"], data, len(data))  # the flash image
            if seg["p_vaddr"] >= DATA_SPACE:  # .data: also in RAM
                self.lib.et_avr_write(self.avr, seg["p_vaddr"] - DATA_SPACE, data, len(data))
        self.tally: AvrTally | None = None
        self._keep: list[object] = []

    def __del__(self):
        if getattr(self, "avr", None):
            self.lib.et_avr_free(self.avr)
            self.avr = None

    def _ram(self, name: str) -> int:
        return self.build.address(name) - DATA_SPACE

    def call(self, name: str, *args: int) -> int:
        a = list(args) + [0, 0]
        ret = ctypes.c_uint32(0)
        tp = ctypes.cast(ctypes.pointer(self.tally.struct), ctypes.c_void_p) if self.tally else None
        st = self.lib.et_avr_call(
            self.avr,
            self.build.address(name),
            a[0] & 0xFFFFFFFF,
            a[1] & 0xFFFFFFFF,
            MAX_INSNS_PER_CALL,
            ctypes.byref(ret),
            tp,
        )
        if st == 1:
            raise TargetRunError(f"{name} did not return (instruction limit)")
        if st == 2:
            raise TargetRunError(f"{name}: the simulated core stopped (crash, sleep or invalid opcode)")
        return int(ret.value)

    def write(self, name: str, arr: np.ndarray) -> None:
        data = np.ascontiguousarray(arr).tobytes()
        self.lib.et_avr_write(self.avr, self._ram(name), data, len(data))

    def read(self, name: str, count: int, dtype) -> np.ndarray:
        n = count * np.dtype(dtype).itemsize
        buf = ctypes.create_string_buffer(n)
        self.lib.et_avr_read(self.avr, self._ram(name), buf, n)
        return np.frombuffer(buf.raw, dtype=dtype).copy()

    def stack_used(self) -> int:
        """Deepest stack use so far: the lowest nonzero byte of the top 2 KB of RAM (zeroed at start)
        below the return address the caller left at the top."""
        size = 0x800
        buf = ctypes.create_string_buffer(size)
        self.lib.et_avr_read(self.avr, self.ramend + 1 - size, buf, size)
        data = buf.raw[: size - 2]
        nz = next((i for i, b in enumerate(data) if b), len(data))
        return len(data) - nz

    def role_tally(self, role: np.ndarray, nctx: int, entries: np.ndarray) -> AvrTally:
        """Count instructions and cycles by role (``role`` per flash word) from now on, and calls at
        the words where ``entries`` is 1; counting starts with ``start()``."""
        n = role.size
        t = AvrTally(
            np.ascontiguousarray(role, np.uint8),
            np.ascontiguousarray(entries, np.uint8),
            np.zeros(nctx, np.uint64),
            np.zeros(nctx, np.uint64),
            np.zeros(n, np.uint64),
            _AvrTallyStruct(),
        )
        s = t.struct
        s.nslots, s.nctx, s.ctx, s.active = n, nctx, 0, 0
        s.role, s.insns, s.cycles, s.calls, s.entry = (
            x.ctypes.data for x in (t.role, t.insns, t.cycles, t.calls, t.entry)
        )
        self.tally = t
        return t
