"""Recordings made outside edgetally -> the design's inputs (capture stamps, or counts on the grid).

Formats:
- ``vcd``: a value change dump (IEEE 1364, section 18) of the IF pin from a logic analyzer or a
  simulator, read with pyvcd's tokenizer. One 1-bit signal (by name; the only one when there is
  one) gives the edges of the chosen polarity; the dump's $timescale gives their times exactly.
- ``csv``: logged timer stamps or counter values, one integer per row (decimal or 0x hex; a first
  row of names is a header, ``#`` starts a comment); the column by header name or 1-based number.
- ``bin``: raw words of logged stamps or counts, little- or big-endian, of the timer's (counter's)
  width or of a wider word (16, 32 or 64 bits).
- ``wav``: one channel is the IF itself (a sampled comparator input); two channels are IQ (I first,
  common practice) of a recording whose centre lies ``offset_hz`` below the channel.
- ``sigmf``: complex IQ in SigMF (the open SDR metadata standard; read with the ``sigmf`` package),
  with the channel ``offset_hz`` from the recording's centre frequency.

From edges to inputs (``edges_to_inputs``), exact integer arithmetic: an edge at t seconds gives
the timer value floor(t f_timer) (the timer starts at 0 with the recording), wrapped to its width,
for every prescale-th edge (a stamp scheme; an interrupt reading a free-running timer is taken as
reading it at the edge, without latency); for a counting scheme the count at grid instant j (at
j grid_ticks timer ticks) is the number of edges before it, wrapped to the counter's width.

IQ to edges. The channel is mixed down by its offset, z(t) = iq(t) exp(-j 2 pi offset t), and up to
the spec's IF: the real IF is Im{z(t) exp(j 2 pi f_IF t)} = |z| sin(2 pi Phi(t)) with the phase in
cycles Phi(t) = f_IF t + arg z(t) / (2 pi). A limiter keeps only the sign, and the sign changes
exactly where Phi crosses a multiple of one half, whatever |z|: the rising edges are the instants
where Phi rises through an integer (falling: through n + 1/2). Phi is sampled at the recording's
rate (arg z unwrapped: the channel lies inside +-fs/2, so the phase moves less than half a cycle
per sample), several edges can fall in one sample interval (the IF may lie far above fs), and
each crossing is refined on the cubic through four samples of Phi - n with the IF simulator's
safeguarded Newton root finder (``edgetally.stimulus.ifnoise``). The linear part f_IF t is exact on
a cubic, so the error is the cubic interpolation error of the channel's own phase (zero for a
linear chirp, whose phase is quadratic). A one-channel WAV is the IF itself: its rising zero
crossings (r[k-1] < 0 <= r[k]) are refined the same way on the samples.
"""

from __future__ import annotations

import json
import math
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any, cast

import numpy as np

from ..ir import Design
from .ifnoise import refine_crossing as cubic_root  # the IF simulator's crossing refinement

FORMATS = ("vcd", "csv", "bin", "wav", "sigmf")
EXTENSIONS = {
    ".vcd": "vcd",
    ".csv": "csv",
    ".txt": "csv",
    ".bin": "bin",
    ".raw": "bin",
    ".wav": "wav",
    ".sigmf-meta": "sigmf",
    ".sigmf-data": "sigmf",
    ".sigmf": "sigmf",
}
PS = 10**12  # float edge times are kept in picoseconds (far below any timer tick)
SETTLE_LEVEL = 0.01  # the IIR has settled when its slowest pole decayed to 1 % (-40 dB)
_UNITS = {"s": 0, "ms": 3, "us": 6, "ns": 9, "ps": 12, "fs": 15, "as": 18, "zs": 21}


class RecordingError(ValueError):
    """A recording that cannot be used: the message names the file and the line or byte offset."""

    def __init__(self, path, where: str, what: str):
        self.path, self.where, self.what = str(path), where, what
        super().__init__(f"{path}{where}: {what}")


def _cut(v, n: int = 40) -> str:
    s = str(v)
    return s if len(s) <= n else s[: n - 3] + "..."


