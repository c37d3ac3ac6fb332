"""verify(design) -> VerifyResult: the emitted C against the integer model (every sample), and the
quality of both against the floating-point reference and the planner's prediction.

The standard test: a 1 kHz tone at 70 % of full-scale deviation with random start phase and
modulation phase (``seed``), exact edge times, the timer's quantisation and wrap with a random
counter start value. The first LEAD_S seconds let the filters settle and are compared bit for bit
but left out of the SINAD figures.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass
from typing import Callable

import numpy as np

from . import hostbuild, metrics, model, reference, schemes, signals
from .ir import Design

LEAD_S = 0.1
DEFAULT_SEED = 20261202


@dataclass(frozen=True)
class VerifyResult:
    name: str
    scheme: str
    seconds: float
    seed: int
    edges: int
    bit_exact: bool
    samples: int
    mismatches: int
    first_mismatch: int | None
    counters_match: bool
    sinad_db: float
    float_sinad_db: float
    predicted_sinad_db: float
    predicted_timer_sinad_db: float
    predicted_curvature_sinad_db: float
    implementation_loss_db: float
    timer_gap_db: float        # how far the float reference falls short of the timer-only prediction
    gaps: int
    clamps: int
    c_seconds: float
    model_seconds: float
    widths: dict

    def to_dict(self) -> dict:
        return asdict(self)


def make_stamps(design: Design, seconds: float, seed: int, cnr_db: float | None = None) -> np.ndarray:
    """Capture stamps of the standard test tone, LEAD_S + seconds long."""
    rng = np.random.default_rng(seed)
    sig = signals.test_tone(design.if_hz, design.full_scale_hz, schemes.TEST_LEVEL, schemes.TEST_TONE_HZ, rng)
    times = signals.edge_times(sig, LEAD_S + seconds)
    if cnr_db is not None:
        times = signals.add_jitter(times, sig, cnr_db, rng)
    times = times[:: design.front.prescale]
    offset = int(rng.integers(0, 1 << design.front.timer_bits))
    return signals.capture(times, design.rates.timer_hz, design.front.timer_bits, offset)


def predict(design: Design) -> schemes.Prediction:
    """The planner's prediction for this design's rates and filters."""
    return schemes.predict_timestamp(
        if_hz=design.if_hz, full_scale_hz=design.full_scale_hz, timer_hz=design.rates.timer_hz,
        grid_hz=design.rates.grid_hz, out_hz=design.rates.out_hz, r=design.cic.ratio, n=design.cic.order,
        band_hz=design.audio_hz, prescale=design.front.prescale,
        post_sos=[np.array(f.float_sos) for f in design.filters])


def verify(design: Design, seconds: float = 1.0, seed: int = DEFAULT_SEED, cnr_db: float | None = None,
           progress: Callable[[str], None] | None = None) -> VerifyResult:
    """Run the whole check. ``progress`` (optional) is told each step as it starts."""
    say = progress or (lambda _msg: None)
    if not seconds > 0:
        raise ValueError("seconds must be positive")
    say("simulating the FM test signal")
    stamps = make_stamps(design, seconds, seed, cnr_db)
    say("compiling the emitted C (strict flags)")
    host = hostbuild.build(design)
    say(f"running the C on {stamps.size} stamps")
    t0 = time.perf_counter()
    c_out, counters = host.process(stamps)
    t1 = time.perf_counter()
    say("running the integer model")
    m = model.run(design, stamps)
    t2 = time.perf_counter()
    say("running the floating-point reference")
    ref = reference.run(design, stamps)

    n = min(c_out.size, m.out.size)
    diff = np.flatnonzero(c_out[:n] != m.out[:n])
    mismatches = int(diff.size) + abs(c_out.size - m.out.size)
    first = int(diff[0]) if diff.size else (n if c_out.size != m.out.size else None)
    counters_match = counters["gaps"] == m.gaps and counters["clamps"] == m.clamps

    fs = design.rates.out_hz
    skip = int(round(LEAD_S * fs))
    band = (schemes.BAND_LOW_HZ, design.audio_hz)
    fixed = metrics.sinad_db(c_out[skip:], fs, schemes.TEST_TONE_HZ, *band)
    flt = metrics.sinad_db(ref[skip:ref.size], fs, schemes.TEST_TONE_HZ, *band)
    pred = predict(design)
    widths = {
        "timer_bits": design.front.timer_bits,
        "phase_fraction_bits": design.front.phase_shift,
        "cic_in_bits": design.cic.in_bits,
        "cic_register_bits": design.cic.width,
        "data_bits": design.scale.data_bits,
        "coef_bits": sorted({f.coef_bits for f in design.filters}),
        "accumulator_bits": 64,
        "output_bits": 16,
    }
    return VerifyResult(
        name=design.name, scheme=design.scheme, seconds=seconds, seed=seed, edges=int(stamps.size),
        bit_exact=(mismatches == 0 and counters_match), samples=int(n), mismatches=mismatches,
        first_mismatch=first, counters_match=counters_match,
        sinad_db=round(fixed, 2), float_sinad_db=round(flt, 2), predicted_sinad_db=round(pred.sinad_db, 2),
        predicted_timer_sinad_db=round(pred.timer_sinad_db, 2),
        predicted_curvature_sinad_db=round(pred.curvature_sinad_db, 2),
        implementation_loss_db=round(flt - fixed, 2) + 0.0,
        timer_gap_db=round(pred.timer_sinad_db - flt, 2) + 0.0, gaps=m.gaps, clamps=m.clamps,
        c_seconds=round(t1 - t0, 4), model_seconds=round(t2 - t1, 4), widths=widths,
    )
