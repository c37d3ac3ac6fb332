"""Sweeps: the demodulator's quality against one quantity at a time (IF CNR, tone frequency,
deviation, carrier offset). Every point runs the emitted C on the host and checks it bit for bit
against the integer model before any figure is taken from it."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from collections.abc import Callable

import numpy as np

from ..stimulus import ifnoise
from . import metrics
from ..check import model
from ..check import reference
from . import response
from ..stimulus import signals
from ..ir import Design

KINDS = ("cnr", "tone", "deviation", "offset")


@dataclass(frozen=True)
class SweepPoint:
    x: float  # the swept value, in the sweep's unit
    bit_exact: bool  # C output == integer model output, every sample
    sinad_db: float  # of the C output
    float_sinad_db: float  # of the floating-point reference on the same inputs
    snr_db: float  # C output: tone over noise (harmonics left out)
    thd_db: float  # C output: harmonics 2..5 over the tone
    level_db: float  # C output tone level, dB relative to full-scale deviation
    predicted_db: float | None = None  # the prediction this sweep is compared with, if any
    offset_hz: float | None = None  # the offset output at the end, in Hz
    flags: dict = field(default_factory=dict)  # gaps, clamps, saturations, clips of the C run
    squelch_open: float = 1.0  # share of the measured samples the squelch passed (the figures
    # are of the demodulated audio, as the squelch would pass it)


@dataclass(frozen=True)
class Sweep:
    kind: str  # one of KINDS
    label: str  # axis label of x, e.g. "IF CNR in the Carson band (dB)"
    unit: str  # "dB", "Hz"
    points: tuple[SweepPoint, ...]
    curves: dict = field(default_factory=dict)  # extra named curves {name: ([x...], [y...])}, e.g. the design response
    notes: tuple[str, ...] = ()  # what the figures mean, e.g. where the threshold lies

    @property
    def bit_exact(self) -> bool:
        return all(p.bit_exact for p in self.points)

    def to_dict(self) -> dict:
        return asdict(self)


LEAD_S = 0.1  # filters and the offset tracker settle; compared bit for bit, not measured
SECONDS = 0.3  # measured stretch per point
HARMONICS = 5


def default_points(design: Design, kind: str) -> list[float]:
    """The swept values when the caller gives none."""
    fs_hz, band = design.full_scale_hz, design.audio_hz
    if kind == "cnr":
        return [0.0, 3.0, 6.0, 8.0, 10.0, 12.0, 15.0, 20.0, 25.0, 30.0, 40.0, 50.0]
    if kind == "tone":
        lo = min(max(100.0, design.test.band_lo_hz * 5), design.test.tone_hz)
        return [float(round(v)) for v in np.geomspace(lo, 0.95 * band, 12)]
    if kind == "deviation":
        return [float(round(v * fs_hz, 1)) for v in (0.05, 0.1, 0.2, 0.3, 0.5, 0.7, 0.9, 1.0, 1.1, 1.25, 1.5)]
    if kind == "offset":
        return [float(round(v * fs_hz, 1)) for v in (-0.3, -0.2, -0.1, -0.05, 0.0, 0.05, 0.1, 0.2, 0.3)]
    raise ValueError(f"sweep {kind!r}: expected one of {', '.join(KINDS)}")


def check_points(design: Design, kind: str, pts: list[float] | None) -> None:
    """Refuse swept values the simulator cannot make: ValueError naming the value and the range."""
    if pts is None:
        return
    for v in pts:
        if not math.isfinite(v):
            raise ValueError(f"{v}: must be finite")
        if kind == "tone" and not 0 < v < design.rates.out_hz / 2:
            raise ValueError(f"{v:g}: a tone frequency must lie in (0, {design.rates.out_hz / 2:g}) Hz")
        if kind == "deviation" and not 0 < v < 0.95 * design.if_hz:
            raise ValueError(f"{v:g}: a deviation must lie in (0, {0.95 * design.if_hz:g}) Hz (below the IF)")
        if kind == "offset" and not abs(v) + design.full_scale_hz < design.if_hz:
            raise ValueError(
                f"{v:g}: |offset| + full-scale deviation must stay below the IF "
                f"({design.if_hz - design.full_scale_hz:g} Hz at most)"
            )
        if kind == "cnr" and not -20 <= v <= 100:
            raise ValueError(f"{v:g}: a CNR must lie in [-20, 100] dB")


def _measure(design: Design, host, inputs: np.ndarray, tone_hz: float, x: float, predicted: float | None) -> SweepPoint:
    """Run the C and the model on the inputs, check them bit for bit, measure the C and the float
    reference past LEAD_S."""
    got, counters = host.process(inputs)
    want = model.run(design, inputs)
    exact = (
        got.size == want.out.size
        and bool(np.array_equal(got, want.out))
        and counters["gaps"] == want.gaps
        and counters["clamps"] == want.clamps
    )
    ref = reference.run(design, inputs)
    fs = design.rates.out_hz
    skip = int(round(LEAD_S * fs))
    band = (design.test.band_lo_hz, design.audio_hz)
    # the demodulator's audio as the squelch would pass it (equal to the C's wherever it is open):
    # the sweep shows the chain's quality; ``squelch_open`` says how much of it the squelch passed
    y = design.output.fraction(want.unmuted[skip:])
    a = metrics.tone_analysis(y, fs, tone_hz, *band, harmonics=HARMONICS)
    flt = metrics.sinad_db(design.output.fraction(ref[skip:]), fs, tone_hz, *band)
    return SweepPoint(
        x=float(x),
        bit_exact=exact,
        sinad_db=round(a.sinad_db, 2),
        float_sinad_db=round(flt, 2),
        snr_db=round(a.snr_db, 2),
        thd_db=round(a.thd_db, 2),
        level_db=round(20 * math.log10(max(a.level, 1e-12)), 3),
        predicted_db=None if predicted is None else round(float(predicted), 2),
        offset_hz=round(counters["offset"] * design.offset_hz_per_unit, 2),
        flags={k: int(counters[k]) for k in ("gaps", "clamps", "saturations", "clips", "overruns")},
        squelch_open=round(float(np.mean(want.squelch_open[skip:])), 3) if want.squelch_open[skip:].size else 0.0,
    )


def _inputs(design: Design, sig: signals.FmSignal, seed: int, times: np.ndarray | None = None) -> np.ndarray:
    from ..stimulus.inputs import hardware_inputs

    duration = LEAD_S + SECONDS
    if times is None:
        times = signals.edge_times(sig, duration)
    return hardware_inputs(design, times, duration, np.random.default_rng(seed + 7))


def _tone(design: Design, tone_hz: float, dev_hz: float, seed: int, offset_hz: float = 0.0) -> signals.FmSignal:
    rng = np.random.default_rng(seed)
    return signals.FmSignal(
        if_hz=design.if_hz + offset_hz,
        tones=(signals.Tone(tone_hz, dev_hz, float(rng.uniform(0, 2 * np.pi))),),
        start_phase=float(rng.uniform(0, 1)),
    )


def chain_noise_gain_db(design: Design, tone_hz: float) -> float:
    """How much more SNR than the textbook formula this chain gives: the formula assumes the
    discriminator's f**2-shaped noise is counted flat over [0, W]; the chain weights it by its
    response (relative to the tone's gain) over the measured band [band_lo, W] of the standard test. Positive when
    the filters (de-emphasis above all) take noise away."""
    w = design.audio_hz
    f = np.linspace(design.test.band_lo_hz, w, 4001)
    q_db, _ = response.chain_response(design, np.append(f, tone_hz))
    g2 = 10 ** ((q_db[:-1] - q_db[-1]) / 10)
    shaped = np.trapezoid(f**2 * g2, f) if hasattr(np, "trapezoid") else np.trapz(f**2 * g2, f)  # type: ignore[attr-defined]
    return float(10 * math.log10((w**3 / 3) / shaped))


def run_sweep(
    design: Design,
    kind: str,
    points: list[float] | None = None,
    seed: int = 20261202,
    host=None,
    progress: Callable[[int, int], None] | None = None,
) -> Sweep:
    """One sweep: every point runs the emitted C (``host``, built if None) and the integer model on
    the same inputs and compares them in full. ``progress(done, total)`` after each point."""
    from ..check import hostbuild

    if kind not in KINDS:
        raise ValueError(f"sweep {kind!r}: expected one of {', '.join(KINDS)}")
    check_points(design, kind, points)
    xs = list(points) if points is not None else default_points(design, kind)
    host = host or hostbuild.build(design)
    tone, level = design.test.tone_hz, design.test.level
    dev = level * design.full_scale_hz
    out, curves, notes = [], {}, []
    if kind == "tone":
        fine = np.geomspace(min(xs), max(xs), 200)
        q_db, f_db = response.chain_response(design, fine)
        lvl = 20 * math.log10(level)
        curves = {
            "designed, integer coefficients": (fine.tolist(), (q_db + lvl).tolist()),
            "designed, floating point": (fine.tolist(), (f_db + lvl).tolist()),
        }
        notes.append(f"tone at {level:g} of full-scale deviation; level in dB of full-scale deviation")
    if kind == "cnr":
        gain = chain_noise_gain_db(design, tone)
        notes.append(
            f"textbook above-threshold SNR 3 beta^2 (beta + 1) CNR (Haykin), beta = {dev:g} Hz / "
            f"{design.audio_hz:g} Hz, CNR in the Carson band; this chain's filters add {gain:.2f} dB"
        )
    for n, x in enumerate(xs):
        predicted = None
        if kind == "cnr":
            sig = _tone(design, tone, dev, seed)
            duration = LEAD_S + SECONDS
            times = ifnoise.noisy_edge_times(sig, duration, x, rng=np.random.default_rng(seed + 11 + n))
            inputs = _inputs(design, sig, seed, times)
            predicted = ifnoise.above_threshold_snr_db(x, dev, design.audio_hz)
            pt = _measure(design, host, inputs, tone, x, predicted)
        elif kind == "tone":
            inputs = _inputs(design, _tone(design, x, dev, seed), seed)
            q_db, _ = response.chain_response(design, np.array([x]))
            pt = _measure(design, host, inputs, x, x, float(q_db[0]) + 20 * math.log10(level))
        elif kind == "deviation":
            inputs = _inputs(design, _tone(design, tone, x, seed), seed)
            q_db, _ = response.chain_response(design, np.array([tone]))
            pt = _measure(design, host, inputs, tone, x, float(q_db[0]) + 20 * math.log10(x / design.full_scale_hz))
        else:
            inputs = _inputs(design, _tone(design, tone, dev, seed, offset_hz=x), seed)
            pt = _measure(design, host, inputs, tone, x, None)
        out.append(pt)
        if progress:
            progress(n + 1, len(xs))
    if kind == "cnr":
        with_filters = [p.predicted_db + gain for p in out]  # type: ignore[operator]  # set on every cnr point
        curves = {
            "formula 3 beta^2 (beta+1) CNR": (xs, [p.predicted_db for p in out]),
            "formula with this chain's filters": (xs, with_filters),
        }
    if kind == "deviation":
        inside = [p for p in out if p.x <= design.full_scale_hz and p.flags.get("clips", 0) == 0]
        if inside:
            per_khz = np.median([10 ** (p.level_db / 20) / (p.x / 1000) for p in inside])
            notes.append(
                f"output {per_khz * 100:.4g} % of full scale per kHz of deviation "
                f"({per_khz * 2**15:.5g} LSB of a 16-bit output per kHz, 1 kHz tone)"
            )
        notes.append(f"spec'd full-scale deviation {design.full_scale_hz:g} Hz; past it the output clips")
    if kind == "offset":
        curves = {"ideal: offset output = carrier offset": (xs, xs)}
        tau = 2**design.scale.dc_shift / design.rates.out_hz
        left = math.exp(-(LEAD_S + SECONDS) / tau)
        notes.append(
            f"the offset output at the end of each run against the carrier's known offset; the offset "
            f"tracker's time constant is {tau * 1000:.0f} ms, so {left * 100:.2g} % of a step is still "
            "to come after the run"
        )
    labels = {
        "cnr": ("IF CNR in the Carson band (dB)", "dB"),
        "tone": ("tone frequency (Hz)", "Hz"),
        "deviation": ("peak deviation (Hz)", "Hz"),
        "offset": ("carrier offset from the IF (Hz)", "Hz"),
    }
    label, unit = labels[kind]
    return Sweep(kind=kind, label=label, unit=unit, points=tuple(out), curves=curves, notes=tuple(notes))
