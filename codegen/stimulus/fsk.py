"""Binary FSK test signals: random NRZ bits (a higher frequency for a 1) with rectangular frequency
pulses and continuous phase, framed as the design's data path expects, and what the design's
hardware delivers for them with IF noise at a given Eb/N0.

Eb/N0 and the IF noise (stimulus.ifnoise conventions: carrier power 1/2, complex noise confined to
the IF +- B/2 with CNR = 1 / E|n|^2 in B): the real IF noise has one-sided density N0 = E|n|^2 / (2 B)
and a bit has Eb = Tb / 2, so Eb/N0 = CNR B / Rb. The noise band B stands for the receiver's IF
filter; by default it is Carson's bandwidth 2 (deviation + Rb / 2) (Carson's rule with the
fundamental of alternating bits, Rb / 2, as the highest modulating frequency; Haykin,
Communication Systems). The signal itself is not filtered.

Long records are made in chunks (independent noise per chunk, continuous signal phase); the noise
is discontinuous at the chunk boundaries, so ``Record.boundaries`` lists them for the error counts
to leave out the bits beside them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..ir import Design
from . import ifnoise
from .inputs import hardware_inputs

PREAMBLE_BITS = 32  # alternating bits before each sync word (common practice, no source)
CHUNK_BITS = 4000  # bits per noise chunk (memory: about 90 samples per bit at a 24 kHz IF and 2400 bit/s)


@dataclass(frozen=True)
class FskSignal:
    """if_hz + offset_hz + deviation_hz (2 b_k - 1) from start_s + k / bit_rate_hz for bit b_k; the
    unmodulated carrier (at if_hz + offset_hz) before and after the bits. The ``ifnoise`` interface:
    ``phase(t)`` in cycles, ``peak_deviation()``, ``tones`` (none: give the noise band)."""

    if_hz: float
    deviation_hz: float
    bit_rate_hz: float
    bits: np.ndarray
    start_s: float
    offset_hz: float = 0.0
    tones: tuple = ()
    chips: int = 1  # 2: Manchester, each bit sent as two chips, "10" a 1 and "01" a 0 (ir.DataLink)

    def peak_deviation(self) -> float:
        return self.deviation_hz + abs(self.offset_hz)

    def phase(self, t):
        t = np.asarray(t, dtype=np.float64)
        b = np.asarray(self.bits, dtype=np.float64)
        if self.chips == 2:
            b = np.stack([b, 1.0 - b], axis=1).ravel()
        rate = self.bit_rate_hz * self.chips
        s = 2.0 * b - 1.0
        cum = np.concatenate(([0.0], np.cumsum(s))) / rate  # integral of the pulses, s
        u = (t - self.start_s) * rate
        k = np.clip(np.floor(u).astype(np.int64), 0, s.size)
        inside = (u >= 0) & (k < s.size)
        frac = np.where(inside, u - k, 0.0) / rate
        integral = np.where(u < 0, 0.0, cum[k] + np.where(inside, s[np.minimum(k, s.size - 1)] * frac, 0.0))
        return (self.if_hz + self.offset_hz) * t + self.deviation_hz * integral

    @property
    def end_s(self) -> float:
        return self.start_s + self.bits.size / self.bit_rate_hz


def frames_bits(design: Design, payloads: list[bytes]) -> np.ndarray:
    """Preamble, sync word and payload (MSB first) for each payload, back to back."""
    dl = design.data
    assert dl is not None
    out: list[int] = []
    for pay in payloads:
        out += [(k + 1) & 1 for k in range(PREAMBLE_BITS)]
        out += [(dl.sync_word >> (dl.sync_bits - 1 - k)) & 1 for k in range(dl.sync_bits)]
        out += [(byte >> (7 - k)) & 1 for byte in pay for k in range(8)]
    return np.array(out, dtype=np.uint8)


def noise_band_hz(design: Design) -> float:
    """The default IF noise band: Carson's 2 (deviation + Rb / 2) (module docstring), Rb the channel
    symbol rate (twice the bit rate with Manchester)."""
    dl = design.data
    assert dl is not None
    return 2.0 * (design.full_scale_hz + 0.5 * dl.bit_rate_hz * dl.chips)


def cnr_db(ebn0_db: float, bit_rate_hz: float, band_hz: float) -> float:
    """The CNR in band_hz that gives ebn0_db at bit_rate_hz: Eb/N0 = CNR B / Rb (module docstring)."""
    return ebn0_db - 10.0 * math.log10(band_hz / bit_rate_hz)


@dataclass(frozen=True)
class Record:
    inputs: np.ndarray  # what the hardware delivers (stamps or counts)
    signal: FskSignal
    boundaries: np.ndarray  # chunk boundaries (s): noise is discontinuous there


@dataclass(frozen=True)
class _Shifted:
    """``sig`` seen from t0 (so that ifnoise, which starts at 0, makes a later chunk)."""

    sig: FskSignal
    t0: float

    @property
    def if_hz(self) -> float:
        return self.sig.if_hz

    @property
    def tones(self) -> tuple:
        return ()

    def peak_deviation(self) -> float:
        return self.sig.peak_deviation()

    def phase(self, t):
        return self.sig.phase(np.asarray(t) + self.t0)


def record(
    design: Design,
    sig: FskSignal,
    ebn0_db: float | None,
    rng: np.random.Generator,
    tail_s: float = 0.0,
    band_hz: float | None = None,
    oversample: float = 8.0,
) -> Record:
    """The hardware inputs for ``sig`` (from t = 0 to its end plus tail_s) with IF noise at ebn0_db
    in band_hz (None: no noise). ``oversample`` 8 (of ifnoise's 16) keeps a crossing's refinement
    error below 1e-3 of an IF period at the IF's highest frequency, far below the noise's own timing
    spread at the Eb/N0 of a bit-error test (ifnoise's bound: 5.81 / oversample**4 of a period)."""
    dl = design.data
    assert dl is not None
    band = noise_band_hz(design) if band_hz is None else band_hz
    duration = sig.end_s + tail_s
    cnr = math.inf if ebn0_db is None else cnr_db(ebn0_db, dl.bit_rate_hz, band)
    span = CHUNK_BITS / (sig.bit_rate_hz * sig.chips)
    times, bounds = [], []
    t0 = 0.0
    while t0 < duration:
        length = min(span, duration - t0)
        # the first full chunk may well be only lead (no bits): the phase is continuous anyway
        t = ifnoise.noisy_edge_times(
            _Shifted(sig, t0),  # type: ignore[arg-type]
            length,
            cnr,
            noise_bw_hz=band,
            rng=rng,
            oversample=oversample,
        )
        times.append(t + t0)
        t0 += length
        bounds.append(t0)
    all_t = np.concatenate(times)
    all_t = all_t[np.concatenate(([True], np.diff(all_t) > 0))]
    return Record(hardware_inputs(design, all_t, duration, rng), sig, np.array(bounds[:-1]))


# The data test of verify and the target runs (a demo scenario, not a standard): frames of random
# payloads at an Eb/N0 where ideal non-coherent BFSK errs about once in 6000 bits, with a bit clock
# 0.5 % fast and the carrier 10 % of the deviation high, so the loop, the slicer's tracking and the
# framing all work and the C must follow the model through bit errors.
DATA_TEST_EBN0_DB = 12.0
DATA_TEST_RATE_ERROR = 0.005
DATA_TEST_OFFSET = 0.1


def data_test(design: Design, seconds: float, seed: int) -> tuple[Record, list[bytes]]:
    """About ``seconds`` of framed random payloads (at least two frames) as the design's hardware
    delivers them, and the payloads."""
    dl = design.data
    assert dl is not None
    rng = np.random.default_rng(seed)
    size = dl.frame_bytes or 16
    per_frame = PREAMBLE_BITS + dl.sync_bits + 8 * size
    n = max(2, int(seconds * dl.bit_rate_hz / per_frame))
    pays = [bytes(rng.integers(0, 256, size, dtype=np.uint8).tolist()) for _ in range(n)]
    bits = frames_bits(design, pays) if dl.sync_bits else rng.integers(0, 2, n * per_frame, dtype=np.uint8)
    dev = design.full_scale_hz
    lead = max(0.005, 10 / dl.bit_rate_hz)
    sig = FskSignal(
        design.if_hz,
        dev,
        dl.bit_rate_hz * (1 + DATA_TEST_RATE_ERROR),
        bits,
        lead,
        DATA_TEST_OFFSET * dev,
        chips=dl.chips,
    )
    return record(design, sig, DATA_TEST_EBN0_DB, rng, tail_s=lead), pays
