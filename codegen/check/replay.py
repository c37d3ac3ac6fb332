"""Replay a recording (edgetally.stimulus.recordings) through the emitted C and the integer model.

The C is built on the host (edgetally.check.hostbuild) and fed the recording's inputs in blocks
through <name>_process on one state, its offset output read after every block (the blocks do not
change the samples: the C's output does not depend on how the inputs are split); the model runs on
the same inputs and edgetally.check.compare.compare judges every sample and the status counters.

The summary: the recording's length, inputs and edges; the carrier-lost time (grid instants with
no carrier, the C's gap counter, over the grid rate) and the muted steps; the offset output in Hz
(full-scale deviation / 2**q per LSB); and, when the output holds a steady tone, its frequency and
SINAD. A steady tone: the strongest line of the settled output in [the standard test's band_lo, audio band] (Hann
spectrum, frequency refined by maximising the least-squares tone power within one bin) whose SINAD
is at least STEADY_SINAD_DB; below that no single line dominates and no SINAD is given (10 dB:
common practice, no source; the usual receiver sensitivity figure is taken at 12 dB SINAD).

``replay_files`` makes the files a replay writes (a WAV of the C's output, an HTML page with the
summary and plots in the report's style); it imports the report's helpers and writes nothing.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field

import numpy as np

from . import hostbuild, model
from .compare import compare
from ..ir import Design
from ..measure import metrics
from ..stimulus.recordings import Recording, settle_s

STEADY_SINAD_DB = 10.0


@dataclass(frozen=True)
class ReplayResult:
    name: str
    scheme: str
    path: str
    format: str
    what: str
    seconds: float
    inputs: int
    edges: int
    samples: int  # output samples both produced
    bit_exact: bool
    mismatches: int
    first_mismatch: int | None
    counters: dict  # the C's final status counters
    carrier_lost_s: float
    offset_hz: float  # the final offset output
    settle_s: float
    tone_hz: float | None
    sinad_db: float | None
    out: np.ndarray = field(repr=False)  # the C's output samples
    track_samples: np.ndarray = field(repr=False)  # output samples made when the offset was read
    track_offset_hz: np.ndarray = field(repr=False)  # the offset output then

    def to_dict(self) -> dict:
        keys = (
            "name",
            "scheme",
            "path",
            "format",
            "what",
            "seconds",
            "inputs",
            "edges",
            "samples",
            "bit_exact",
            "mismatches",
            "first_mismatch",
            "counters",
            "carrier_lost_s",
            "offset_hz",
            "settle_s",
            "tone_hz",
            "sinad_db",
        )
        return {k: getattr(self, k) for k in keys}


def offset_hz_per_lsb(design: Design) -> float:
    return design.full_scale_hz / 2.0**design.scale.q


def block_inputs(design: Design) -> int:
    """Inputs per output sample at the IF centre (stamps come at the IF / prescale, counts at the
    grid rate): the offset output is read about once per output sample."""
    rate = design.if_hz / design.front.prescale if design.front.kind == "stamp" else design.rates.grid_hz
    return max(1, int(round(rate / design.rates.out_hz)))


def run_tracked(
    host: hostbuild.HostDemod, inputs: np.ndarray, block: int, out_cap: int = 1024
) -> tuple[np.ndarray, dict, np.ndarray, np.ndarray]:
    """The C's output for ``inputs`` fed in blocks of ``block`` through <name>_process on one
    state, its final counters, and after every block the samples made so far and the offset output
    (LSB)."""
    d, ffi, lib = host.design, host.ffi, host.lib
    p = d.name
    st = host.new_state()
    proc, offset = getattr(lib, f"{p}_process"), getattr(lib, f"{p}_offset")
    drain, rec = host.data_reader(st)  # a data design's bits, read after every call
    if drain is not None and d.data is not None:
        out_cap = min(out_cap, (d.data.ring_bits // 2) * int(d.data.samples_per_bit))
    inputs = np.ascontiguousarray(inputs, dtype=host.input_dtype)
    out = np.empty(out_cap, dtype=host.sample_dtype)
    out_ptr = ffi.cast(f"{p}_sample_t *", ffi.from_buffer(out))
    produced = ffi.new("size_t *")
    chunks, made, offs = [], [], []
    total = 0
    for start in range(0, inputs.size, block):
        blk = inputs[start : start + block]
        base = ffi.cast(f"{p}_input_t *", ffi.from_buffer(blk))
        done = 0
        while done < blk.size:
            done += proc(st, base + done, blk.size - done, out_ptr, out_cap, produced)
            chunks.append(out[: produced[0]].copy())
            total += produced[0]
            if drain is not None:
                drain()
        made.append(total)
        offs.append(int(offset(st)))
    res = np.concatenate(chunks) if chunks else np.zeros(0, dtype=host.sample_dtype)
    counters = host.counters(st)
    if drain is not None:
        counters["data"] = host.data_counters(st, rec)
    return res, counters, np.array(made, dtype=np.int64), np.array(offs, dtype=np.int64)


def steady_tone(design: Design, samples: np.ndarray) -> tuple[float | None, float | None]:
    """(tone frequency, SINAD dB) of a steady tone in settled output samples, or (None, None)."""
    from scipy.optimize import minimize_scalar

    x = design.output.fraction(samples)
    fs = design.rates.out_hz
    lo, hi = design.test.band_lo_hz, design.audio_hz
    if x.size < 256 or not np.any(x != x[0]):
        return None, None
    w = np.hanning(x.size)
    spec = np.abs(np.fft.rfft((x - x.mean()) * w))
    f = np.fft.rfftfreq(x.size, 1 / fs)
    band = np.flatnonzero((f >= lo) & (f <= hi))
    if band.size == 0:
        return None, None
    k = int(band[np.argmax(spec[band])])
    df = fs / x.size
    a, b = max(f[k] - df, lo), min(f[k] + df, hi, fs / 2 * 0.999)
    # the least-squares frequency minimises the residual (Rife and Boorstyn 1974); the fitted tone
    # power alone peaks elsewhere when the record holds no whole number of periods (DC, cos and sin
    # are then not orthogonal)
    best = minimize_scalar(
        lambda v: float(np.sum(metrics.tone_fit(x, fs, v)[1] ** 2)),
        bounds=(a, b),
        method="bounded",
        options={"xatol": df * 1e-4},
    )
    tone = float(best.x)
    s = metrics.tone_analysis(x, fs, tone, lo, hi).sinad_db
    return (tone, s) if s >= STEADY_SINAD_DB else (None, None)


def replay(design: Design, rec: Recording, host: hostbuild.HostDemod | None = None) -> ReplayResult:
    """Run the recording's inputs through the emitted C and the model and summarise."""
    host = host or hostbuild.build(design)
    out, counters, made, offs = run_tracked(host, rec.inputs, block_inputs(design))
    want = model.run(design, rec.inputs)
    cmp = compare(out, counters, want)
    settle = settle_s(design)
    skip = int(math.ceil(settle * design.rates.out_hz))
    tone, sinad = steady_tone(design, out[skip:]) if out.size > skip else (None, None)
    per = offset_hz_per_lsb(design)
    return ReplayResult(
        name=design.name,
        scheme=design.scheme,
        path=rec.path,
        format=rec.format,
        what=rec.what,
        seconds=rec.seconds,
        inputs=int(rec.inputs.size),
        edges=rec.edges,
        samples=cmp.samples,
        bit_exact=cmp.bit_exact,
        mismatches=cmp.mismatches,
        first_mismatch=cmp.first_mismatch,
        counters={k: v for k, v in counters.items() if k != "data"},  # the data bits are in the comparison
        carrier_lost_s=counters["gaps"] / design.rates.grid_hz,
        offset_hz=counters["offset"] * per,
        settle_s=settle,
        tone_hz=tone,
        sinad_db=sinad,
        out=out,
        track_samples=made,
        track_offset_hz=offs * per,
    )


