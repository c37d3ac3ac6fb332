"""The limited IF as a sampled waveform with additive band-limited Gaussian noise, and the rising
zero crossings a comparator (optionally with hysteresis) finds on it: the FM threshold and clicks,
which signals.add_jitter (small independent Gaussian jitter per edge) cannot show.

Conventions.
- The IF is sin(2 pi phase(t)) with unit amplitude A = 1 (phase in cycles, signals.FmSignal.phase).
  The sine rather than the cosine is chosen so that its rising zero crossings are exactly where the
  phase passes an integer, i.e. the noiseless crossings are signals.edge_times.
- Noise is added at complex baseband: r(t) = Im{(exp(j 2 pi (phase(t) - f0 t)) + n(t)) exp(j 2 pi f0 t)}
  = sin(2 pi phase(t)) + Im{n(t) exp(j 2 pi f0 t)}, with n complex white Gaussian confined to
  |f| <= noise_bw / 2, so the real IF noise occupies f0 +- noise_bw / 2. Its power is E|n|^2 / 2, and
  with carrier power A^2 / 2 = 1/2 the carrier-to-noise ratio in noise_bw is CNR = 1 / E|n|^2.
  n is made in the frequency domain (independent complex Gaussian bins inside the band, zero
  outside, one inverse FFT), so it is exactly band-limited and periodic over the FFT length, which
  is at least the simulated span: a stationary Gaussian process for every statistic taken inside it.
- The default noise band is the Carson bandwidth 2 (peak deviation + highest tone frequency)
  (Carson's rule; Haykin, Communication Systems), the band in which the CNR of
  above_threshold_snr_db is defined.

Sample rate and crossing refinement. r is sampled at fs = oversample * f_hi, f_hi = f0 +
max(Carson bandwidth, noise_bw) / 2 (the highest frequency that carries appreciable power), and a
crossing between samples k-1 and k is refined on the cubic through samples k-2 .. k+1 (safeguarded
Newton). Error bound: cubic Lagrange interpolation at spacing h errs by at most
(9/16)/24 h^4 max|r''''| in the middle interval, and for a band-limited r Bernstein's inequality
gives max|r''''| <= (2 pi f_hi)^4 M, M = max|r|. Dividing by the slope 2 pi f A at the crossing:
    dt <= 0.0234 (2 pi)^3 M / (oversample^4 f) = 5.81 M / (oversample^4 f).
With the default oversample = 16 that is 8.9e-5 M / f: for an IF of 300 kHz and 75 kHz deviation
(f >= 225 kHz) 0.39 ns times M, about 30 times below the 11.9 ns quantum of an 84 MHz timer at high
CNR (M ~ 1), still 10 times below at M ~ 3 (CNR near 5 dB). Where it does not hold: the FM
spectrum is not strictly band-limited (Bessel tails beyond Carson's band add a little), and below
threshold a crossing next to a noise wiggle has a slope far below 2 pi f, where the bound fails; the
noise moves such a crossing by far more than a timer quantum anyway. A pure sine crosses zero with
zero curvature, so noiseless crossings are much better than the bound (tests measure it).

Hysteresis. ``hysteresis`` = H (in units of the carrier amplitude) makes the comparator go high
when r >= H and low when r < -H; a rising edge is the upward crossing of +H after the output was
low. H = 0 is a plain comparator (high when r >= 0). With H > 0 a small noise wiggle about zero no
longer gives an extra edge pair, at the cost of a delay of asin(H) / (2 pi f) on every edge, and
of whole cycles lost where the noisy envelope dips below H (a few at 10 dB CNR with H = 0.2;
common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import fft as sfft

from .signals import FmSignal

OVERSAMPLE = 16  # samples per cycle of f_hi; see the error bound in the module docstring
_PAD = 2  # samples before t = 0 and after the end, so every crossing has its four cubic nodes


def carson_bandwidth_hz(sig: FmSignal) -> float:
    """2 (peak deviation + highest modulating frequency) (Carson's rule; Haykin, Communication Systems)."""
    fm = max((abs(tn.freq_hz) for tn in sig.tones), default=0.0)
    return 2.0 * (sig.peak_deviation() + fm)


def above_threshold_snr_db(cnr_db: float, deviation_hz: float, audio_hz: float) -> float:
    """Output SNR of an FM discriminator above threshold for tone modulation, in dB:
    10 log10(3 beta^2 (beta + 1) CNR), beta = deviation / audio band W.

    Algebra (Haykin, Communication Systems, FM noise analysis): the output SNR is
    (3/2) beta^2 times the channel SNR A^2 / (2 N0 W) (two-sided noise PSD N0 / 2, tone of peak
    deviation beta W, post-detection band W). The CNR in the Carson band B_T = 2 (beta + 1) W is
    (A^2 / 2) / (N0 B_T) = A^2 / (4 N0 (beta + 1) W), so A^2 / (2 N0 W) = 2 (beta + 1) CNR and the
    output SNR is (3/2) beta^2 * 2 (beta + 1) CNR = 3 beta^2 (beta + 1) CNR. The CNR must be the one
    in that band B_T, built from the same deviation and W."""
    beta = deviation_hz / audio_hz
    return float(cnr_db + 10.0 * math.log10(3.0 * beta**2 * (beta + 1.0)))


@dataclass(frozen=True)
class NoisyIf:
    """Samples of the noisy IF r = carrier + noise at t = (k - pad) / fs (a few samples lie before
    0 and after the end), with its two parts kept apart for checks."""

    fs: float
    t: np.ndarray
    carrier: np.ndarray  # sin(2 pi phase(t))
    noise: np.ndarray  # Im{n(t) exp(j 2 pi f0 t)}, band-limited to f0 +- noise_bw / 2
    noise_bw_hz: float

    @property
    def r(self) -> np.ndarray:
        return self.carrier + self.noise


def sample_rate(sig: FmSignal, noise_bw_hz: float, oversample: float = OVERSAMPLE) -> float:
    """oversample * (f0 + max(Carson bandwidth, noise_bw) / 2): see the module docstring."""
    return oversample * (sig.if_hz + 0.5 * max(carson_bandwidth_hz(sig), noise_bw_hz))


def noisy_if(
    sig: FmSignal,
    duration_s: float,
    cnr_db: float,
    noise_bw_hz: float | None = None,
    rng: np.random.Generator | None = None,
    oversample: float = OVERSAMPLE,
) -> NoisyIf:
    """The IF plus Gaussian noise of carrier-to-noise ratio cnr_db in noise_bw_hz (default: the
    Carson bandwidth), sampled at sample_rate(). cnr_db = inf gives no noise. rng None: a fresh
    generator (not repeatable)."""
    if sig.peak_deviation() >= sig.if_hz:
        raise ValueError("the summed deviation must stay below the IF")
    bw = carson_bandwidth_hz(sig) if noise_bw_hz is None else float(noise_bw_hz)
    if not bw > 0:
        raise ValueError("the noise bandwidth must be positive (an unmodulated carrier has no Carson band)")
    if not duration_s > 0 or not oversample >= 4:
        raise ValueError("duration_s must be positive and oversample at least 4")
    rng = np.random.default_rng() if rng is None else rng
    fs = sample_rate(sig, bw, oversample)
    n = int(math.ceil(duration_s * fs)) + 2 * _PAD + 1
    k = np.arange(n, dtype=np.float64) - _PAD
    t = k / fs
    carrier = np.sin(2 * np.pi * sig.phase(t))
    cnr = 10.0 ** (cnr_db / 10.0)
    if math.isinf(cnr):
        noise = np.zeros(n)
    else:
        nfft = sfft.next_fast_len(n)
        m = int(math.floor(0.5 * bw * nfft / fs))  # bins -m .. m: |f| <= noise_bw / 2
        bins = 2 * m + 1
        # E|n|^2 = bins * 2 s^2 = 1 / CNR (each bin's real and imaginary parts have std s)
        s = math.sqrt(1.0 / (cnr * 2 * bins))
        spec = np.zeros(nfft, dtype=np.complex128)
        vals = s * (rng.standard_normal(bins) + 1j * rng.standard_normal(bins))
        spec[: m + 1] = vals[: m + 1]
        if m:
            spec[-m:] = vals[m + 1 :]
        nb = sfft.ifft(spec, overwrite_x=True)[:n] * nfft  # sum_k X_k exp(j 2 pi k i / nfft)
        w = 2 * np.pi * np.mod(sig.if_hz / fs * k, 1.0)
        noise = nb.imag * np.cos(w) + nb.real * np.sin(w)
    return NoisyIf(fs=fs, t=t, carrier=carrier, noise=noise, noise_bw_hz=bw)


def refine_crossing(y0, y1, y2, y3) -> np.ndarray:
    """Root u in (0, 1] of the cubic through (-1, y0), (0, y1), (1, y2), (2, y3), given y1 < 0 <= y2:
    Newton from the linear estimate, kept inside the shrinking bracket (bisection when it leaves)."""
    c1 = -y0 / 3 - y1 / 2 + y2 - y3 / 6
    c2 = y0 / 2 - y1 + y2 / 2
    c3 = -y0 / 6 + y1 / 2 - y2 / 2 + y3 / 6
    lo, hi = np.zeros_like(y1), np.ones_like(y1)
    u = y1 / (y1 - y2)
    for _ in range(60):
        p = y1 + u * (c1 + u * (c2 + u * c3))
        dp = c1 + u * (2 * c2 + 3 * u * c3)
        neg = p < 0
        lo = np.where(neg, u, lo)
        hi = np.where(neg, hi, u)
        with np.errstate(divide="ignore", invalid="ignore"):
            nu = u - p / dp
        nu = np.where((nu > lo) & (nu < hi), nu, 0.5 * (lo + hi))
        done = np.max(np.abs(nu - u), initial=0.0) < 1e-13
        u = nu
        if done:
            break
    return np.clip(u, 1e-12, 1.0)


def crossings(w: NoisyIf, hysteresis: float = 0.0) -> np.ndarray:
    """Rising edges (s) of the comparator on w.r, in [t >= 0, up to the last full sample interval),
    strictly increasing; see the module docstring for the hysteresis."""
    if hysteresis < 0:
        raise ValueError("hysteresis must be zero or more")
    r = w.r
    h = float(hysteresis)
    if h == 0:
        high = r >= 0
        k = np.flatnonzero(~high[:-1] & high[1:]) + 1
    else:
        zone = np.where(r >= h, 1, np.where(r < -h, -1, 0)).astype(np.int8)
        last = np.maximum.accumulate(np.where(zone != 0, np.arange(r.size), 0))
        state = zone[last]  # the comparator output (0 before the first decision)
        k = np.flatnonzero((state[:-1] == -1) & (state[1:] == 1)) + 1
    k = k[(k >= 2) & (k <= r.size - 2)]
    y = r - h
    u = refine_crossing(y[k - 2], y[k - 1], y[k], y[k + 1])
    t = (k - 1 - _PAD + u) / w.fs
    return t[t >= 0]


def noisy_edge_times(
    sig: FmSignal,
    duration_s: float,
    cnr_db: float,
    noise_bw_hz: float | None = None,
    rng: np.random.Generator | None = None,
    oversample: float = OVERSAMPLE,
    hysteresis: float = 0.0,
) -> np.ndarray:
    """Rising zero crossings (s) in [0, duration_s) of the IF plus Gaussian noise at cnr_db in
    noise_bw_hz (default: the Carson bandwidth), strictly increasing. With cnr_db = inf they equal
    signals.edge_times to within the refinement error of the module docstring."""
    w = noisy_if(sig, duration_s, cnr_db, noise_bw_hz, rng, oversample)
    t = crossings(w, hysteresis)
    return t[t < duration_s]
