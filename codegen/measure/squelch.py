"""The noise squelch measured on the simulated noisy IF (stimulus.ifnoise: Gaussian noise in the
Carson band 2 (deviation + audio band) of the spec, the edges its real zero crossings, so clicks
appear below threshold), through the integer model (bit-exact with the C, see verify).

- ``opens(c)``: from power-up (closed), the standard test at IF CNR c for ``run_s`` seconds; open on
  at least OPEN_SHARE of the output samples in the last third.
- ``closes(c)``: the clean standard test until the squelch is open, then noise at CNR c for
  ``run_s``; closed on at least OPEN_SHARE of the samples in the last third.
- ``ramp``: the CNR swept up from cnr_db - SPAN_BELOW to cnr_db + SPAN_ABOVE and back down at
  RAMP_DB_S (the noise's amplitude follows the ramp on one noisy IF): the CNR where the squelch
  opened on the way up and closed on the way down. The level lags the ramp by about two of its time
  constants (2 * 2**shift output samples), so each figure may sit up to RAMP_DB_S times that
  (under 1 dB for time constants under 25 ms) past the static switching point.
- ``figures``: the ramp's two CNRs, the time to open at the spec's CNR, and whether a pure-noise IF
  (a carrier 40 dB under the noise) stays muted from power-up and closes it after a carrier.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ..check import model
from ..ir import Design
from ..stimulus import ifnoise, signals
from ..stimulus.inputs import DEFAULT_SEED, hardware_inputs, standard_signal

OPEN_SHARE = 0.9
SPAN_BELOW = 10.0
SPAN_ABOVE = 5.0
RAMP_DB_S = 20.0
PURE_NOISE_DB = -40.0  # "no carrier": the carrier 40 dB under the noise
CLEAN_S = 0.1  # the clean carrier before the noise in ``closes``
# IF samples per cycle of its top frequency: ifnoise's crossing error bound 5.81 M / (OVERSAMPLE^4 f)
# gives 1.4e-3 M cycles at 8, under the IF noise's phase error up to 20 dB CNR (1 / (8 pi^2 CNR) is
# (5.6e-3 cycles)^2 there; a squelch set above 15 dB is measured with this error added), and
# halves the work of ifnoise's default 16
OVERSAMPLE = 8


@dataclass(frozen=True)
class SquelchFigures:
    open_cnr_db: float | None  # lowest CNR that opened it (None: none in the span)
    close_cnr_db: float | None  # highest CNR that closed it (None: none in the span)
    open_ms: float | None  # time to open at the spec's CNR (None: it did not open)
    open_ms_bound: float  # the design's bound on that time
    pure_noise_muted: bool  # a pure-noise IF never opened it, from power-up or after a carrier
    run_s: float

    def to_dict(self) -> dict:
        return asdict(self)


def run_seconds(design: Design) -> float:
    """Long enough to open at the spec's CNR (the design's bound) and then be judged."""
    return max(0.2, 3 * design.squelch.open_ms / 1000)


def _gates(design: Design, cnr_db: float, seconds: float, seed: int, clean_s: float = 0.0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    sig = standard_signal(design, rng)
    total = clean_s + seconds
    band = 2.0 * (design.full_scale_hz + design.audio_hz)
    noisy = ifnoise.noisy_edge_times(sig, total, cnr_db, band, rng, oversample=OVERSAMPLE)
    if clean_s:
        clean = signals.edge_times(sig, total)
        noisy = np.concatenate([clean[clean < clean_s], noisy[noisy >= clean_s]])
    m = model.run(design, hardware_inputs(design, noisy, total, rng))
    return m.squelch_open[int(clean_s * design.rates.out_hz) :]


def opens(
    design: Design, cnr_db: float, seed: int = DEFAULT_SEED, seconds: float | None = None
) -> tuple[bool, float | None]:
    """Whether a carrier at cnr_db opens the squelch from power-up, and when it first opened (ms)."""
    g = _gates(design, cnr_db, seconds or run_seconds(design), seed)
    first = float(np.argmax(g)) / design.rates.out_hz * 1000 if g.any() else None
    return bool(np.mean(g[2 * g.size // 3 :]) >= OPEN_SHARE), first


def closes(design: Design, cnr_db: float, seed: int = DEFAULT_SEED, seconds: float | None = None) -> bool:
    """Whether noise at cnr_db closes the squelch after a clean carrier opened it."""
    g = _gates(design, cnr_db, seconds or run_seconds(design), seed, CLEAN_S)
    return bool(np.mean(~g[2 * g.size // 3 :]) >= OPEN_SHARE)


def ramp(design: Design, seed: int = DEFAULT_SEED) -> tuple[float | None, float | None]:
    """(CNR where it opened on the rising ramp, CNR where it closed on the falling ramp); None where
    it did not switch."""
    sq = design.squelch
    lo, hi = sq.cnr_db - SPAN_BELOW, sq.cnr_db + SPAN_ABOVE
    half = (hi - lo) / RAMP_DB_S
    rng = np.random.default_rng(seed)
    sig = standard_signal(design, rng)
    w = ifnoise.noisy_if(sig, 2 * half, 0.0, 2.0 * (design.full_scale_hz + design.audio_hz), rng, OVERSAMPLE)

    def cnr(t):
        return np.where(t < half, lo + RAMP_DB_S * t, hi - RAMP_DB_S * (t - half))

    ramped = ifnoise.NoisyIf(w.fs, w.t, w.carrier, w.noise * 10 ** (-cnr(w.t) / 20), w.noise_bw_hz)
    times = ifnoise.crossings(ramped)
    times = times[times < 2 * half]
    g = model.run(design, hardware_inputs(design, times, 2 * half, rng)).squelch_open
    t = np.arange(g.size) / design.rates.out_hz
    up = np.flatnonzero(g & (t < half))
    down = np.flatnonzero(~g & (t >= half))
    return (
        round(float(cnr(t[up[0]])), 2) if up.size else None,
        round(float(cnr(t[down[0]])), 2) if down.size else None,
    )


def figures(design: Design, seed: int = DEFAULT_SEED) -> SquelchFigures:
    sq = design.squelch
    up, down = ramp(design, seed)
    ok, first = opens(design, sq.cnr_db, seed)
    noise_open = opens(design, PURE_NOISE_DB, seed)[1] is not None
    return SquelchFigures(
        open_cnr_db=up,
        close_cnr_db=down,
        open_ms=round(first, 2) if ok and first is not None else None,
        open_ms_bound=sq.open_ms,
        pure_noise_muted=not noise_open and closes(design, PURE_NOISE_DB, seed),
        run_s=run_seconds(design),
    )


def describe(sq: dict) -> list[str]:
    """The noise squelch in words (verify and the report): the design's switching CNRs and, when measured, the
    figures on the simulated noisy IF."""
    d = sq["design"]
    if d["blind"]:
        return [
            "squelch: left open: this counter's counts look the same for a carrier and for noise alone "
            "(0 or 1 edge per grid instant, or a noise-only IF simulated at design time reads no busier than "
            "the close level); a coarser grid or a stamp scheme can mute noise"
        ]
    why = " (the counting noise floor sets its levels)" if d["floor_limited"] else ""
    lines = [
        f"squelch: set to open at and above {d['cnr_db']:g} dB IF CNR (Carson band); designed to open at "
        f"{d['open_cnr_db']:g} dB and close at {d['close_cnr_db']:g} dB{why}; opens within "
        f"{d['open_ms']:g} ms at {d['cnr_db']:g} dB"
    ]
    if d["edge_tone_db"] > 0:
        lines.append(
            f"  a full-deviation tone at the band edge alone reaches {d['edge_tone_db']:g} dB over the close "
            "level: such modulation can close the squelch"
        )
    m = sq.get("measured")
    if m:

        def fmt(v, unit):
            return "never" if v is None else f"{v:g} {unit}"

        lines.append(
            f"  measured on the noisy IF: opened at {fmt(m['open_cnr_db'], 'dB')} (rising CNR), closed at "
            f"{fmt(m['close_cnr_db'], 'dB')} (falling); at {d['cnr_db']:g} dB it opened after "
            f"{fmt(m['open_ms'], 'ms')}; pure-noise IF {'muted' if m['pure_noise_muted'] else 'NOT MUTED'}"
        )
    return lines