@dataclass(frozen=True)
class Edges:
    """Edge instants as integers ``at`` in units of num/den seconds, and the recording's end."""

    at: np.ndarray
    num: int
    den: int
    end: int
    what: str  # where they came from, in words

    @property
    def seconds(self) -> float:
        return self.end * self.num / self.den

    def times(self) -> np.ndarray:
        """The edge times in seconds (floats)."""
        return self.at.astype(np.float64) * (self.num / self.den)

    def ticks(self, rate_hz: int) -> np.ndarray:
        """floor(t rate_hz) of every edge, exactly (integer arithmetic)."""
        return _floor_scaled(self.at, self.num * int(rate_hz), self.den)


def _floor_scaled(n: np.ndarray, a: int, b: int) -> np.ndarray:
    """floor(n a / b) for integers n >= 0, exact (Python integers where int64 could overflow)."""
    g = math.gcd(a, b)
    a, b = a // g, b // g
    n = np.asarray(n, dtype=np.int64)
    if n.size == 0:
        return n
    if int(n.max()) < (1 << 62) // max(a, 1):
        return (n * a) // b
    return np.array([int(v) * a // b for v in n.tolist()], dtype=np.int64)


@dataclass(frozen=True)
class Recording:
    """A recording turned into the design's inputs."""

    path: str
    format: str
    inputs: np.ndarray  # stamps or counts, the design's input type
    seconds: float  # the recording's length
    edges: int  # IF edges in it
    what: str  # what was read, in words
    edge_times: np.ndarray | None = None  # s, when the recording holds the IF itself (not logged inputs)


# ---------------------------------------------------------------------------------------------
# VCD


def read_vcd(path, signal: str | None = None, edge: str = "rising") -> Edges:
    """The edges of one 1-bit signal of a value change dump, at the dump's time unit."""
    from vcd.reader import TokenKind, VCDParseError, tokenize

    path = Path(path)
    want = "1" if edge == "rising" else "0"
    scopes: list[str] = []
    names: dict[str, list[str]] = {}  # id code -> full names of its 1-bit variables
    unit = None
    ident = None
    end_line = None
    last_time, last_line = 0, 1
    level = None
    at: list[int] = []
    try:
        with open(path, "rb") as f:
            for tok in tokenize(f):
                k = tok.kind
                if k is TokenKind.CHANGE_SCALAR or k is TokenKind.CHANGE_VECTOR:
                    if ident is None:
                        continue
                    code, v = cast(Any, tok.data)  # a change's payload (the kind narrows it)
                    if code != ident:
                        continue
                    v = str(v).lower()
                    if v in ("0", "1"):
                        if level is not None and level != v and v == want:
                            at.append(last_time)
                        level = v
                    else:
                        level = None  # x or z: no edge into or out of it
                elif k is TokenKind.CHANGE_TIME:
                    now = cast(int, tok.data)
                    if now < last_time:
                        raise RecordingError(
                            path, f":{tok.span.start.line}", f"time runs backwards (#{now} after #{last_time})"
                        )
                    last_time, last_line = now, tok.span.start.line
                elif k is TokenKind.SCOPE:
                    scopes.append(tok.data.ident)
                elif k is TokenKind.UPSCOPE:
                    if scopes:
                        scopes.pop()
                elif k is TokenKind.VAR:
                    v = tok.data
                    if v.size == 1:
                        names.setdefault(v.id_code, []).append(".".join([*scopes, v.reference]))
                elif k is TokenKind.TIMESCALE:
                    unit = tok.data
                elif k is TokenKind.ENDDEFINITIONS:
                    end_line = tok.span.start.line
                    ident = _pick_signal(path, end_line, names, signal)
    except VCDParseError as e:
        raise RecordingError(
            path, f":{e.loc.line}:{e.loc.column}", f"not a valid value change dump: {_cut(e, 80)}"
        ) from e
    except (OSError, UnicodeDecodeError) as e:
        raise RecordingError(path, "", f"cannot read it: {_cut(e, 80)}") from e
    if end_line is None:
        raise RecordingError(
            path, f":{last_line}", "ends before $enddefinitions (truncated, or not a value change dump)"
        )
    if unit is None:
        raise RecordingError(path, f":{end_line}", "no $timescale in the header: the times have no unit")
    exp = _UNITS[unit.unit.value]
    assert ident is not None  # _pick_signal chose one or refused the file
    full = names[ident][0]
    what = f"VCD signal {full}, {edge} edges, timescale {unit.magnitude} {unit.unit.value}"
    return Edges(np.array(at, dtype=np.int64), int(unit.magnitude), 10**exp, int(last_time), what)


def _pick_signal(path, line: int, names: dict[str, list[str]], signal: str | None) -> str:
    every = sorted(n for ns in names.values() for n in ns)
    if not every:
        raise RecordingError(path, f":{line}", "the dump declares no 1-bit signal")
    if signal is None:
        if len(names) == 1:
            return next(iter(names))
        raise RecordingError(
            path, f":{line}", f"several 1-bit signals; choose one with --signal ({_cut(', '.join(every), 120)})"
        )
    hits = [code for code, ns in names.items() if any(n == signal or n.split(".")[-1] == signal for n in ns)]
    if len(hits) != 1:
        why = "no 1-bit signal" if not hits else "more than one signal named"
        raise RecordingError(path, f":{line}", f"{why} {_cut(signal)!r} (signals: {_cut(', '.join(every), 120)})")
    return hits[0]


# ---------------------------------------------------------------------------------------------
# logged stamps and counts: CSV and raw binary


def read_csv(path, signal: str | None = None) -> tuple[list[int], list[int]]:
    """The integers of one column and the line number of each."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as e:
        raise RecordingError(path, "", f"cannot read it as text: {_cut(e, 80)}") from e
    col, values, lines = None, [], []
    for ln, raw in enumerate(text.splitlines(), 1):
        row = raw.split("#", 1)[0].strip()
        if not row:
            continue
        fields = [c.strip() for c in row.replace(";", ",").replace("\t", ",").split(",")]
        if col is None:
            header = not all(_is_int(c) for c in fields)
            col = _pick_column(path, ln, fields if header else None, signal)
            if header:
                continue
        if col >= len(fields):
            raise RecordingError(
                path, f":{ln}", f"has {len(fields)} column(s), column {col + 1} is missing (truncated row?)"
            )
        cell = fields[col]
        if not _is_int(cell):
            raise RecordingError(path, f":{ln}", f"{_cut(cell)!r} is not an integer stamp or count")
        v = int(cell, 0)
        if not 0 <= v < 1 << 64:
            raise RecordingError(path, f":{ln}", f"{_cut(v)} is not an unsigned stamp or count of at most 64 bits")
        values.append(v)
        lines.append(ln)
    return values, lines


def _is_int(s: str) -> bool:
    try:
        int(s, 0)
        return True
    except ValueError:
        return False


def _pick_column(path, ln: int, header: list[str] | None, signal: str | None) -> int:
    if signal is None:
        return 0
    if header is not None and signal in header:
        return header.index(signal)
    if signal.isdigit() and int(signal) >= 1:
        return int(signal) - 1
    known = ", ".join(header) if header else "no header row; give a column number"
    raise RecordingError(path, f":{ln}", f"no column {_cut(signal)!r} ({_cut(known, 120)})")


def read_bin(path, word_bits: int, endian: str = "little") -> np.ndarray:
    """Raw unsigned words of word_bits (16, 32 or 64), little- or big-endian."""
    path = Path(path)
    nbytes = word_bits // 8
    try:
        raw = path.read_bytes()
    except OSError as e:
        raise RecordingError(path, "", f"cannot read it: {_cut(e, 80)}") from e
    extra = len(raw) % nbytes
    if extra:
        raise RecordingError(
            path,
            f": offset {len(raw) - extra}",
            f"{extra} trailing byte(s), not a whole {nbytes}-byte word (truncated?)",
        )
    return np.frombuffer(raw, dtype=np.dtype(f"{'<' if endian == 'little' else '>'}u{nbytes}")).astype(np.uint64)


def logged_inputs(design: Design, path, values, where: list[str]) -> tuple[np.ndarray, float, int]:
    """Logged values -> the design's inputs, their span in seconds and the IF edges they count.
    Values wider than the input's width are taken as unwrapped (extended) counts of the timer or
    counter and must not decrease; values that fit are taken as read from the register (the wrap
    is normal and cannot be told from a step back)."""
    fr = design.front
    bits = fr.timer_bits if fr.kind == "stamp" else fr.counter_bits
    v = np.asarray(values, dtype=np.uint64)
    kind = "stamps" if fr.kind == "stamp" else "counts"
    if v.size < 2:
        raise RecordingError(path, "", f"{v.size} {kind}: no edges to demodulate")
    if int(v.max()) >> bits:
        back = np.flatnonzero(v[1:] < v[:-1])
        if back.size:
            i = int(back[0]) + 1
            raise RecordingError(path, where[i], f"{kind} run backwards ({int(v[i])} after {int(v[i - 1])})")
    mask = (1 << bits) - 1
    inputs = (v & np.uint64(mask)).astype(np.uint16 if bits == 16 else np.uint32)
    steps = np.diff(inputs.astype(np.int64)) & mask  # type: ignore[operator]
    if fr.kind == "stamp":
        return inputs, float(steps.sum()) / design.rates.timer_hz, int(v.size * fr.prescale)
    if not steps.any():
        raise RecordingError(path, "", "the count never changes: no edges")
    return inputs, (v.size - 1) / design.rates.grid_hz, int(steps.sum())


# ---------------------------------------------------------------------------------------------
# WAV (the IF, or IQ) and SigMF (IQ)


def read_wav(path) -> tuple[int, np.ndarray]:
    """(sample rate, samples as float64 of shape (n, channels)) of a PCM or float WAV, checked
    chunk by chunk so that a fault is named with its byte offset."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as e:
        raise RecordingError(path, "", f"cannot read it: {_cut(e, 80)}") from e
    if len(raw) < 12 or raw[:4] != b"RIFF" or raw[8:12] != b"WAVE":
        raise RecordingError(path, ": offset 0", "not a RIFF/WAVE file")
    pos, fmt, data, data_at = 12, None, None, 0
    while pos + 8 <= len(raw):
        cid, size = raw[pos : pos + 4], int.from_bytes(raw[pos + 4 : pos + 8], "little")
        body = pos + 8
        if body + size > len(raw):
            raise RecordingError(
                path,
                f": offset {pos}",
                f"chunk {cid!r} claims {size} bytes, only {len(raw) - body} follow (truncated?)",
            )
        if cid == b"fmt ":
            if size < 16:
                raise RecordingError(path, f": offset {pos}", f"fmt chunk of {size} bytes, at least 16 needed")
            tag, ch, fs = (int.from_bytes(raw[body + a : body + b], "little") for a, b in ((0, 2), (2, 4), (4, 8)))
            align, bits = (int.from_bytes(raw[body + a : body + b], "little") for a, b in ((12, 14), (14, 16)))
            if tag == 0xFFFE and size >= 40:  # WAVE_FORMAT_EXTENSIBLE: the sub-format's tag
                tag = int.from_bytes(raw[body + 24 : body + 26], "little")
            fmt = (tag, ch, fs, align, bits, pos)
        elif cid == b"data":
            data, data_at = raw[body : body + size], body
        pos = body + size + (size & 1)
    if fmt is None or data is None:
        raise RecordingError(path, f": offset {pos}", f"no {'fmt' if fmt is None else 'data'} chunk (truncated?)")
    tag, ch, fs, align, bits, at = fmt
    kinds = {(1, 8): "u1", (1, 16): "<i2", (1, 32): "<i4", (3, 32): "<f4", (3, 64): "<f8"}
    if (tag, bits) not in kinds and not (tag == 1 and bits == 24):
        raise RecordingError(
            path,
            f": offset {at}",
            f"sample format {tag} with {bits} bits is not read (PCM 8/16/24/32-bit or float 32/64-bit are)",
        )
    if ch < 1 or fs < 1 or align != ch * bits // 8:
        raise RecordingError(
            path,
            f": offset {at}",
            f"inconsistent fmt chunk ({ch} channels, {fs} Hz, {align}-byte frames of {bits}-bit samples)",
        )
    extra = len(data) % align
    if extra:
        raise RecordingError(
            path,
            f": offset {data_at + len(data) - extra}",
            f"{extra} trailing byte(s), not a whole {align}-byte frame (truncated?)",
        )
    if bits == 24:
        b = np.frombuffer(data, dtype=np.uint8).reshape(-1, 3).astype(np.int32)
        x = ((b[:, 0] | (b[:, 1] << 8) | (b[:, 2] << 16)) << 8) >> 8
    else:
        x = np.frombuffer(data, dtype=kinds[(tag, bits)])
    x = x.astype(np.float64)
    if bits == 8:
        x -= 128.0  # type: ignore[arg-type]
    return fs, x.reshape(-1, ch)


def read_sigmf(path) -> tuple[float, np.ndarray, float | None]:
    """(sample rate, complex samples, centre frequency or None) of a SigMF recording (the
    .sigmf-meta or .sigmf-data path, or the name without extension)."""
    from sigmf import sigmffile

    path = Path(path)
    base = path.with_suffix("") if path.suffix in (".sigmf-meta", ".sigmf-data") else path
    meta, data = base.with_suffix(".sigmf-meta"), base.with_suffix(".sigmf-data")
    for p in (meta, data):
        if not p.exists():
            raise RecordingError(p, "", "missing: a SigMF recording is a .sigmf-meta and a .sigmf-data file")
    try:
        json.loads(meta.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as e:
        where = f":{e.lineno}" if isinstance(e, json.JSONDecodeError) else ""
        raise RecordingError(meta, where, f"not valid JSON: {_cut(getattr(e, 'msg', e), 80)}") from e
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            rec = sigmffile.fromfile(str(meta), skip_checksum=True)
    except Exception as e:  # the library raises several kinds (schema, file, key errors)
        raise RecordingError(meta, "", f"not a valid SigMF recording: {_cut(e, 100)}") from e
    dtype = str(rec.get_global_field("core:datatype"))
    if not dtype.startswith("c"):
        raise RecordingError(meta, "", f"datatype {dtype!r} is real; IQ (a complex datatype such as cf32_le) is needed")
    chans = rec.num_channels if hasattr(rec, "num_channels") else rec.get_num_channels()
    if chans != 1:
        raise RecordingError(meta, "", f"{chans} channels; one is read")
    frame = rec.get_sample_size()
    size = data.stat().st_size
    extra = size % frame
    if extra:
        raise RecordingError(
            data, f": offset {size - extra}", f"{extra} trailing byte(s), not a whole {frame}-byte sample (truncated?)"
        )
    if size == 0:
        raise RecordingError(data, ": offset 0", "no samples")
    fs = rec.get_global_field("core:sample_rate")
    if not isinstance(fs, (int, float)) or not fs > 0:
        raise RecordingError(meta, "", f"core:sample_rate {_cut(fs)!r} must be a positive number")
    caps = rec.get_captures()
    centre = caps[0].get("core:frequency") if caps else None
    x = np.asarray(rec.read_samples(), dtype=np.complex128).reshape(-1)
    return float(fs), x, centre


def _check_rate(path, fs: float, design: Design, offset_hz: float, iq: bool) -> None:
    """The recording must hold the whole channel: the Carson band 2 (full-scale deviation + audio
    band) about the IF (a real IF: below fs/2) or about the offset (IQ: inside +-fs/2)."""
    half = design.full_scale_hz + design.audio_hz
    if iq:
        reach = abs(offset_hz) + half
        if reach >= fs / 2:
            raise RecordingError(
                path,
                "",
                f"sample rate {fs:g} Hz is too low for the channel: it reaches "
                f"{reach:g} Hz from the centre (offset {offset_hz:g} Hz + deviation and audio band), "
                f"an IQ recording needs more than {2 * reach:g} Hz",
            )
    elif design.if_hz + half >= fs / 2:
        top = design.if_hz + half
        raise RecordingError(
            path,
            "",
            f"sample rate {fs:g} Hz is too low for the IF: its band reaches {top:g} Hz, "
            f"a real recording of it needs more than {2 * top:g} Hz",
        )


def _crossings(phi: np.ndarray, fs: float) -> np.ndarray:
    """The times (s) where the sampled phase phi (cycles) rises through an integer, refined on the
    cubic through four samples (the samples are at k / fs)."""
    lo, hi = np.floor(phi[:-1]), np.floor(phi[1:])
    k = np.arange(1, phi.size)
    cnt = np.maximum(hi - lo, 0).astype(np.int64)
    keep = (k >= 2) & (k <= phi.size - 2) & (cnt > 0)
    k, cnt, lo = k[keep], cnt[keep], lo[keep]
    kk = np.repeat(k, cnt)
    n = np.repeat(lo, cnt) + 1 + (np.arange(kk.size) - np.repeat(np.cumsum(cnt) - cnt, cnt))
    u = cubic_root(phi[kk - 2] - n, phi[kk - 1] - n, phi[kk] - n, phi[kk + 1] - n)
    return (kk - 1 + u) / fs


def iq_edges(iq: np.ndarray, fs: float, if_hz: float, offset_hz: float, edge: str = "rising") -> np.ndarray:
    """Edge times (s) of the IF a limiter makes from IQ samples (see the module docstring)."""
    t = np.arange(iq.size) / fs
    z = iq * np.exp(-2j * np.pi * np.mod(offset_hz * t, 1.0))
    phi = if_hz * t + np.unwrap(np.angle(z)) / (2 * np.pi)
    return _crossings(phi if edge == "rising" else phi - 0.5, fs)


def real_edges(r: np.ndarray, fs: float, edge: str = "rising") -> np.ndarray:
    """Rising (falling) zero crossings (s) of a sampled real IF, refined on the cubic through four
    samples, like edgetally.stimulus.ifnoise.crossings."""
    y = np.asarray(r, dtype=np.float64) * (1.0 if edge == "rising" else -1.0)
    k = np.flatnonzero((y[:-1] < 0) & (y[1:] >= 0)) + 1
    k = k[(k >= 2) & (k <= y.size - 2)]
    return (k - 1 + cubic_root(y[k - 2], y[k - 1], y[k], y[k + 1])) / fs


def _float_edges(times: np.ndarray, n: int, fs: float, what: str) -> Edges:
    return Edges(np.round(times * PS).astype(np.int64), 1, PS, int(round(n / fs * PS)), what)


# ---------------------------------------------------------------------------------------------
# edges -> inputs, settling, and the one entry point


def edges_to_inputs(design: Design, edges: Edges, start: int = 0) -> np.ndarray:
    """The design's inputs for these edges (see the module docstring); the timer or counter
    starts at ``start``."""
    fr = design.front
    ticks = edges.ticks(design.rates.timer_hz)
    if fr.kind == "stamp":
        bits = fr.timer_bits
        v = ticks[:: fr.prescale] + start
    else:
        bits = fr.counter_bits
        end = int(_floor_scaled(np.array([edges.end]), edges.num * design.rates.timer_hz, edges.den)[0])
        grid = np.arange(end // fr.grid_ticks + 1, dtype=np.int64) * fr.grid_ticks
        v = np.searchsorted(ticks, grid, side="left").astype(np.int64) + start
    return (v & ((1 << bits) - 1)).astype(np.uint16 if bits == 16 else np.uint32)


def settle_s(design: Design) -> float:
    """Time from the first input to a settled output: the front end's first grid instants, the CIC
    filling its combs ((order + 1) ratio grid periods: its first ``order`` outputs are dropped) and
    the IIR sections' slowest pole decaying to SETTLE_LEVEL (1 %, common practice, no source), and
    the noise squelch opening on a clean carrier (at most its reopen_ms, from power-up), whichever
    is later. The offset tracker, a slow tuning loop, is left out."""
    from scipy import signal

    c = design.cic
    grid = ((c.order + 1) * c.ratio + 2) / design.rates.grid_hz
    sos = np.array([s.float_sos for s in design.filters.sections], dtype=float)
    r = max((float(np.max(np.abs(signal.sos2zpk(sos)[1]), initial=0.0)),), default=0.0)
    iir = math.log(SETTLE_LEVEL) / math.log(r) if 0 < r < 1 else 0.0
    return max(grid + iir / design.rates.out_hz, design.squelch.reopen_ms / 1000)


def guess_format(path) -> str | None:
    name = str(path).lower()
    return next((f for ext, f in EXTENSIONS.items() if name.endswith(ext)), None)


def load(
    design: Design,
    path,
    fmt: str | None = None,
    signal: str | None = None,
    edge: str = "rising",
    offset_hz: float = 0.0,
    endian: str = "little",
    word_bits: int | None = None,
) -> Recording:
    """Read a recording and turn it into the design's inputs; RecordingError (naming the file and
    the line or offset) when it cannot be used. ``fmt`` None: from the file name's extension."""
    path = Path(path)
    fmt = fmt or guess_format(path)
    if fmt not in FORMATS:
        raise RecordingError(path, "", f"unknown format; give one of {', '.join(FORMATS)}")
    if edge not in ("rising", "falling"):
        raise ValueError(f"edge {edge!r}: rising or falling")
    if fmt != "sigmf" and not path.is_file():
        raise RecordingError(path, "", "no such file")
    fr = design.front
    times = None
    if fmt in ("csv", "bin"):
        bits = fr.timer_bits if fr.kind == "stamp" else fr.counter_bits
        if fmt == "csv":
            values, lines = read_csv(path, signal)
            where = [f":{ln}" for ln in lines]
        else:
            wb = word_bits or bits
            if wb not in (16, 32, 64) or wb < bits:
                raise RecordingError(
                    path, "", f"{wb}-bit words cannot hold {bits}-bit inputs (16, 32 or 64, at least {bits})"
                )
            values = read_bin(path, wb, endian)  # type: ignore[assignment]
            where = [f": offset {i * (wb // 8)}" for i in range(len(values))]
        inputs, seconds, nedges = logged_inputs(design, path, values, where)
        kind = "stamps" if fr.kind == "stamp" else "counts"
        what = f"{len(values)} logged {kind} ({fmt}{', ' + endian + '-endian' if fmt == 'bin' else ''})"
    else:
        if fmt == "vcd":
            e = read_vcd(path, signal, edge)
        elif fmt == "wav":
            fs, x = read_wav(path)
            if x.shape[1] > 2:
                raise RecordingError(path, "", f"{x.shape[1]} channels: one (the IF) or two (I and Q) are read")
            iq = x.shape[1] == 2
            _check_rate(path, fs, design, offset_hz, iq)
            if iq and not np.any(x):
                raise RecordingError(path, "", "every IQ sample is zero: no carrier, no edges")
            t = (
                iq_edges(x[:, 0] + 1j * x[:, 1], fs, design.if_hz, offset_hz, edge)
                if iq
                else real_edges(x[:, 0], fs, edge)
            )
            kind = f"IQ WAV, channel offset {offset_hz:g} Hz" if iq else "IF WAV"
            e = _float_edges(t, x.shape[0], fs, f"{kind}, {fs} Hz, {x.shape[0]} samples, {edge} crossings")
        else:
            fs, x, centre = read_sigmf(path)  # type: ignore[assignment]
            if not np.any(x):
                raise RecordingError(path, "", "every IQ sample is zero: no carrier, no edges")
            _check_rate(path, fs, design, offset_hz, True)
            c = f", centre {centre:g} Hz" if isinstance(centre, (int, float)) else ""
            e = _float_edges(
                iq_edges(x, fs, design.if_hz, offset_hz, edge),
                x.size,
                fs,
                f"SigMF IQ, {fs:g} Hz{c}, channel offset {offset_hz:g} Hz, {x.size} samples, {edge} crossings",
            )
        if e.at.size < 2:
            raise RecordingError(
                path, "", f"{e.at.size} {edge} edge(s) in {e.seconds:g} s: nothing to demodulate ({e.what})"
            )
        inputs, seconds, nedges, what, times = edges_to_inputs(design, e), e.seconds, int(e.at.size), e.what, e.times()
    need = settle_s(design)
    if seconds < need:
        raise RecordingError(
            path, "", f"lasts {seconds * 1e3:.3g} ms, shorter than the chain's settling time {need * 1e3:.3g} ms"
        )
    return Recording(str(path), fmt, inputs, seconds, nedges, what, times)