def output_t0(design: Design, rec: Recording) -> float:
    """Time (s, from the recording's start) of output sample 0, when the recording holds the IF's
    edge times: output n is the CIC output at grid instant (n + order + 1) ratio, and the grid
    starts at the first stamp used (the second for cubic interpolation) or, for counts, at 0."""
    c, fr = design.cic, design.front
    first = 0.0
    if fr.kind == "stamp" and rec.edge_times is not None:
        first = float(rec.edge_times[fr.prescale if fr.order == "cubic" else 0])
    return first + (c.order + 1) * c.ratio / design.rates.grid_hz


def frequency_estimate(design: Design, res: ReplayResult) -> np.ndarray:
    """The demodulated frequency (Hz) per output sample: the IF plus the offset output (read after
    each block, held until the next read) plus the audio output in Hz of deviation. The audio
    output has the offset removed; added back, they follow slow changes of the carrier."""
    n = res.out.size
    idx = np.searchsorted(res.track_samples, np.arange(n), side="right")
    idx = np.minimum(idx, res.track_offset_hz.size - 1)
    return design.if_hz + res.track_offset_hz[idx] + design.output.fraction(res.out) * design.full_scale_hz


# ---------------------------------------------------------------------------------------------
# files: WAV and an HTML page with the report's plots


