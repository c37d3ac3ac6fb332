"""The report's data-link section for a data design: the emitted C's bit-error rate against the
ideal non-coherent curve, an eye diagram of the matched filter's output and the bit clock's lock
time (edgetally.measure.ber). Bounded run time: about 10**5 bits in all through the host build."""

from __future__ import annotations

import html
from dataclasses import dataclass

import numpy as np

from ..check import model
from ..ir import Design
from ..measure import ber
from ..stimulus import fsk
from .plots import figure, img

EBN0_DB = (6.0, 8.0, 10.0, 12.0)
MAX_BITS = 50_000  # per point: about 30 errors expected down to 6e-4 (tens of seconds in all at most)
LOCK_SEEDS = 8
EYE_EBN0_DB = 12.0


@dataclass(frozen=True)
class DataFigures:
    points: tuple  # measure.ber.BerPoint at EBN0_DB
    lock: dict  # {rate error: lock times in bits over LOCK_SEEDS seeds} at 12 dB, offset 10 %
    eye_y: np.ndarray  # matched-filter segments around the bit strobes, over the clean amplitude
    sps: int


def figures(design: Design, host, seed: int) -> DataFigures:
    pts = []
    for k, eb in enumerate(EBN0_DB):
        n = int(min(MAX_BITS, max(4000, 30 / float(ber.ideal_noncoherent(eb)))))
        pts.append(ber.measure(host, design, eb, n, seed=seed + k))
    lock = {
        re_: [ber.lock_bits(design, 12.0, seed + s, re_, 0.1) for s in range(LOCK_SEEDS)] for re_ in (0.0, -0.01, 0.01)
    }
    dl = design.data
    assert dl is not None
    rng = np.random.default_rng(seed)
    sig = ber.random_signal(design, 400, rng)
    rec = fsk.record(design, sig, EYE_EBN0_DB, rng, tail_s=0.005)
    run = model.run(design, rec.inputs).data
    assert run is not None
    sps = int(round(dl.samples_per_bit))
    strobes = run.strobes[(run.strobes > 200 * sps) & (run.strobes < run.y.size - sps - 1)]
    segs = np.array([run.y[s - sps : s + sps + 1] for s in strobes], dtype=np.float64) / dl.amplitude
    return DataFigures(points=tuple(pts), lock=lock, eye_y=segs, sps=sps)


def _ber_plot(f: DataFigures) -> str:
    fig, ax = figure(5.5, 3.6)
    x = np.linspace(min(EBN0_DB) - 1, max(EBN0_DB) + 2, 100)
    ax.semilogy(x, ber.ideal_noncoherent(x), "k-", lw=1, label="ideal non-coherent 0.5 exp(-Eb/2N0)")
    for p in f.points:
        lo, hi = ber.clopper_pearson(p.errors, p.bits, 0.95)
        ax.errorbar([p.ebn0_db], [max(p.ber, 1e-7)], yerr=[[max(p.ber, 1e-7) - lo], [hi - p.ber]], fmt="o", color="C0")
    ax.set_xlabel("Eb/N0 (dB)")
    ax.set_ylabel("bit-error rate")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    return img(fig, "bit-error rate against Eb/N0 with the ideal non-coherent curve")


def _eye_plot(f: DataFigures) -> str:
    fig, ax = figure(5.5, 3.6)
    t = np.arange(-f.sps, f.sps + 1) / f.sps
    for seg in f.eye_y[:300]:
        ax.plot(t, seg, color="C0", alpha=0.12, lw=0.8)
    ax.axvline(0, color="k", lw=0.8)
    ax.set_xlabel("time from the bit strobe (bits)")
    ax.set_ylabel("matched filter / clean amplitude")
    return img(fig, f"eye diagram of the matched filter output at {EYE_EBN0_DB:g} dB Eb/N0")


def section(design: Design, f: DataFigures) -> str:
    """The section's HTML body."""
    dl = design.data
    assert dl is not None
    rows = "".join(
        f"<tr><td>{p.ebn0_db:g}</td><td>{p.bits}</td><td>{p.errors}</td><td>{p.ber:.3g}</td>"
        f"<td>{float(ber.ideal_noncoherent(p.ebn0_db)):.3g}</td></tr>"
        for p in f.points
    )
    lock = "".join(
        f"<tr><td>{re_:+.0%}</td><td>{np.median(v):.0f}</td><td>{max(v):.0f}</td></tr>" for re_, v in f.lock.items()
    )
    return (
        f"<p>{dl.bit_rate_hz:g} bit/s NRZ, {dl.samples_per_bit:g} samples per bit; bit clock loop bandwidth "
        f"{dl.loop_bandwidth:g} of the bit rate. Bit-error rate of the emitted C on random bits through the "
        "noisy IF (noise in Carson's band), against ideal non-coherent binary FSK, 0.5 exp(-Eb/2N0) "
        "(Proakis, Digital Communications); bars: 95 % Clopper-Pearson intervals.</p>"
        f'<div class="card">{_ber_plot(f)}</div><div class="card">{_eye_plot(f)}</div>'
        "<table><tr><th>Eb/N0 dB</th><th>bits</th><th>errors</th><th>BER</th><th>ideal</th></tr>"
        f"{rows}</table>"
        f"<p>Lock time at 12 dB, carrier 10 % of the deviation high ({LOCK_SEEDS} seeds): bits from the "
        "first preamble bit until the lock detector reports lock.</p>"
        f"<table><tr><th>bit-rate error</th><th>median</th><th>max</th></tr>{lock}</table>"
        f"<p>{html.escape('Hostile scenarios and sweeps above run on the audio output of the same chain.')}</p>"
    )
