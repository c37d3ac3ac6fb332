"""The report's plots: matplotlib figures (Figure objects, no pyplot: no global state; the Agg
renderer) returned as inline <img> tags with base64 PNG data."""

from __future__ import annotations

import base64
import html
import io

import numpy as np

from ..ir import Design
from ..measure.response import FLOOR_DB, chain_response, floor_db

DPI = 100
BAD = "#b3261e"


def _e(v) -> str:
    return html.escape(str(v), quote=True)


def figure(w: float, h: float, rows: int = 1, **kw):
    """A figure with fixed margins in inches (a layout engine would draw every figure twice)."""
    from matplotlib.figure import Figure  # no pyplot: no global state, Agg renders the PNG

    fig = Figure(figsize=(w, h), dpi=DPI)
    fig.subplots_adjust(left=0.95 / w, right=1 - 0.3 / w, bottom=0.5 / h, top=1 - 0.3 / h, hspace=0.7 / (h / rows))
    axes = fig.subplots(rows, 1, **kw)
    return fig, axes


def img(fig, alt: str) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{_e(alt)}">'


def response_plot(d: Design) -> str:
    f = np.linspace(0.0, d.rates.out_hz / 2, 1201)
    q_db, f_db = chain_response(d, f)
    fig, (a1, a2) = figure(9, 5.2, 2, gridspec_kw={"height_ratios": [3, 2]})
    a1.plot(f, f_db, color="#888888", lw=3, label="float design")
    a1.plot(f, q_db, color="#1f4e9c", lw=1, label="integer coefficients")
    a1.axvline(d.audio_hz, color="#999999", ls=":", lw=1)
    a1.set_ylim(max(FLOOR_DB, min(-100.0, float(np.min(q_db[f > d.audio_hz], initial=0)) - 5)), 5)
    a1.set_ylabel("gain (dB)")
    a1.set_xlim(0, f[-1])
    a1.legend(loc="lower left", fontsize=8)
    a1.grid(alpha=0.3)
    a1.set_title("CIC + IIR chain, deviation to output", fontsize=10)
    band = f <= d.audio_hz
    a2.plot(f[band], q_db[band] - f_db[band], color="#1f4e9c")
    a2.axhline(0, color="#888888", lw=0.8)
    a2.set_xlim(0, f[-1])
    a2.set_xlabel("frequency (Hz)")
    a2.set_ylabel("integer - float (dB)")
    a2.grid(alpha=0.3)
    return img(fig, "quantised versus float response")


def tone_spectrum(design: Design, samples: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(frequencies, level in dBFS) of output samples, Hann-windowed: a full-scale sine reads 0 dB
    at its bin (amplitude scaled by the window's sum)."""
    x = design.output.fraction(samples)
    w = np.hanning(x.size)
    amp = 2 * np.abs(np.fft.rfft(x * w)) / np.sum(w)
    return np.fft.rfftfreq(x.size, 1 / design.rates.out_hz), floor_db(amp)


def spectrum_plot(d: Design, samples: np.ndarray) -> str:
    if np.asarray(samples).size < 64:
        return "<p>No test-tone output was given.</p>"
    f, db = tone_spectrum(d, samples)
    fig, ax = figure(9, 3.6)
    ax.plot(f, db, color="#1f4e9c", lw=0.8)
    ax.axvline(d.test.tone_hz, color="#b36b00", ls=":", lw=1, label=f"test tone {d.test.tone_hz:g} Hz")
    ax.axvline(d.audio_hz, color="#999999", ls=":", lw=1, label=f"band edge {d.audio_hz:g} Hz")
    ax.set_xlim(0, f[-1])
    ax.set_ylim(max(FLOOR_DB, float(np.percentile(db, 1)) - 10), 5)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("dBFS")
    ax.legend(loc="upper right", fontsize=8)
    ax.grid(alpha=0.3)
    return img(fig, "spectrum of the demodulated test tone")


SINAD = [("sinad_db", "SINAD, C", "#1f4e9c"), ("float_sinad_db", "SINAD, float reference", "#888888")]
# per sweep kind, its panels: (y label, [(SweepPoint field, legend, colour)], whether the sweep's extra curves go here)
SWEEP_PANELS = {
    "cnr": [("dB", SINAD + [("predicted_db", "formula 3 beta^2 (beta+1) CNR", "#b36b00")], True)],
    "tone": [("level (dB of full scale)", [("level_db", "C output level", "#1f4e9c")], True), ("dB", SINAD, False)],
    "deviation": [
        (
            "level (dB of full scale)",
            [("level_db", "C output level", "#1f4e9c"), ("predicted_db", "linear response", "#b36b00")],
            False,
        ),
        ("dB", SINAD + [("thd_db", "THD, C", "#c0392b")], False),
    ],
    "offset": [("offset output (Hz)", [("offset_hz", "C offset output", "#1f4e9c")], True), ("dB", SINAD, False)],
}


def sweep_plot(s) -> str:
    panels = SWEEP_PANELS.get(s.kind, [("dB", SINAD, True)])
    x = np.array([p.x for p in s.points], dtype=float)
    fig, axes = figure(7.5, 2.9 * len(panels), rows=len(panels))
    axes = np.atleast_1d(axes)
    for ax, (ylabel, series, with_curves) in zip(axes, panels, strict=True):
        for attr, label, colour in series:
            # None: not measured; a THD at the float floor (about -313 dB): no harmonic was fitted
            y = np.array(
                [
                    np.nan
                    if getattr(p, attr) is None or (attr == "thd_db" and getattr(p, attr) < -300)
                    else getattr(p, attr)
                    for p in s.points
                ],
                dtype=float,
            )
            if np.all(np.isnan(y)):
                continue
            style = "--" if attr == "predicted_db" else "-"
            ax.plot(x, y, style, marker="o", ms=3, color=colour, label=label)
        if with_curves:
            for k, (name, (cx, cy)) in enumerate(s.curves.items()):
                ax.plot(cx, cy, ":", lw=1.5, color=("#6a3d9a", "#33a02c", "#e31a1c", "#555555")[k % 4], label=str(name))
        first = series[0][0]
        bad = [(p.x, getattr(p, first)) for p in s.points if not p.bit_exact and getattr(p, first) is not None]
        if bad:
            bx, by = zip(*bad, strict=True)
            ax.plot(bx, by, "x", ms=10, mew=2, color=BAD, label="not bit-exact", zorder=5)
        ax.set_ylabel(ylabel)
        ax.grid(alpha=0.3)
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=8)
    axes[-1].set_xlabel(s.label)
    axes[0].set_title(f"sweep: {s.kind}", fontsize=10)
    return img(fig, f"sweep {s.kind}")


def scenario_plot(s) -> str:
    if not s.trace_t_ms:
        return ""
    fig, ax = figure(4.6, 2.2)
    lo, hi = s.span_ms
    if hi > lo:
        ax.axvspan(lo, hi, color="#f2c14e", alpha=0.35, lw=0)
    if s.trace_clean:
        ax.plot(s.trace_t_ms, s.trace_clean, color="#aaaaaa", lw=1, label="undisturbed")
    ax.plot(s.trace_t_ms, s.trace_out, color="#1f4e9c", lw=1, label="C output")
    ax.set_xlabel("ms", fontsize=8)
    ax.set_ylabel("of full scale", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.set_title(s.name, fontsize=9)
    ax.legend(fontsize=7, loc="lower right")
    ax.grid(alpha=0.3)
    return img(fig, f"scenario {s.name}")
