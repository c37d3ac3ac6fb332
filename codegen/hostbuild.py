"""Compile emitted C on the host through cffi and drive it from numpy.

The emitted source is first compiled on its own with the strict flags (warnings are errors), so
that the check covers exactly the code a user will build; the cffi wrapper, which is Python C-API
code, is then compiled with the compiler's defaults and linked against that object. Builds are
cached by a hash of the sources and flags in a per-user folder under the system temp directory.
"""

from __future__ import annotations

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

from .ir import Design
from .emit import emit

STRICT_FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror"]
OPT_FLAGS = ["-O2"]


class BuildError(RuntimeError):
    """The emitted C did not compile cleanly (the compiler's messages are in the text)."""


def compiler() -> str:
    return os.environ.get("CC", "cc")


def cache_root() -> Path:
    uid = os.getuid() if hasattr(os, "getuid") else 0
    return Path(tempfile.gettempdir()) / f"edgetally-host-{uid}"


def _cdef(p: str, stamp_type: str) -> str:
    return f"""
typedef {stamp_type} {p}_stamp_t;
typedef struct {{ ...; }} {p}_state_t;
void {p}_init({p}_state_t *s);
size_t {p}_process({p}_state_t *s, const {p}_stamp_t *stamps, size_t n, int16_t *out, size_t cap, size_t *produced);
void {p}_capture_isr({p}_state_t *s, {p}_stamp_t stamp);
size_t {p}_service({p}_state_t *s, int16_t *out, size_t cap);
bool {p}_carrier_present(const {p}_state_t *s);
uint32_t {p}_gap_count(const {p}_state_t *s);
uint32_t {p}_clamp_count(const {p}_state_t *s);
uint32_t {p}_overrun_count(const {p}_state_t *s);
"""


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
    ffi: object
    lib: object

    @property
    def stamp_dtype(self):
        return np.uint16 if self.design.front.timer_bits == 16 else np.uint32

    def new_state(self):
        st = self.ffi.new(f"{self.design.name}_state_t *")
        getattr(self.lib, f"{self.design.name}_init")(st)
        return st

    def process(self, stamps: np.ndarray, block: int = 4096, out_cap: int = 1024, state=None) -> tuple[np.ndarray, dict]:
        """Feed the stamps in blocks of ``block`` through <name>_process, collecting every output.
        Returns (outputs as int16, final counters)."""
        p = self.design.name
        ffi, lib = self.ffi, self.lib
        st = state if state is not None else self.new_state()
        proc = getattr(lib, f"{p}_process")
        stamps = np.ascontiguousarray(stamps, dtype=self.stamp_dtype)
        out = np.empty(out_cap, dtype=np.int16)
        out_ptr = ffi.cast("int16_t *", ffi.from_buffer(out))
        produced = ffi.new("size_t *")
        chunks = []
        ctype = f"{p}_stamp_t *"
        for start in range(0, stamps.size, block):
            blk = stamps[start:start + block]
            base = ffi.cast(ctype, ffi.from_buffer(blk))
            done = 0
            while done < blk.size:
                used = proc(st, base + done, blk.size - done, out_ptr, out_cap, produced)
                chunks.append(out[:produced[0]].copy())
                done += used
        counters = {
            "gaps": int(getattr(lib, f"{p}_gap_count")(st)),
            "clamps": int(getattr(lib, f"{p}_clamp_count")(st)),
            "overruns": int(getattr(lib, f"{p}_overrun_count")(st)),
            "carrier": bool(getattr(lib, f"{p}_carrier_present")(st)),
        }
        return (np.concatenate(chunks) if chunks else np.zeros(0, dtype=np.int16)), counters

    def process_isr(self, stamps: np.ndarray, service_every: int, out_cap: int = 64) -> np.ndarray:
        """Feed the stamps one by one through <name>_capture_isr, calling <name>_service every
        ``service_every`` stamps (slow: one foreign call per stamp; for tests of the ISR path)."""
        p = self.design.name
        st = self.new_state()
        isr, service = getattr(self.lib, f"{p}_capture_isr"), getattr(self.lib, f"{p}_service")
        out = self.ffi.new("int16_t[]", out_cap)
        res: list[int] = []
        for k, c in enumerate(stamps.tolist(), 1):
            isr(st, c)
            if k % service_every == 0:
                while True:
                    n = service(st, out, out_cap)
                    res.extend(out[0:n])
                    if n < out_cap:
                        break
        while True:
            n = service(st, out, out_cap)
            res.extend(out[0:n])
            if n < out_cap:
                break
        return np.array(res, dtype=np.int16)


def build(design: Design, workdir: Path | None = None) -> HostDemod:
    """Emit, compile strictly, wrap with cffi and load. Cached by content."""
    import cffi  # imported here: only the host check needs it

    files = emit(design)
    p = design.name
    stamp_type = "uint16_t" if design.front.timer_bits == 16 else "uint32_t"
    cdef = _cdef(p, stamp_type)
    parts = [k + "\0" + v for k, v in sorted(files.items())] + [cdef, compiler(), *STRICT_FLAGS, *OPT_FLAGS, sys.version]
    key = hashlib.sha256("\0".join(parts).encode()).hexdigest()[:16]
    modname = f"_edgetally_{p}_{key}"
    root = workdir or cache_root()
    folder = root / key
    found = list(folder.glob(f"{modname}*.so")) + list(folder.glob(f"{modname}*.pyd")) if folder.exists() else []
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
    spec = importlib.util.spec_from_file_location(modname, found[0])
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return HostDemod(design=design, ffi=mod.ffi, lib=mod.lib)


def _ensure(p: Path) -> Path:
    p.mkdir(parents=True, exist_ok=True)
    return p
