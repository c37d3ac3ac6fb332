"""One bounded on-disk cache for the target package: host helper libraries compiled from
``csrc/``, cross-built ELF images and float-baseline figures, keyed by the hash of everything that
makes them.

The folder is ``$EDGETALLY_CACHE`` or ``<temp>/edgetally-cache-<uid>``; it keeps at most
``MAX_ENTRIES`` files (the least recently used go first), so it never grows without bound.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import tempfile
from importlib import resources
from pathlib import Path

MAX_ENTRIES = 256


def folder() -> Path:
    d = os.environ.get("EDGETALLY_CACHE") or os.path.join(
        tempfile.gettempdir(), f"edgetally-cache-{os.getuid() if hasattr(os, 'getuid') else 0}"
    )
    p = Path(d)
    p.mkdir(parents=True, exist_ok=True)
    return p


def key(*parts: object) -> str:
    """A short stable hash of the parts (their repr)."""
    return hashlib.sha256(repr(parts).encode()).hexdigest()[:24]


def _trim(d: Path) -> None:
    # Another process sharing the folder may remove a file between the listing and its stat.
    dated = []
    for f in d.iterdir():
        try:
            if f.is_file():
                dated.append((f.stat().st_mtime, f))
        except OSError:
            pass
    dated.sort(key=lambda item: item[0])
    for _, f in dated[: max(0, len(dated) - MAX_ENTRIES)]:
        f.unlink(missing_ok=True)


def _touch(p: Path) -> None:
    try:
        os.utime(p)
    except OSError:
        pass


def load_json(k: str) -> dict | None:
    p = folder() / f"{k}.json"
    if not p.is_file():
        return None
    try:
        obj = json.loads(p.read_text())
    except (OSError, ValueError):
        return None
    _touch(p)
    return obj


def store_json(k: str, obj: dict) -> None:
    d = folder()
    tmp = d / f".{k}.{os.getpid()}.tmp"
    tmp.write_text(json.dumps(obj))
    os.replace(tmp, d / f"{k}.json")
    _trim(d)


def load_bytes(k: str) -> bytes | None:
    p = folder() / f"{k}.bin"
    if not p.is_file():
        return None
    _touch(p)
    return p.read_bytes()


def store_bytes(k: str, data: bytes) -> None:
    d = folder()
    tmp = d / f".{k}.{os.getpid()}.tmp"
    tmp.write_bytes(data)
    os.replace(tmp, d / f"{k}.bin")
    _trim(d)


class HostLibError(RuntimeError):
    """A host helper library could not be compiled."""


def host_library(name: str, libs: tuple[str, ...] = ()) -> Path:
    """The shared library compiled from ``csrc/<name>.c`` with the host C compiler ($CC or gcc),
    linked with ``libs``; compiled once and kept in the cache."""
    src = resources.files("edgetally.target").joinpath(f"csrc/{name}.c").read_text(encoding="utf-8")
    cc = shutil.which(os.environ.get("CC", "gcc")) or shutil.which("cc")
    if cc is None:
        raise HostLibError("no host C compiler (gcc) for the emulator's helper library")
    d = folder()
    out = d / f"{name}-{key(src, cc, libs)}.so"
    if out.is_file():
        _touch(out)
        return out
    with tempfile.TemporaryDirectory(dir=d) as tmp:
        c = Path(tmp) / f"{name}.c"
        c.write_text(src, encoding="utf-8")
        so = Path(tmp) / "lib.so"
        res = subprocess.run(
            [cc, "-O2", "-shared", "-fPIC", "-o", str(so), str(c), *[f"-l{x}" for x in libs]],
            capture_output=True,
            text=True,
        )
        if res.returncode != 0:
            raise HostLibError(f"compiling {name}.c: {res.stderr.strip()[:2000]}")
        os.replace(so, out)
    _trim(d)
    return out