def summary_lines(design: Design, res: ReplayResult) -> list[str]:
    verdict = "BIT-EXACT" if res.bit_exact else f"MISMATCH ({res.mismatches} samples, first at {res.first_mismatch})"
    c = res.counters
    lines = [
        f"edgetally replay '{res.name}' ({res.scheme}) of {res.path}: {res.what}",
        f"  {res.seconds:.4g} s, {res.inputs} inputs, {res.edges} IF edges -> {res.samples} output samples at "
        f"{design.rates.out_hz} Hz",
        f"  emitted C vs integer model: {verdict}",
        f"  carrier lost {res.carrier_lost_s * 1e3:.3g} ms ({c['gaps']} grid instants), {c['clamps']} steps muted "
        f"out of range, {c['overruns']} inputs lost, carrier at the end: {'yes' if c['carrier'] else 'no'}",
        f"  offset output at the end: {res.offset_hz:+.1f} Hz from the IF ({design.if_hz:g} Hz)",
    ]
    if res.tone_hz is not None:
        lines.append(
            f"  steady tone {res.tone_hz:.1f} Hz: SINAD {res.sinad_db:.1f} dB "
            f"({design.test.band_lo_hz:g} Hz to {design.audio_hz:g} Hz, after {res.settle_s * 1e3:.3g} ms settling)"
        )
    else:
        lines.append("  no steady tone in the output: no SINAD")
    return lines


def _input_freq(design: Design, rec: Recording) -> tuple[np.ndarray, np.ndarray]:
    """(time s, IF frequency Hz) from the recording: edge intervals, or stamp or count steps."""
    fr = design.front
    if rec.edge_times is not None and rec.edge_times.size > 1:
        t = rec.edge_times
        return t[1:], 1.0 / np.maximum(np.diff(t), 1e-15)
    v = rec.inputs.astype(np.int64)
    bits = fr.timer_bits if fr.kind == "stamp" else fr.counter_bits
    steps = np.diff(v) & ((1 << bits) - 1)
    if fr.kind == "stamp":
        t = np.cumsum(steps) / design.rates.timer_hz
        return t, fr.prescale * design.rates.timer_hz / np.maximum(steps, 1)
    return np.arange(1, v.size) / design.rates.grid_hz, steps * design.rates.grid_hz / fr.prescale


