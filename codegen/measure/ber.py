"""Bit-error rates of a data design's emitted C on FSK through the noisy IF, against the textbook.

Theory. Ideal non-coherent detection of orthogonal binary FSK: Pb = 0.5 exp(-Eb / 2 N0) (Proakis,
Digital Communications, 4th ed., section 5.4; a standard textbook result). A limiter-discriminator
with a bit-long integrator is not that receiver; Pawula's analysis (IEEE Trans. Commun. 29(4),
1981; from memory) puts it within about a decibel or two of the ideal curve near a modulation index
of 1 with a suitable IF bandwidth, on either side depending on h, the IF filter and the post-detection
filter. ``DISCRIMINATOR_GAP_DB`` holds the band a test accepts, with its reason.

Counting. The decided bits are aligned with the sent ones by correlation, then compared segment by
segment, each segment at the lag within +-SLIP_BITS of the last that gives the fewest errors (a bit
slip costs one segment's worth of errors at most, and is counted as errors where it happens). Bits
within SKIP_BITS of the start of the bits (the loop's acquisition) and within GUARD_BITS of a noise
chunk boundary (stimulus.fsk) are left out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..ir import Design
from ..stimulus import fsk

SEGMENT = 500
SLIP_BITS = 2
SKIP_BITS = 200
GUARD_BITS = 3
LEAD_S_MIN = 0.01  # unmodulated carrier before the bits: the chain's filters settle


def ideal_noncoherent(ebn0_db):
    """Pb = 0.5 exp(-Eb / 2 N0) (Proakis, Digital Communications: non-coherent orthogonal BFSK)."""
    return 0.5 * np.exp(-0.5 * 10.0 ** (np.asarray(ebn0_db, dtype=np.float64) / 10.0))


def ebn0_for(pb):
    """The Eb/N0 (dB) at which ideal non-coherent BFSK has bit-error rate pb (the inverse of above)."""
    return 10.0 * np.log10(2.0 * np.log(0.5 / np.asarray(pb, dtype=np.float64)))


def clopper_pearson(k: int, n: int, confidence: float) -> tuple[float, float]:
    """The exact two-sided binomial confidence interval for k errors in n bits (Clopper & Pearson,
    Biometrika 26, 1934; through scipy.stats.beta)."""
    a = 1.0 - confidence
    lo = 0.0 if k == 0 else float(stats.beta.ppf(a / 2, k, n - k + 1))
    hi = 1.0 if k == n else float(stats.beta.ppf(1 - a / 2, k + 1, n - k))
    return lo, hi


@dataclass(frozen=True)
class BerPoint:
    ebn0_db: float
    bits: int  # bits counted
    errors: int
    lag: int  # received bit index of sent bit 0

    @property
    def ber(self) -> float:
        return self.errors / self.bits if self.bits else math.nan

    def loss_interval_db(self, confidence: float) -> tuple[float, float]:
        """The Eb/N0 shift (dB) from the ideal non-coherent curve that the measured errors allow at
        ``confidence``: the applied Eb/N0 minus the ideal curve's Eb/N0 at each end of the binomial
        interval (positive: worse than ideal)."""
        lo, hi = clopper_pearson(self.errors, self.bits, confidence)
        worst = self.ebn0_db - float(ebn0_for(hi))
        best = self.ebn0_db - float(ebn0_for(max(lo, 1e-300)))
        return worst, best


def count_errors(sent: np.ndarray, got: np.ndarray, keep: np.ndarray) -> tuple[int, int, int]:
    """(errors, bits counted, lag) of the received bits against the sent ones (module docstring);
    ``keep`` marks the sent bits that count."""
    a = 2.0 * sent.astype(np.float64) - 1.0
    b = 2.0 * got.astype(np.float64) - 1.0
    head = a[: min(a.size, 2000)]
    corr = np.correlate(b[: min(b.size, head.size + 4000)], head, mode="valid")
    lag = int(np.argmax(corr))
    errors = counted = 0
    for start in range(0, sent.size, SEGMENT):
        seg = slice(start, min(start + SEGMENT, sent.size))
        best = None
        for cand in range(lag - SLIP_BITS, lag + SLIP_BITS + 1):
            lo, hi = seg.start + cand, seg.stop + cand
            if lo < 0 or hi > got.size:
                continue
            m = keep[seg]
            e = int(np.count_nonzero((got[lo:hi] != sent[seg]) & m))
            if best is None or e < best[0]:
                best = (e, cand, int(np.count_nonzero(m)))
        if best is None:
            break
        errors, lag, counted = errors + best[0], best[1], counted + best[2]
    return errors, counted, lag


def keep_mask(rec: fsk.Record) -> np.ndarray:
    """The sent bits that count (not the loop's acquisition, not beside a noise chunk boundary)."""
    sig = rec.signal
    n = sig.bits.size
    keep = np.arange(n) >= SKIP_BITS
    for b in rec.boundaries:
        k = int((b - sig.start_s) * sig.bit_rate_hz)
        keep[max(k - GUARD_BITS, 0) : max(k + GUARD_BITS + 1, 0)] = False
    return keep


def random_signal(
    design: Design, n_bits: int, rng: np.random.Generator, rate_error: float = 0.0, offset: float = 0.0
) -> fsk.FskSignal:
    """n_bits random bits after an alternating preamble, at the design's bit rate times
    (1 + rate_error) and a carrier offset of ``offset`` times the deviation."""
    dl = design.data
    assert dl is not None
    pre = np.array([(k + 1) & 1 for k in range(fsk.PREAMBLE_BITS)], dtype=np.uint8)
    bits = np.concatenate((pre, rng.integers(0, 2, n_bits, dtype=np.uint8)))
    dev = design.full_scale_hz
    lead = max(LEAD_S_MIN, 20 / dl.bit_rate_hz)
    return fsk.FskSignal(design.if_hz, dev, dl.bit_rate_hz * (1 + rate_error), bits, lead, offset * dev, chips=dl.chips)


def measure(host, design: Design, ebn0_db: float, n_bits: int, seed: int, **kw) -> BerPoint:
    """The emitted C's bit-error rate (``host``: a check.hostbuild.HostDemod of ``design``) on
    n_bits random bits at ebn0_db; ``kw``: rate_error, offset (``random_signal``)."""
    rng = np.random.default_rng(seed)
    sig = random_signal(design, n_bits, rng, **kw)
    rec = fsk.record(design, sig, ebn0_db, rng, tail_s=10 / sig.bit_rate_hz)
    _, counters = host.process(rec.inputs)
    got = counters["data"]["bits"]
    errors, counted, lag = count_errors(sig.bits, got, keep_mask(rec))
    return BerPoint(ebn0_db, counted, errors, lag)


def lock_bits(design: Design, ebn0_db: float, seed: int, rate_error: float = 0.0, offset: float = 0.0) -> float:
    """Bits from the first preamble bit of one frame (after unmodulated carrier) until the lock
    detector first reports lock, from the integer model (inf: never). The time of output sample j
    is taken as (j + CIC order + 1) output periods after the first input (within a sample)."""
    from ..check import model

    dl = design.data
    assert dl is not None
    rng = np.random.default_rng(seed)
    size = dl.frame_bytes or 16
    pay = bytes(rng.integers(0, 256, size, dtype=np.uint8).tolist())
    bits = fsk.frames_bits(design, [pay]) if dl.sync_bits else rng.integers(0, 2, 200, dtype=np.uint8)
    dev = design.full_scale_hz
    sig = fsk.FskSignal(design.if_hz, dev, dl.bit_rate_hz * (1 + rate_error), bits, 0.01, offset * dev, chips=dl.chips)
    rec = fsk.record(design, sig, ebn0_db, rng, tail_s=0.005)
    run = model.run(design, rec.inputs).data
    assert run is not None
    t = (run.strobes + design.cic.order + 1) / design.rates.out_hz
    k = np.flatnonzero(run.locked & (t >= sig.start_s))
    return float((t[k[0]] - sig.start_s) * sig.bit_rate_hz) if k.size else math.inf
