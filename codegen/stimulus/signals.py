"""FM test signals -> exact edge times -> timer capture stamps.

The IF after the limiter is a square wave whose rising edges are the instants where the phase
phi(t) = phi0 + f0 t + sum_k (A_k / f_k) * (-cos(2 pi f_k t + theta_k)) / (2 pi)   (cycles)
crosses an integer (instantaneous frequency f(t) = f0 + sum_k A_k sin(2 pi f_k t + theta_k)).
Edge times are found by solving phi(t) = n with Newton's method (phi is strictly increasing
because f0 exceeds the summed deviation), not by thresholding a sampled waveform.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..fixedpoint import wrap_bits


@dataclass(frozen=True)
class Tone:
    freq_hz: float
    deviation_hz: float  # peak frequency deviation this tone causes
    phase_rad: float = 0.0


@dataclass(frozen=True)
class FmSignal:
    if_hz: float
    tones: tuple[Tone, ...]
    start_phase: float = 0.0  # cycles, in [0, 1)

    def phase(self, t):
        """Phase in cycles at times t (s)."""
        t = np.asarray(t, dtype=float)
        ph = self.start_phase + self.if_hz * t
        for tn in self.tones:
            w = 2 * np.pi * tn.freq_hz
            ph = ph + tn.deviation_hz / w * (np.cos(tn.phase_rad) - np.cos(w * t + tn.phase_rad))
        return ph

    def freq(self, t):
        """Instantaneous frequency in Hz at times t (s)."""
        t = np.asarray(t, dtype=float)
        f = np.full_like(t, self.if_hz, dtype=float)
        for tn in self.tones:
            f = f + tn.deviation_hz * np.sin(2 * np.pi * tn.freq_hz * t + tn.phase_rad)
        return f

    def peak_deviation(self) -> float:
        return float(sum(abs(tn.deviation_hz) for tn in self.tones))


def edge_times(sig: FmSignal, duration_s: float, tol_cycles: float = 1e-9) -> np.ndarray:
    """Times (s) of every rising edge in [0, duration_s): the solutions of phi(t) = n.

    The phase is a double of up to phi(duration) cycles, so its own rounding is about
    eps * phi: the tolerance is tol_cycles or 64 eps phi, whichever is larger (at 3e6 cycles, a
    1.5 MHz IF for 2 s, that is 4e-8 cycles, 3e-14 s: far below any timer tick)."""
    if sig.peak_deviation() >= sig.if_hz:
        raise ValueError("the summed deviation must stay below the IF, or the phase stops rising")
    n0 = int(np.ceil(sig.phase(0.0)))
    n1 = int(np.floor(sig.phase(duration_s)))
    n = np.arange(n0, n1 + 1, dtype=float)
    t = (n - sig.start_phase) / sig.if_hz
    tol = max(tol_cycles, 64 * np.finfo(float).eps * (abs(n1) + 1))
    for _ in range(50):
        err = sig.phase(t) - n
        t = t - err / sig.freq(t)
        if np.max(np.abs(err), initial=0.0) < tol:
            break
    else:  # pragma: no cover - Newton on a monotone phase with f > 0 converges in a handful of steps
        raise RuntimeError("edge solver did not converge")
    return t[(t >= 0) & (t < duration_s)]


def add_jitter(times: np.ndarray, sig: FmSignal, cnr_db: float, rng: np.random.Generator) -> np.ndarray:
    """Move each edge by the zero-crossing jitter of additive Gaussian IF noise at carrier-to-noise
    ratio cnr_db: sigma_t = 1 / (2 pi f sqrt(2 CNR)) (noise over the slope of a unit sine at the
    crossing; above-threshold model, each edge independent). Edges stay in increasing order."""
    cnr = 10 ** (cnr_db / 10)
    sigma = 1.0 / (2 * np.pi * sig.freq(times) * np.sqrt(2 * cnr))
    moved = times + sigma * rng.standard_normal(times.shape)
    return np.maximum.accumulate(moved)


def capture(times: np.ndarray, timer_hz: float, timer_bits: int, offset_ticks: int = 0) -> np.ndarray:
    """What input capture latches for each edge: the free-running counter's value, floor(t f_timer)
    plus the counter's start value, wrapped to timer_bits. Returned as uint16 or uint32."""
    ticks = np.floor(times * timer_hz).astype(np.int64) + int(offset_ticks)
    dtype = np.uint16 if timer_bits == 16 else np.uint32
    return wrap_bits(ticks, timer_bits).astype(dtype)


def software_stamps(
    times: np.ndarray,
    timer_hz: float,
    timer_bits: int,
    cpu_hz: float,
    latency_cycles: int,
    jitter_cycles: int,
    rng: np.random.Generator,
    offset_ticks: int = 0,
) -> np.ndarray:
    """What an edge interrupt reads from a free-running timer: the edge time plus the interrupt
    latency, a fixed part and a part uniform over [0, jitter_cycles] CPU cycles, then quantised and
    wrapped like a capture. The stamps stay in order (a later edge cannot be read earlier)."""
    late = (latency_cycles + rng.uniform(0, jitter_cycles, size=times.shape)) / cpu_hz
    return capture(np.maximum.accumulate(times + late), timer_hz, timer_bits, offset_ticks)


def counts_at(
    times: np.ndarray, grid_hz: float, duration_s: float, counter_bits: int, offset: int = 0, start_s: float = 0.0
) -> np.ndarray:
    """What an IF-clocked counter reads at each grid instant start_s + k / grid_hz: the number of
    edges before that instant plus the counter's start value, wrapped to counter_bits."""
    k = np.arange(int(np.floor((duration_s - start_s) * grid_hz)) + 1)
    grid = start_s + k / grid_hz
    n = np.searchsorted(times, grid, side="left").astype(np.int64) + int(offset)
    dtype = np.uint16 if counter_bits == 16 else np.uint32
    return wrap_bits(n, counter_bits).astype(dtype)


def test_tone(if_hz: float, full_scale_hz: float, level: float, tone_hz: float, rng: np.random.Generator) -> FmSignal:
    """A single tone at ``level`` of full-scale deviation with random start and modulation phase."""
    return FmSignal(
        if_hz=if_hz,
        tones=(Tone(tone_hz, level * full_scale_hz, float(rng.uniform(0, 2 * np.pi))),),
        start_phase=float(rng.uniform(0, 1)),
    )
