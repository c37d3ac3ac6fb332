"""Compile emitted C on the host through cffi and drive it from numpy.

The emitted source is first compiled on its own with the strict flags (warnings are errors), so
that the check covers exactly the code a user will build; the cffi wrapper, which is Python C-API
code, is then compiled with the compiler's defaults and linked against that object. Builds are
cached by a hash of the sources and flags in a per-user folder under the system temp directory
(at most CACHE_ENTRIES builds; the oldest are removed).
"""

from __future__ import annotations

from typing import Any

import hashlib
import importlib.util
import os
import shutil
import subprocess
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..fixedpoint import wrap_bits
from ..ir import Design, Topology
from ..emit import api, emit, input_type, isr_names
from .model import service_due

STRICT_FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror"]
OPT_FLAGS = ["-O2"]


class BuildError(RuntimeError):
    """The emitted C did not compile cleanly (the compiler's messages are in the text)."""


def compiler() -> str:
    return os.environ.get("CC", "cc")


def cache_root() -> Path:
    uid = os.getuid() if hasattr(os, "getuid") else 0
    return Path(tempfile.gettempdir()) / f"edgetally-host-{uid}"


def _cdef(design: Design) -> str:
    p = design.name
    lines = [
        f"typedef {input_type(design)} {p}_input_t;",
        f"typedef {design.output.ctype} {p}_sample_t;",
        f"typedef struct {{ ...; }} {p}_state_t;",
    ]
    lines += [f.proto + ";" for f in api(design)]
    return "\n".join(lines) + "\n"


def compile_strict(c_path: Path, obj_path: Path, extra: list[str] | None = None) -> None:
    """Compile one emitted C file with the strict flags; BuildError with the messages on failure."""
    cmd = [compiler(), *STRICT_FLAGS, *OPT_FLAGS, "-fPIC", *(extra or []), "-c", str(c_path), "-o", str(obj_path)]
    res = subprocess.run(cmd, capture_output=True, text=True)
    if res.returncode != 0 or res.stderr.strip():
        raise BuildError(f"{' '.join(cmd)}\n{res.stderr}")


