"""verify(design) -> VerifyResult: the emitted C against the integer model (every sample), and the
quality of both against the floating-point reference and the planner's prediction.

The standard test is the band's (``edgetally.standard``, signals from edgetally.stimulus.inputs);
its first ``lead_s`` seconds let the filters settle and are compared bit for bit but left out of the
SINAD figures. The measured record is at least the test's ``min_seconds`` long (the default length
grows for low bands; a shorter one asked for is refused: the figure would not be valid). ``VerifyResult.ok`` is the one verdict
every command uses: the C equals the model on every sample, and so does every emulated target run.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass
from collections.abc import Callable

from . import hostbuild, model, reference
from .compare import compare
from ..ir import Design
from ..measure import metrics
from ..planner import schemes
from ..stimulus.inputs import DEFAULT_SEED, make_inputs


@dataclass(frozen=True)
class VerifyResult:
    name: str
    scheme: str
    variant: str
    seconds: float
    seed: int
    inputs: int
    bit_exact: bool
    samples: int
    mismatches: int
    first_mismatch: int | None
    counters_match: bool
    sinad_db: float
    float_sinad_db: float  # the float reference as computed
    word_sinad_db: float  # the float reference rounded to the output word (check.reference.output_word)
    predicted_sinad_db: float
    predicted_quant_sinad_db: float
    predicted_curvature_sinad_db: float
    predicted_jitter_sinad_db: float
    implementation_loss_db: float
    quant_gap_db: float  # how far the float reference falls short of the quantisation-only prediction
    tone_hz: float  # the standard test of this band (edgetally.standard)
    test_level: float
    band_lo_hz: float
    lead_s: float
    prediction_doubt: str | None  # why the prediction may be several dB off (planner's schemes.doubt), or None
    gaps: int
    clamps: int
    saturations: int
    clips: int
    offset_hz: float  # the offset output at the end, in Hz
    c_seconds: float
    model_seconds: float
    widths: dict
    squelch: dict = None  # type: ignore[assignment]                      # the design's squelch and, when measured, its figures on the noisy IF
    target_bit_exact: bool | None = None  # None: not run (no cross compiler or emulator)
    target: dict | None = None  # per core: bit_exact, cycles per event, sizes
    data: dict | None = None  # a data design's FSK test (check.dataverify): bit_exact, frames

    @property
    def ok(self) -> bool:
        """The verdict: the C equals the model on every sample and counter, and so does every
        emulated target run that was made."""
        return self.bit_exact and self.target_bit_exact is not False and (self.data is None or self.data["bit_exact"])

    def to_dict(self) -> dict:
        return {**asdict(self), "ok": self.ok}


HARMONIC_FLOOR_DB = 75.0  # our band sweeps (tests/test_standard_test.py) measured the front end's tone
# harmonics at -74 to -89 dB THD: above this the noise-only prediction may miss them
CURVATURE_LEAD_DB = 3.0  # the interpolation part dominates when it is this far below the quantisation part


def measured_doubt(design: Design, pred) -> str | None:
    """Why the measured SINAD may sit several dB from the prediction, or None: the planner's reasons
    (``schemes.doubt``), and two of the measurement: the prediction models noise, while a dominant
    interpolation residual, and any front end past HARMONIC_FLOOR_DB, make the tone's harmonics."""
    why = schemes.doubt(
        schemes.variant_of(design),
        if_hz=design.if_hz,
        full_scale_hz=design.full_scale_hz,
        grid_hz=design.rates.grid_hz,
        pred=pred,
    )
    if why:
        return why
    if pred.curvature_sinad_db < pred.quant_sinad_db - CURVATURE_LEAD_DB:
        return (
            "the interpolation residual dominates: for a tone it is the tone's harmonics, which the "
            "white-noise model covers only roughly"
        )
    if pred.sinad_db > HARMONIC_FLOOR_DB:
        return (
            f"above {HARMONIC_FLOOR_DB:g} dB the front end's tone harmonics (the 1/f curvature of the stamp "
            "times, not in the noise model) can set the figure"
        )
    return None


class TooShort(ValueError):
    """The asked record is too short for a valid SINAD figure of this band's standard test."""


def test_seconds(design: Design, seconds: float | None) -> float:
    """The measured length: ``seconds``, or the band's default (``default_seconds``). Raises TooShort
    for an asked length below the band's minimum."""
    test = design.test
    if seconds is None:
        return test.default_seconds
    if not seconds > 0:
        raise ValueError("seconds must be positive")
    if seconds < test.min_seconds:
        raise TooShort(
            f"{seconds:g} s is too short to measure the {test.tone_hz:g} Hz test tone of a "
            f"{test.band_hi_hz:g} Hz band (it needs {test.min_seconds:g} s: 20 tone periods and 4 "
            f"periodogram bins below {test.band_lo_hz:g} Hz)"
        )
    return seconds