def plots(design: Design, rec: Recording, res: ReplayResult) -> list[str]:
    """Three figures as <img> tags: the input's frequency, the output and offset, the spectrum."""
    from ..report import plots as rp

    figs = []
    t, f = _input_freq(design, rec)
    fig, ax = rp.figure(9, 3.0)
    step = max(1, t.size // 20000)
    ax.plot(t[::step] * 1e3, f[::step] / 1e3, color="#888888", lw=0.6)
    ax.axhline(design.if_hz / 1e3, color="#b36b00", ls=":", lw=1, label=f"IF {design.if_hz:g} Hz")
    ax.set_xlabel("ms")
    ax.set_ylabel("input frequency (kHz)")
    ax.legend(loc="upper right", fontsize=8)
    ax.grid(alpha=0.3)
    ax.set_title("recording: frequency from the edge intervals", fontsize=10)
    figs.append(rp.img(fig, "input frequency"))
    fig, (a1, a2) = rp.figure(9, 5.2, 2)
    n = np.arange(res.out.size) / design.rates.out_hz * 1e3
    a1.plot(n, design.output.fraction(res.out), color="#1f4e9c", lw=0.7)
    a1.axvline(res.settle_s * 1e3, color="#999999", ls=":", lw=1, label="settled")
    a1.set_ylabel("of full scale")
    a1.legend(loc="upper right", fontsize=8)
    a1.grid(alpha=0.3)
    a1.set_title("emitted C output", fontsize=10)
    a2.plot(res.track_samples / design.rates.out_hz * 1e3, res.track_offset_hz, color="#1f4e9c", lw=1)
    a2.set_xlabel("ms (output time)")
    a2.set_ylabel("offset output (Hz)")
    a2.grid(alpha=0.3)
    figs.append(rp.img(fig, "output and offset"))
    skip = int(math.ceil(res.settle_s * design.rates.out_hz))
    if res.out.size - skip >= 64:
        f, db = rp.tone_spectrum(design, res.out[skip:])
        fig, ax = rp.figure(9, 3.6)
        ax.plot(f, db, color="#1f4e9c", lw=0.8)
        ax.axvline(design.audio_hz, color="#999999", ls=":", lw=1, label=f"band edge {design.audio_hz:g} Hz")
        if res.tone_hz is not None:
            ax.axvline(res.tone_hz, color="#b36b00", ls=":", lw=1, label=f"tone {res.tone_hz:.1f} Hz")
        ax.set_xlim(0, f[-1])
        ax.set_ylim(max(-160.0, float(np.percentile(db, 1)) - 10), 5)
        ax.set_xlabel("frequency (Hz)")
        ax.set_ylabel("dBFS")
        ax.legend(loc="upper right", fontsize=8)
        ax.grid(alpha=0.3)
        figs.append(rp.img(fig, "output spectrum"))
    return figs


def page(design: Design, rec: Recording, res: ReplayResult, wav_name: str) -> str:
    from ..report import page as rpage

    e = html.escape
    rows = "".join(f"<li>{e(s.strip())}</li>" for s in summary_lines(design, res)[1:])
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en">',
            "<head>",
            '<meta charset="utf-8">',
            f"<title>edgetally replay: {e(design.name)}</title>",
            f"<style>{rpage.CSS}</style>",
            "</head>",
            "<body>",
            f"<h1>Replay of {e(rec.path)}</h1>",
            f"<p>{e(rec.what)}; design '{e(design.name)}', scheme {e(design.scheme)}.</p>",
            f"<ul>{rows}</ul>",
            f'<p>Output: <a href="{e(wav_name)}">{e(wav_name)}</a></p>',
            *plots(design, rec, res),
            f"<footer>Made by edgetally {e(design.tool_version)} from spec hash {e(design.spec_hash)}.</footer>",
            "</body>",
            "</html>",
            "",
        ]
    )


def replay_files(design: Design, rec: Recording, res: ReplayResult) -> dict[str, bytes]:
    """{file name: bytes}: <name>_replay.wav (the C's output as 16-bit PCM) and <name>_replay.html."""
    from ..report import listen

    wav = f"{design.name}_replay.wav"
    return {
        wav: listen.wav_bytes(design.rates.out_hz, listen.pcm16(design, res.out)),
        f"{design.name}_replay.html": page(design, rec, res, wav).encode("utf-8"),
    }
