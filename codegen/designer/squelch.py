"""The noise squelch: thresholds of the carrier detector from the spec's IF carrier-to-noise ratio.

The detector (common practice in FM receivers, no source: mute the audio when the noise above the
audio band, which rises steeply as the IF CNR falls, passes a threshold, with hysteresis) works on
the grid-rate frequency estimate x[k] (the CIC input). Per grid instant it takes the second
difference h = x[k] - 2 x[k-1] + x[k-2], a high-pass (|H| = 4 sin^2(pi f / f_grid)) that keeps the
audio band's modulation small and the noise near half the grid rate, and adds |h| to a sum; a muted
instant (a gap, a resync, a step this carrier cannot make) adds ``penalty`` = 2 x_limit (the
largest |h|) instead. Every CIC_RATIO instants the sum a goes into the level
    lvl = min(lvl - (lvl >> shift) + a, cap)   (fixedpoint.squelch_level),
a one-pole average of 2**shift output samples, so lvl ~ 2**shift R E|h|. The squelch closes when
lvl > close_level and opens when lvl < open_level; while closed every output sample is mid-scale.
It starts closed with lvl = cap.

Noise model (per grid instant, in cycles of the IF, then in the step's units 2**fraction_bits /
prescale per cycle). Above threshold the limiter's phase error is the quadrature noise over the
carrier: variance 1 / (2 CNR) rad^2, i.e. s2 = 1 / (8 pi^2 CNR) cycles^2, white over |f| < B / 2
(B the Carson band 2 (deviation + audio band), where the CNR is defined, as in stimulus.ifnoise).
The edges sample it; what the grid sees is flat over [0, Fb], Fb = min(B / 2, edge sample rate / 2)
(aliasing keeps the variance). h is the third difference of the phase, so
    var h = s2 * w * mean over [0, Fb] of 64 sin^6(pi f / f_grid)
(w: the interpolation's weight on white phase error, 2/3 linear, as the planner's quantisation
model; 1 for counts). The counting floor (timer or count quantisation, interpolation residual,
latency jitter: the planner's per-grid phase error variances) adds 20 times its variance (third
difference of white error: 1 + 9 + 9 + 1). E|h| = sqrt(2 / pi) sqrt(var h) for Gaussian h.

Thresholds: open_level at the spec's CNR less OPEN_MARGIN_DB (so a carrier at the spec'd CNR sits
clearly inside the open region), close_level HYSTERESIS_DB of CNR lower. Where the counting floor
would leave less than FLOOR_MARGIN between the floor's level and open_level, the floor sets the
thresholds (``floor_limited``) and the design's open and close CNRs say where it then switches.
Below the FM threshold clicks add to the noise, so the measured switching CNRs lie at or above the
nominal ones: verify measures them on the simulated noisy IF.

Where the grid outruns the stamps (fewer stamps than grid instants per second), the model above
misses what the interpolation between stamps does to the third difference (a stamp design of a
2400 bit/s data link at a 24 kHz IF measured its E|h| 5-10 dB above the model, and the squelch
never opened at the spec's CNR): there the levels come from a simulation made when the design is
(``stamp_level_curve``: the standard tone on a noisy IF, every rising crossing, the stamp
estimate in floating point at the grid instants, E|h| at each CNR of a table), with the counting
floor added as in the model, and ``Squelch.measured`` says so.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from ..ir import Register, Squelch
from .wordlength import limit_of

TAU_S = 0.016  # level time constant target (2**shift output samples)
OPEN_MARGIN_DB = 3.0  # the open level sits at the spec's CNR less this (the model is good to about +-1.5 dB)
HYSTERESIS_DB = 2.0  # the close level sits this much CNR below the open level
FLOOR_MARGIN = 1.25  # the open level at least this factor above the counting floor's level
CAP_FACTOR = 1.5  # the level is held at or below this times close_level (bounded reopening)
GAUSS_MEAN_ABS = math.sqrt(2.0 / math.pi)
# Counts: their error is not white near simple IF / grid ratios but a pattern. A steady carrier at
# IF / grid = n + 1/3 gives the counts n, n, n + 1, ...: x = (0, 0, 1) about its mean, |h| = 1, 2, 1,
# a mean of 4/3 count (white count error: sqrt(20 / 12) sqrt(2 / pi) = 1.03). Count fronts take 4/3
# as their floor. At a half-integer ratio the counts alternate and |h| = 2 every instant: an
# unmodulated carrier within a small fraction of such a ratio can close the squelch (the planner
# warns of these ratios; modulation breaks the pattern up). A pure-noise IF read by an IF-clocked
# counter measured about 2.3 counts (the shaft example), above the close level 4/3 * 1.25 * 1.26.
COUNT_PATTERN_FLOOR = 4.0 / 3.0
# Whether a count front's detector can see the noise at all has no closed form here (the counts of
# a noise-only IF are not white, nor Poisson): it is measured before the design is made. Gaussian
# noise alone (a carrier 40 dB under it in the Carson band, as the tests' pure-noise IF) is counted
# at the grid instants for NOISE_INSTANTS instants (fewer when the IF is far above the grid, to hold
# the simulation to NOISE_SAMPLES samples), from a fixed seed; when its E|h| does not reach
# NOISE_MARGIN times the close level the squelch is left open (blind) and says so.
NOISE_INSTANTS = 2000
NOISE_SAMPLES = 2_000_000
NOISE_OVERSAMPLE = 4.0
NOISE_MARGIN = 1.0  # E|h| over 2000 instants spreads by a few %: the measured runs (tests) confirm
NOISE_SEED = 20261203


@functools.lru_cache(maxsize=256)
def count_noise_level(if_hz: float, band_hz: float, grid_hz: float) -> float:
    """E|h| (counts per grid instant) of an IF-clocked counter read at grid_hz when the IF holds
    Gaussian noise alone over band_hz about if_hz (simulated; see NOISE_INSTANTS)."""
    from ..stimulus import ifnoise, signals

    sig = signals.FmSignal(if_hz, ())
    per_instant = NOISE_OVERSAMPLE * (if_hz + band_hz / 2) / grid_hz
    n = int(max(200, min(NOISE_INSTANTS, NOISE_SAMPLES / per_instant)))
    dur = (n + 3) / grid_hz
    rng = np.random.default_rng(NOISE_SEED)
    times = ifnoise.noisy_edge_times(sig, dur, -40.0, band_hz, rng, oversample=NOISE_OVERSAMPLE)
    x = np.diff(signals.counts_at(times, grid_hz, dur, 62)).astype(np.float64)
    return float(np.mean(np.abs(x[2:] - 2 * x[1:-1] + x[:-2])))


# grid instants per table: near the switching CNRs the mean is carried by rare muted instants (each
# a penalty of about two cycles), a count whose spread over 0.1 s (about 4000 instants) was +-15 %
# between noise realisations; 16000 instants bring it to about +-8 %
SIM_INSTANTS = 16000
SIM_CNRS_DB = tuple(float(c) for c in range(-6, 41, 2))  # the table's CNRs (dB), 2 dB apart
SIM_SAMPLES = 4_000_000  # above this many IF samples the model stands alone (the stamps are then many)
SIM_OVERSAMPLE = 8.0


@functools.lru_cache(maxsize=64)
def stamp_level_curve(
    if_hz: float,
    prescale: int,
    cubic: bool,
    grid_hz: float,
    band_hz: float,
    tone_hz: float,
    tone_dev_hz: float,
    steps: tuple[float, float, float],
    gap_s: float,
) -> tuple[tuple[float, ...], tuple[float, ...]] | None:
    """(CNR dB, mean e in cycles per grid instant) of a stamp front's detector, simulated: the
    standard tone (tone_hz at tone_dev_hz) on an IF with Gaussian noise over band_hz, every
    prescale-th rising crossing a stamp, the phase at each grid instant by linear interpolation
    between the stamps or by the cubic through the four about it, x its first difference. As in the
    C, an instant whose interval exceeds gap_s or whose x leaves [low, high] (steps = (low, high,
    centre) in cycles) is muted: x = centre and e = the penalty 2 high; else e = |h|, h the second
    difference of x. One noise realisation (NOISE_SEED) scaled to each CNR of SIM_CNRS_DB; the
    means made non-increasing in CNR. None when the IF would take more than SIM_SAMPLES samples."""
    from ..stimulus import ifnoise, signals

    sig = signals.FmSignal(if_hz, (signals.Tone(tone_hz, tone_dev_hz, 0.0),))
    seconds = (SIM_INSTANTS + 16) / grid_hz
    if SIM_OVERSAMPLE * (if_hz + band_hz) * seconds > SIM_SAMPLES:
        return None
    w = ifnoise.noisy_if(sig, seconds, 0.0, band_hz, np.random.default_rng(NOISE_SEED), SIM_OVERSAMPLE)
    tg = np.arange(8, SIM_INSTANTS + 8) / grid_hz
    levels = []
    for c in SIM_CNRS_DB:
        t = ifnoise.crossings(ifnoise.NoisyIf(w.fs, w.t, w.carrier, w.noise * 10 ** (-c / 20), w.noise_bw_hz))
        st = t[::prescale]
        k = np.clip(np.searchsorted(st, tg) - 1, 1, st.size - 3)
        if cubic:  # Lagrange through stamps k-1 .. k+2 (phase k cycles at stamp k), at tg
            ts = np.stack([st[k + j] for j in (-1, 0, 1, 2)])
            ph = np.zeros_like(tg)
            for i in range(4):
                li = np.ones_like(tg)
                for j in range(4):
                    if j != i:
                        li *= (tg - ts[j]) / (ts[i] - ts[j])
                ph += (k + i - 1) * li
        else:
            ph = k + (tg - st[k]) / (st[k + 1] - st[k])
        x = np.diff(ph * prescale)
        bad = (x < steps[0]) | (x > steps[1]) | (np.diff(st)[k[1:]] > gap_s)
        x = np.where(bad, steps[2], x)
        e = np.where(bad[2:], 2.0 * steps[1], np.abs(np.diff(x, 2)))
        levels.append(float(np.mean(e)))
    return SIM_CNRS_DB, tuple(np.minimum.accumulate(levels).tolist())


def noise_var(cnr: float, *, grid_hz: float, band_hz: float, edge_hz: float, weight: float) -> float:
    """var h (cycles^2) from IF noise at linear CNR ``cnr`` (see the module docstring)."""
    fb = min(band_hz / 2.0, edge_hz / 2.0)
    # 64 sin^6(pi f / f_grid) has period f_grid and mean 64 * 5/16 = 20 over one: whole periods
    # exactly, the rest by the trapezoid rule
    whole, rest = divmod(fb, grid_hz)
    f = np.linspace(0.0, rest, 4001)
    part = float(np.trapezoid(64.0 * np.sin(np.pi * f / grid_hz) ** 6, f)) if rest > 0 else 0.0
    mean_gain = (20.0 * whole * grid_hz + part) / fb
    return weight / (8.0 * math.pi**2 * cnr) * mean_gain


def design_squelch(
    *,
    cnr_db: float,
    grid_hz: float,
    out_hz: float,
    ratio: int,
    deviation_hz: float,
    audio_hz: float,
    full_scale_hz: float,
    edge_hz: float,
    weight: float,
    floor_var: float,
    units_per_cycle: float,
    x_limit: int,
    std_tone_hz: float,
    std_level: float,
    counts: bool = False,
    blind: bool = False,
    if_hz: float | None = None,
    stamp: tuple[int, bool, tuple[float, float, float], float] | None = None,
) -> Squelch:
    """The squelch of a design. floor_var: the planner's per-grid phase error variance (cycles^2) of
    the counting itself; edge_hz: the rate at which the edges sample the phase (stamps per second,
    or infinite for counts, read at the grid instants); std_tone_hz, std_level: the standard test's
    tone (for ``reopen_ms``); counts: a count front (COUNT_PATTERN_FLOOR); blind: a count front
    whose grid outruns the IF (0 or 1 edge per grid instant): its one-bit counts look the same for a
    carrier and for noise at every time scale the detector has, so the squelch is left open (its
    levels at the cap: it opens at the first CIC output and never closes) and says so; if_hz (count
    fronts): the IF the counter counts, for the measured no-carrier level (count_noise_level), which
    also leaves the squelch open when noise alone would not close it; stamp (stamp fronts):
    (prescale, cubic, (x_low, x_limit, x_centre) in cycles, gap in s), for the simulated levels
    where the grid outruns the stamps (``stamp_level_curve``)."""
    band = 2.0 * (deviation_hz + audio_hz)
    k = noise_var(1.0, grid_hz=grid_hz, band_hz=band, edge_hz=edge_hz, weight=weight)  # var h = k / cnr
    fl = 20.0 * floor_var

    curve = None
    if stamp is not None and if_hz is not None and edge_hz < grid_hz:
        curve = stamp_level_curve(if_hz, *stamp[:2], grid_hz, band, std_tone_hz, std_level * full_scale_hz, *stamp[2:])
    floor_abs2 = GAUSS_MEAN_ABS**2 * fl  # (E|h|)^2 of the counting floor alone, cycles^2

    def mean_abs(c: float) -> float:  # E|h| per grid instant, step units
        if curve is None:
            return GAUSS_MEAN_ABS * math.sqrt(k / c + fl) * units_per_cycle
        lev = float(np.interp(10 * math.log10(c), curve[0], curve[1])) if c < math.inf else curve[1][-1]
        return math.sqrt(lev**2 + floor_abs2) * units_per_cycle

    def cnr_at(level: float) -> float:  # the CNR whose E|h| is ``level`` (inf when at the floor)
        if curve is None:
            v = (level / (GAUSS_MEAN_ABS * units_per_cycle)) ** 2 - fl
            return 10 * math.log10(k / v) if v > 0 else math.inf
        v = (level / units_per_cycle) ** 2 - floor_abs2
        if v <= curve[1][-1] ** 2:
            return math.inf
        return float(np.interp(math.sqrt(v), curve[1][::-1], curve[0][::-1]))

    c_open = 10 ** ((cnr_db - OPEN_MARGIN_DB) / 10)
    t_open = mean_abs(c_open)
    t_close = mean_abs(c_open / 10 ** (HYSTERESIS_DB / 10))
    floor = mean_abs(math.inf)
    if counts:
        floor = max(floor, COUNT_PATTERN_FLOOR * units_per_cycle)
    limited = t_open < FLOOR_MARGIN * floor
    if limited:  # the noise-dominated ratio of the two levels: E|h| goes as CNR^-1/2
        t_open = FLOOR_MARGIN * floor
        t_close = t_open * 10 ** (HYSTERESIS_DB / 20)
    shift = max(1, round(math.log2(TAU_S * out_hz)))
    per_out = float(ratio << shift)
    open_level = max(1, int(t_open * per_out))
    close_level = max(open_level + 1, int(t_close * per_out))
    cap = int(CAP_FACTOR * close_level)
    if counts and not blind and if_hz is not None:
        blind = count_noise_level(if_hz, band, grid_hz) * units_per_cycle < NOISE_MARGIN * t_close
    if blind:  # opens at the first CIC output (lvl <= cap < open_level), never closes
        open_level, close_level = cap + 1, cap
    # a full-deviation tone at the band edge through the second difference: its E|h| against the
    # close level (negative dB: it alone cannot close the squelch)
    leak = 2.0 / math.pi * full_scale_hz / grid_hz * units_per_cycle * 4 * math.sin(math.pi * audio_hz / grid_hz) ** 2

    def open_time_ms(settle: float) -> float:
        """From the cap to open_level with the level settling at ``settle``, doubled for its spread."""
        if blind:
            return round(2000.0 / out_hz, 2)
        n = math.log((cap - settle) / max(open_level - settle, 1.0)) / -math.log1p(-(2.0**-shift))
        return round(2000.0 * n / out_hz, 2)

    # a clean carrier playing the standard test: the counting floor and the tone through the high-pass
    tone_leak = (
        2.0
        / math.pi
        * std_level
        * full_scale_hz
        / grid_hz
        * units_per_cycle
        * 4
        * math.sin(math.pi * std_tone_hz / grid_hz) ** 2
    )
    clean = min(per_out * (floor + tone_leak), 0.9 * open_level)
    return Squelch(
        cnr_db=float(cnr_db),
        shift=shift,
        penalty=2 * x_limit,
        open_level=open_level,
        close_level=close_level,
        cap=cap,
        open_cnr_db=round(cnr_at(open_level / per_out), 2),
        close_cnr_db=round(cnr_at(close_level / per_out), 2),
        floor_limited=limited,
        edge_tone_db=round(20 * math.log10(leak * per_out / close_level), 2),
        open_ms=open_time_ms(per_out * mean_abs(10 ** (cnr_db / 10))),
        reopen_ms=open_time_ms(clean),
        blind=blind,
        measured=curve is not None,
    )


def _level_bound(sq: Squelch, x_limit: int, ratio: int) -> tuple[int, int, int]:
    """(|second difference|, largest sum over one CIC output period, largest level before its cap)."""
    diff = 2 * x_limit
    total = ratio * max(diff, sq.penalty)
    return diff, total, sq.cap + total


def squelch_level_bits(sq: Squelch, *, x_limit: int, ratio: int) -> int:
    """The level's word (``Squelch.level_bits``): 32 where the cap plus the largest sum stays below
    2**31 (a signed margin, though the level is unsigned), else 64."""
    return 32 if _level_bound(sq, x_limit, ratio)[2] <= limit_of(32) else 64


def squelch_registers(sq: Squelch, *, x_limit: int, ratio: int) -> tuple[Register, ...]:
    """The squelch's lines of the overflow certificate (steps lie in [0, x_limit], the centre step too)."""

    def reg(name, bits, bound, note):
        return Register(name, bits, bound, round(math.log2(limit_of(bits) / bound), 2), note)

    diff, total, level = _level_bound(sq, x_limit, ratio)
    return (
        reg("squelch.diff", 32, diff, "|x - 2 x1 + x2| <= 2 x_limit, computed modulo 2^32: exact"),
        reg("squelch.sum", 32, total, "CIC_RATIO terms of at most 2 x_limit (the penalty is 2 x_limit)"),
        reg("squelch.level", sq.level_bits, level, "held at or below the cap after each update"),
    )