def verify(
    design: Design,
    seconds: float | None = None,
    seed: int = DEFAULT_SEED,
    cnr_db: float | None = None,
    progress: Callable[[str], None] | None = None,
    targets: bool = False,
    squelch: bool = False,
) -> VerifyResult:
    """Run the whole check. ``progress`` (optional) is told each step as it starts; ``targets``
    adds the cross-compiled runs in the emulator (target_check); ``squelch`` measures the noise
    squelch's switching CNRs on the simulated noisy IF (measure.squelch)."""
    say = progress or (lambda _msg: None)
    seconds = test_seconds(design, seconds)
    pending = None
    if targets:
        # The emulated runs need only the design and the seed: they start first, in a thread of their
        # own, and overlap the host work below (the compilers are subprocesses and the emulators run
        # in C without the interpreter lock, so the two share the cores instead of queueing).
        say("cross-compiling for the target cores and running them in the emulator (in the background)")
        from concurrent.futures import ThreadPoolExecutor

        from ..target.check import target_check

        pool = ThreadPoolExecutor(max_workers=1)
        pending = pool.submit(target_check, design, seed)
        pool.shutdown(wait=False)
    say("simulating the FM test signal")
    stream = make_inputs(design, seconds, seed, cnr_db)
    say("compiling the emitted C (strict flags)")
    host = hostbuild.build(design)
    say(f"running the C on {stream.size} inputs")
    t0 = time.perf_counter()
    c_out, counters = host.process(stream)
    t1 = time.perf_counter()
    say("running the integer model")
    m = model.run(design, stream)
    t2 = time.perf_counter()
    sq = {"design": asdict(design.squelch)}
    if squelch:
        say("measuring the squelch on the simulated noisy IF")
        from ..measure.squelch import figures

        sq["measured"] = figures(design, seed).to_dict()
    say("running the floating-point reference")
    ref = reference.run(design, stream)
    data = None
    if design.data is not None:
        say("running framed FSK data through the C and the model")
        from .dataverify import data_check

        data = data_check(design, host, seconds, seed)

    cmp = compare(c_out, counters, m)

    fs = design.rates.out_hz
    test = design.test
    skip = int(round(test.lead_s * fs))
    band = (test.band_lo_hz, test.band_hi_hz)
    fixed = metrics.sinad_db(c_out[skip:], fs, test.tone_hz, *band)
    flt = metrics.sinad_db(ref[skip : ref.size], fs, test.tone_hz, *band)
    word = metrics.sinad_db(reference.output_word(design, ref[skip:]), fs, test.tone_hz, *band)
    pred = schemes.predict_design(design)
    tgt = {}
    if pending is not None:
        say("waiting for the emulated target runs")
        tgt = pending.result()
    doubt = measured_doubt(design, pred)
    return VerifyResult(
        name=design.name,
        scheme=design.scheme,
        variant=design.variant,
        seconds=seconds,
        seed=seed,
        inputs=int(stream.size),
        bit_exact=cmp.bit_exact,
        samples=cmp.samples,
        mismatches=cmp.mismatches,
        first_mismatch=cmp.first_mismatch,
        counters_match=cmp.counters_match,
        sinad_db=round(fixed, 2),
        float_sinad_db=round(flt, 2),
        word_sinad_db=round(word, 2),
        predicted_sinad_db=round(pred.sinad_db, 2),
        predicted_quant_sinad_db=round(pred.quant_sinad_db, 2),
        predicted_curvature_sinad_db=round(pred.curvature_sinad_db, 2),
        predicted_jitter_sinad_db=round(pred.jitter_sinad_db, 2),
        implementation_loss_db=round(word - fixed, 2) + 0.0,
        quant_gap_db=round(pred.quant_sinad_db - flt, 2) + 0.0,
        tone_hz=test.tone_hz,
        test_level=test.level,
        band_lo_hz=test.band_lo_hz,
        lead_s=test.lead_s,
        prediction_doubt=doubt,
        gaps=m.gaps,
        clamps=m.clamps,
        saturations=m.saturations,
        clips=m.clips,
        offset_hz=round(counters["offset"] * design.offset_hz_per_unit, 3),
        c_seconds=round(t1 - t0, 4),
        model_seconds=round(t2 - t1, 4),
        widths=design.word_lengths,
        squelch=sq,
        target_bit_exact=all(v["bit_exact"] for v in tgt.values()) if tgt else None,
        target=tgt,
        data=data,
    )