@dataclass
class HostDemod:
    """The compiled demodulator of one Design, loaded into this process."""

    design: Design
    ffi: Any  # cffi.FFI and the compiled library: dynamic attributes
    lib: Any

    @property
    def input_dtype(self):
        return np.uint16 if input_type(self.design) == "uint16_t" else np.uint32

    def _fn(self, name: str):
        return getattr(self.lib, f"{self.design.name}_{name}")

    def new_state(self):
        st = self.ffi.new(f"{self.design.name}_state_t *")
        self._fn("init")(st)
        return st

    @property
    def sample_dtype(self):
        return np.int16 if self.design.output.ctype == "int16_t" else np.uint16

    def counters(self, st) -> dict:
        return {
            "gaps": int(self._fn("gap_count")(st)),
            "clamps": int(self._fn("clamp_count")(st)),
            "overruns": int(self._fn("overrun_count")(st)),
            "carrier": bool(self._fn("carrier_present")(st)),
            "squelch_open": bool(self._fn("squelch_open")(st)),
            "saturations": int(self._fn("saturation_count")(st)),
            "clips": int(self._fn("clip_count")(st)),
            "offset": int(self._fn("offset")(st)),
        }

    def data_reader(self, st):
        """For a data design: a function that drains the C's bit ring and notes a waiting frame
        (with the frame count it completed), and the record it fills; for others (None, None)."""
        dl = self.design.data
        if dl is None:
            return None, None
        rec: dict = {"bits": [], "frames_read": []}
        buf = self.ffi.new("uint8_t[]", dl.ring_bits)
        fbuf = self.ffi.new("uint8_t[]", max(dl.frame_bytes, 1))
        read = self._fn("bits_read")

        def drain() -> None:
            while True:
                n = read(st, buf, dl.ring_bits)
                rec["bits"].append(bytes(self.ffi.buffer(buf, n)))
                if n < dl.ring_bits:
                    break
            if dl.sync_bits and self._fn("frame_ready")(st):
                count = int(self._fn("frame_count")(st))
                n = self._fn("frame_read")(st, fbuf, dl.frame_bytes)
                rec["frames_read"].append((count, bytes(self.ffi.buffer(fbuf, n))))

        return drain, rec

    def data_counters(self, st, rec) -> dict:
        """The data path's results and status after a run (see ``data_reader``)."""
        bits = np.frombuffer(b"".join(rec["bits"]), dtype=np.uint8)
        out = {
            "bits": bits,
            "bit_count": int(self._fn("bit_count")(st)),
            "bit_overruns": int(self._fn("bit_overrun_count")(st)),
            "locked": bool(self._fn("data_locked")(st)),
            "frames_read": rec["frames_read"],
        }
        if self.design.data is not None and self.design.data.sync_bits:
            out["frames"] = int(self._fn("frame_count")(st))
            out["syncs"] = int(self._fn("sync_count")(st))
        return out

    def process(
        self, inputs: np.ndarray, block: int = 4096, out_cap: int = 1024, lost=None, clock=None
    ) -> tuple[np.ndarray, dict]:
        """Feed the inputs (stamps or counts) in blocks of ``block`` through <name>_process,
        collecting every output; before each index in ``lost`` (inputs lost there, as after a DMA
        overrun) a block ends and <name>_inputs_lost is called. ``clock`` (stamp designs): (k, now)
        pairs, <name>_advance(now) called after the first k inputs (model.clocked mirrors it).
        Returns (outputs, final counters)."""
        ffi = self.ffi
        st = self.new_state()
        proc = self._fn("process")
        drain, rec = self.data_reader(st)
        if drain is not None:  # at most half the bit ring per call: read after each
            dl = self.design.data
            out_cap = min(out_cap, (dl.ring_bits // 2) * int(dl.samples_per_bit))
        inputs = np.ascontiguousarray(inputs, dtype=self.input_dtype)
        out = np.empty(out_cap, dtype=self.sample_dtype)
        out_ptr = ffi.cast(f"{self.design.name}_sample_t *", ffi.from_buffer(out))
        produced = ffi.new("size_t *")
        chunks = []
        ctype = f"{self.design.name}_input_t *"
        lost_set = {int(i) for i in (lost if lost is not None else ())}
        calls: dict[int, list[int]] = {}
        for k, now in clock if clock is not None else ():
            calls.setdefault(int(k), []).append(int(now))
        breaks = sorted(lost_set | set(range(0, inputs.size, block)) | {k for k in calls if k < inputs.size})

        def advance(k: int) -> None:
            for now in calls.get(k, ()):
                while True:
                    n = self._fn("advance")(st, now, out_ptr, out_cap)
                    chunks.append(out[:n].copy())
                    if drain is not None:
                        drain()
                    if n < out_cap:
                        break

        for start, stop in zip(breaks, breaks[1:] + [inputs.size], strict=True):
            advance(start)
            if start in lost_set:
                self._fn("inputs_lost")(st)
            blk = inputs[start:stop]
            base = ffi.cast(ctype, ffi.from_buffer(blk))
            done = 0
            while done < blk.size:
                done += proc(st, base + done, blk.size - done, out_ptr, out_cap, produced)
                chunks.append(out[: produced[0]].copy())
                if drain is not None:
                    drain()
        if inputs.size:
            advance(inputs.size)
        counters = self.counters(st)
        if drain is not None:
            counters["data"] = self.data_counters(st, rec)
        return (np.concatenate(chunks) if chunks else np.zeros(0, dtype=self.sample_dtype)), counters

    def process_isr(
        self, inputs: np.ndarray, service_every: int, out_cap: int = 64, stall: tuple[int, int] | None = None
    ) -> tuple[np.ndarray, dict]:
        """Drive the design's ISR functions as the hardware would, one input at a time (for an
        edge-counting interrupt design the inputs are counts: the edge ISR is called once per new
        edge before each tick), calling <name>_service after every ``service_every`` inputs, except
        after inputs a..b-1 (0-based) when ``stall`` = (a, b): a late service loop. Slow: one
        foreign call per input; for tests of the ISR path."""
        d = self.design
        st = self.new_state()
        service = self._fn("service")
        out = self.ffi.new(f"{d.name}_sample_t[]", out_cap)
        res: list[int] = []

        def drain():
            while True:
                n = service(st, out, out_cap)
                res.extend(out[0:n])
                if n < out_cap:
                    return

        def due(k: int) -> bool:  # k: inputs so far
            return service_due(k, service_every, stall)

        if d.topology is Topology.EDGE_COUNT:
            edge, tick = self._fn("edge_isr"), self._fn("tick_isr")
            values = inputs.astype(np.int64)
            for _ in range(int(values[0])):
                edge(st)
            tick(st)
            for k, step in enumerate(wrap_bits(np.diff(values), d.input_bits).tolist(), 2):
                for _ in range(step):
                    edge(st)
                tick(st)
                if due(k):
                    drain()
        else:
            isr = getattr(self.lib, isr_names(d)[0])
            for k, v in enumerate(inputs.tolist(), 1):
                isr(st, v)
                if due(k):
                    drain()
        drain()
        return np.array(res, dtype=self.sample_dtype), self.counters(st)


def build(design: Design, workdir: Path | None = None) -> HostDemod:
    """Emit, compile strictly, wrap with cffi and load. Cached by content."""
    import cffi  # imported here: only the host check needs it

    files = emit(design)
    p = design.name
    cdef = _cdef(design)
    parts = [k + "\0" + v for k, v in sorted(files.items())] + [
        cdef,
        compiler(),
        *STRICT_FLAGS,
        *OPT_FLAGS,
        sys.version,
    ]
    key = hashlib.sha256("\0".join(parts).encode()).hexdigest()[:16]
    modname = f"_edgetally_{p}_{key}"
    root = workdir or cache_root()
    folder = root / key
    found = list(folder.glob(f"{modname}*.so")) + list(folder.glob(f"{modname}*.pyd")) if folder.exists() else []
    if found:
        os.utime(folder)  # most recently used: the last to be trimmed
    if not found:
        tmp = Path(tempfile.mkdtemp(prefix="build-", dir=_ensure(root)))
        try:
            for name, text in files.items():
                (tmp / name).write_text(text, encoding="utf-8")
            obj = tmp / f"{p}.o"
            compile_strict(tmp / f"{p}.c", obj)
            ffi = cffi.FFI()
            ffi.cdef(cdef)
            ffi.set_source(modname, f'#include "{p}.h"\n', include_dirs=[str(tmp)], extra_objects=[str(obj)])
            so = Path(ffi.compile(tmpdir=str(tmp), verbose=False))
            if folder.exists():
                shutil.rmtree(folder, ignore_errors=True)
            try:
                tmp.rename(folder)
            except OSError:  # another process finished the same build first
                shutil.rmtree(tmp, ignore_errors=True)
            found = [folder / so.name]
        except Exception:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        _trim(root)
    spec = importlib.util.spec_from_file_location(modname, found[0])
    assert spec is not None and spec.loader is not None
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return HostDemod(design=design, ffi=mod.ffi, lib=mod.lib)


CACHE_ENTRIES = 64  # host builds kept; the oldest beyond this are removed (each is about 100 kB)


def _trim(root: Path, keep: int = CACHE_ENTRIES) -> None:
    """Bound the cache: remove the least recently used builds beyond ``keep`` (and stale
    ``build-*`` folders an interrupted build left more than an hour ago)."""
    import time

    entries = [e for e in root.iterdir() if e.is_dir()]
    stale = [e for e in entries if e.name.startswith("build-") and time.time() - e.stat().st_mtime > 3600]
    done = sorted((e for e in entries if not e.name.startswith("build-")), key=lambda e: e.stat().st_mtime)
    for e in stale + done[:-keep]:
        shutil.rmtree(e, ignore_errors=True)


def _ensure(p: Path) -> Path:
    p.mkdir(parents=True, exist_ok=True)
    return p
