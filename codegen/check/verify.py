"""verify(design) -> VerifyResult: the emitted C against the integer model (every sample), and the
quality of both against the floating-point reference and the planner's prediction.

The standard test is edgetally.stimulus.inputs'; its first LEAD_S seconds let the filters settle and
are compared bit for bit but left out of the SINAD figures. ``VerifyResult.ok`` is the one verdict
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
from ..stimulus.inputs import DEFAULT_SEED, LEAD_S, make_inputs


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
    float_sinad_db: float
    predicted_sinad_db: float
    predicted_quant_sinad_db: float
    predicted_curvature_sinad_db: float
    predicted_jitter_sinad_db: float
    implementation_loss_db: float
    quant_gap_db: float  # how far the float reference falls short of the quantisation-only prediction
    gaps: int
    clamps: int
    saturations: int
    clips: int
    offset_hz: float  # the offset output at the end, in Hz
    c_seconds: float
    model_seconds: float
    widths: dict
    target_bit_exact: bool | None = None  # None: not run (no cross compiler or emulator)
    target: dict | None = None  # per core: bit_exact, cycles per event, sizes

    @property
    def ok(self) -> bool:
        """The verdict: the C equals the model on every sample and counter, and so does every
        emulated target run that was made."""
        return self.bit_exact and self.target_bit_exact is not False

    def to_dict(self) -> dict:
        return {**asdict(self), "ok": self.ok}


def verify(
    design: Design,
    seconds: float = 1.0,
    seed: int = DEFAULT_SEED,
    cnr_db: float | None = None,
    progress: Callable[[str], None] | None = None,
    targets: bool = False,
) -> VerifyResult:
    """Run the whole check. ``progress`` (optional) is told each step as it starts; ``targets``
    adds the cross-compiled runs in the emulator (target_check)."""
    say = progress or (lambda _msg: None)
    if not seconds > 0:
        raise ValueError("seconds must be positive")
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
    say("running the floating-point reference")
    ref = reference.run(design, stream)

    cmp = compare(c_out, counters, m)

    fs = design.rates.out_hz
    skip = int(round(LEAD_S * fs))
    band = (schemes.BAND_LOW_HZ, design.audio_hz)
    fixed = metrics.sinad_db(c_out[skip:], fs, schemes.TEST_TONE_HZ, *band)
    flt = metrics.sinad_db(ref[skip : ref.size], fs, schemes.TEST_TONE_HZ, *band)
    pred = schemes.predict_design(design)
    tgt = {}
    if pending is not None:
        say("waiting for the emulated target runs")
        tgt = pending.result()
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
        predicted_sinad_db=round(pred.sinad_db, 2),
        predicted_quant_sinad_db=round(pred.quant_sinad_db, 2),
        predicted_curvature_sinad_db=round(pred.curvature_sinad_db, 2),
        predicted_jitter_sinad_db=round(pred.jitter_sinad_db, 2),
        implementation_loss_db=round(flt - fixed, 2) + 0.0,
        quant_gap_db=round(pred.quant_sinad_db - flt, 2) + 0.0,
        gaps=m.gaps,
        clamps=m.clamps,
        saturations=m.saturations,
        clips=m.clips,
        offset_hz=round(counters["offset"] * design.offset_hz_per_unit, 3),
        c_seconds=round(t1 - t0, 4),
        model_seconds=round(t2 - t1, 4),
        widths=design.word_lengths,
        target_bit_exact=all(v["bit_exact"] for v in tgt.values()) if tgt else None,
        target=tgt,
    )
