"""IF waveform simulator with noise (edgetally.ifsim) checked against references outside the project.

Outside references used here:
- Bessel functions: tone FM exp(j 2 pi phase) has lines J_n(beta) at f0 + n fm (Jacobi-Anger
  expansion; Haykin, Communication Systems, from memory); scipy.special.j0 / j1 / jv as the values;
  zeros of J0 at 2.404826, 5.520078, 8.653728 (Abramowitz & Stegun, Table 9.5, values from memory,
  checked against scipy.special.j0 below).
- Carson's rule: bandwidth 2 (deviation + tone frequency) holds at least 98 % of the power (Haykin,
  Communication Systems; the 98 % figure is common practice, no source).
- Zero-crossing jitter of a sine in additive Gaussian noise: sigma_t = sigma_n / slope =
  1 / (2 pi f sqrt(2 CNR)) (first-order perturbation; common practice, no source).
- Rice's formula for the rate of zero crossings of Gaussian noise (Rice, BSTJ 1944-45, from memory).
- FM above threshold: output SNR 3 beta^2 (beta + 1) CNR (Haykin, Communication Systems, FM noise
  analysis; the algebra is in edgetally.ifsim.above_threshold_snr_db), and the threshold near
  10 dB CNR below which clicks take over (Haykin; Rice's click analysis, from memory).
- scipy.signal.sosfreqz for the response of the chain's output filters; the CIC magnitude
  |sin(pi f R / fg) / (R sin(pi f / fg))|^N written out from Hogenauer (IEEE Trans. ASSP-29(2), 1981).
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
from scipy import signal as ssig
from scipy import special

import edgetally
from edgetally import standard
from edgetally.stimulus import ifnoise
from edgetally.measure import metrics
from edgetally.check import reference
from edgetally.planner import schemes
from edgetally.stimulus import signals
from edgetally.stimulus.signals import FmSignal, Tone

LEAD_S = 0.1    # filters settling, as edgetally.verify.LEAD_S


# --- Bessel carrier nulls and Carson's rule on the noiseless waveform -----------------------------

F0, FM, FS, SPAN = 100_000.0, 1000.0, 1_024_000.0, 0.01   # 10 modulation periods, bins of 100 Hz
N_SAMPLES = 10240


def _if_waveform(sig: FmSignal, fs: float, duration_s: float) -> tuple[np.ndarray, np.ndarray]:
    """The noiseless IF sin(2 pi phase(t)) (unit amplitude) at t = k / fs in [0, duration_s)."""
    t = np.arange(int(math.ceil(duration_s * fs))) / fs
    t = t[t < duration_s]
    return t, np.sin(2 * np.pi * sig.phase(t))


def _lines(beta: float, theta: float, start: float):
    """One-sided amplitude spectrum of _if_waveform (sine amplitude per bin), the carrier's bin and
    the bins per fm. The span holds whole modulation periods and whole IF cycles, so every line
    f0 + n fm falls on a bin (no leakage). Images: the negative-frequency lines reach the carrier's
    bin only for n = -2 f0 / fm = -200, and the alias at fs for n = (fs - 2 f0) / fm = 824:
    |J_200(beta)| < 1e-200 for beta < 9, so both are nothing."""
    sig = FmSignal(if_hz=F0, tones=(Tone(FM, beta * FM, theta),), start_phase=start)
    t, x = _if_waveform(sig, FS, SPAN)
    assert x.size == N_SAMPLES and t[-1] < SPAN
    a = 2 * np.abs(np.fft.rfft(x)) / x.size
    return a, int(round(F0 / (FS / x.size))), int(round(FM / (FS / x.size)))


# Numerical floor of the line amplitudes: the phase (< 1000 cycles) is rounded to ~1000 * 1.1e-16 =
# 1.1e-13 cycles, i.e. < 1e-12 in each sample of the unit sine; the bin average keeps that below
# 1e-12, and the FFT adds ~log2(N) * eps relative. EPS_AMP = 1e-11 carries a tenfold margin.
EPS_AMP = 1e-11


@pytest.mark.parametrize("beta", [0.3, 1.0, 2.0, 3.7, 6.5])
def test_carrier_fraction_is_j0_squared(beta):
    rng = np.random.default_rng(int(beta * 100))
    a, c, _ = _lines(beta, float(rng.uniform(0, 2 * np.pi)), float(rng.uniform(0, 1)))
    p = a ** 2
    frac = p[c] / np.sum(p[1:-1])
    # Carrier power fraction = J0(beta)^2 (scipy.special.j0). |frac - J0^2| <= 2 |J0| EPS_AMP + EPS_AMP^2
    # plus J0^2 times the relative error of the total (2 EPS_AMP per line, < 1e-9 summed): < 1e-9.
    assert frac == pytest.approx(special.j0(beta) ** 2, abs=1e-9)


@pytest.mark.parametrize("zero", [2.404826, 5.520078, 8.653728])   # A&S Table 9.5, zeros of J0
def test_carrier_vanishes_at_the_tabled_zeros_of_j0(zero):
    # The table gives 6 decimals, so the true zero lies within 5e-7. J0 near its zero z: J0(z + d) =
    # -J1(z) d + J0''(z) d^2 / 2 with |J0''| <= 1 (dJ0/dx = -J1; A&S 9.1.28). Taking |J1| at the tabled
    # value (it differs from J1(z) by at most 5e-7, |J1'| <= 1):
    d = 5e-7
    amp_bound = (abs(special.j1(zero)) + d) * d + 0.5 * d ** 2
    assert abs(special.j0(zero)) <= amp_bound           # the table and scipy agree on the zero
    rng = np.random.default_rng(int(zero * 1000))
    a, c, _ = _lines(zero, float(rng.uniform(0, 2 * np.pi)), float(rng.uniform(0, 1)))
    p = a ** 2
    frac = p[c] / np.sum(p[1:-1])
    # bound on the power fraction: (table residual + numerical floor)^2, e.g. 6.8e-14 at the first
    # zero (J1 = 0.519), 2.9e-14 and 1.9e-14 at the others; far below the 1e-6 one might guess.
    bound = (amp_bound + EPS_AMP) ** 2
    assert bound < 1e-13
    assert frac <= bound


@pytest.mark.parametrize("beta", [0.5, 1.0, 2.0, 3.0, 5.0, 8.0, 2.404826, 8.653728])
def test_carson_band_holds_the_bessel_power(beta):
    rng = np.random.default_rng(int(beta * 77))
    a, c, step = _lines(beta, float(rng.uniform(0, 2 * np.pi)), float(rng.uniform(0, 1)))
    p = a ** 2
    # Power within +-(deviation + tone) of the carrier: the lines |n| <= floor(beta + 1) (on bins).
    m = int(math.floor(beta + 1 + 1e-9))
    sel = slice(c - m * step, c + m * step + 1)
    frac = np.sum(p[sel]) / np.sum(p[1:-1])
    n = np.arange(-m, m + 1)
    exact = float(np.sum(special.jv(n, beta) ** 2))      # sideband powers J_n(beta)^2 (scipy.special.jv)
    assert frac == pytest.approx(exact, abs=1e-9)         # numerical floor as above
    if float(beta).is_integer() or beta < 1:
        # Carson's rule, 98 % (common practice, no source). For a non-integer beta the line at the band
        # edge drops out and the share can dip below: J_n sums give 97.5 % at beta = 8.653728, so the
        # rule of thumb is checked where beta + 1 is a whole number of tone frequencies, or beta < 1.
        assert frac >= 0.98


# --- the noisy waveform: CNR definition, edges ----------------------------------------------------

@pytest.mark.parametrize("modulated", [False, True])
def test_cnr_is_carrier_over_noise_in_the_band(modulated):
    cnr_db, span = 10.0, 0.2
    rng = np.random.default_rng(3 + modulated)
    if modulated:   # default band: Carson 2 (20 + 5) kHz = 50 kHz
        sig = FmSignal(if_hz=F0, tones=(Tone(5000.0, 20000.0, 0.4),), start_phase=0.2)
        bw = None
    else:
        sig = FmSignal(if_hz=F0, tones=(), start_phase=0.37)
        bw = 50_000.0
    w = ifnoise.noisy_if(sig, span, cnr_db, bw, rng)
    assert w.noise_bw_hz == pytest.approx(50_000.0)
    n = w.t.size
    if modulated:
        # carrier and noise kept apart by the simulator: carrier power from the samples (1/2 up to the
        # part-cycle at the ends, < 1 / (f0 span) relative = 5e-5), noise from its own spectrum
        p_carrier = float(np.mean(w.carrier ** 2))
        resid = w.noise
    else:
        # measured on the waveform alone: least-squares fit of the carrier at f0, the rest is noise
        # (the fit also takes the noise at f0 itself: one bin of the ~10000 in the band)
        arg = 2 * np.pi * F0 * w.t
        basis = np.column_stack([np.cos(arg), np.sin(arg)])
        coef, *_ = np.linalg.lstsq(basis, w.r, rcond=None)
        p_carrier = float(np.sum(coef ** 2) / 2)
        resid = w.r - basis @ coef
    win = np.hanning(n)
    # one-sided Hann periodogram, scaled so that white noise keeps its power
    spec = np.abs(np.fft.rfft(resid * win)) ** 2 * 2.0 / (n * np.sum(win ** 2))
    f = np.fft.rfftfreq(n, 1 / w.fs)
    inband = np.abs(f - F0) <= 25_000.0
    guard = np.abs(f - F0) <= 26_000.0          # 1 kHz = 200 bins of guard for the Hann leakage
    p_noise = float(np.sum(spec[inband]))
    # Scatter of the in-band noise power: K = B T = 10000 independent bins; Hann makes neighbours
    # correlated (|c1|^2 = 4/9, |c2|^2 = 1/36), so the variance is 1 + 2 (4/9 + 1/36) = 1.94 times that
    # of K independent bins: relative std sqrt(1.94 / 10000) = 1.4 %; 5 sigma = 7 %.
    assert p_carrier / p_noise == pytest.approx(10 ** (cnr_db / 10), rel=0.07)
    # and nothing outside the band (Hann sidelobes 200 bins out are below 1e-12)
    assert float(np.sum(spec[~guard])) < 1e-6 * p_noise


def test_noiseless_crossings_are_the_exact_edges():
    # Consistency with signals.edge_times (itself checked against scipy.integrate.quad in
    # test_signals_reference), and the refinement bound of the ifsim docstring: 5.81 M / (16^4 f)
    # with f >= 225 kHz is 0.39 ns, more than 10x below the 11.9 ns quantum of an 84 MHz timer.
    sig = FmSignal(if_hz=300_000.0, tones=(Tone(15_000.0, 75_000.0, 0.7),), start_phase=0.3)
    t = ifnoise.noisy_edge_times(sig, 0.02, math.inf)
    ref = signals.edge_times(sig, 0.02)
    assert t.size == ref.size
    bound = 5.81 / (ifnoise.OVERSAMPLE ** 4 * 225_000.0)
    assert bound < 0.1 / 84e6
    assert np.max(np.abs(t - ref)) < bound


def test_hysteresis_delays_each_edge_by_asin():
    # With threshold +H a rising edge is where sin(2 pi phase) = H on the rising side, i.e. at phase
    # n + asin(H) / (2 pi) (math.asin): the edges of the same signal with its phase moved back by that.
    h = 0.2
    sig = FmSignal(if_hz=100_000.0, tones=(Tone(3000.0, 20_000.0, 1.1),), start_phase=0.6)
    late = FmSignal(if_hz=sig.if_hz, tones=sig.tones, start_phase=sig.start_phase - math.asin(h) / (2 * math.pi))
    t = ifnoise.noisy_edge_times(sig, 0.01, math.inf, hysteresis=h)
    ref = signals.edge_times(late, 0.01)
    assert t.size == ref.size
    # bound as above with M = 1: 5.81 / (16^4 * 80 kHz) = 1.1 ns; the curvature of the sine at H
    # is nonzero, still within that fourth-order bound
    assert np.max(np.abs(t - ref)) < 5.81 / (ifnoise.OVERSAMPLE ** 4 * 80_000.0)


def test_noise_alone_crosses_at_rices_rate():
    # Rice's formula for the expected rate of upward zero crossings of a stationary Gaussian process
    # (Rice, "Mathematical analysis of random noise", BSTJ 1944-45, from memory):
    # sqrt(integral f^2 S(f) df / integral S(f) df); for a flat band f0 +- B/2 that is
    # sqrt(f0^2 + B^2 / 12). Here B = 160 kHz about f0 = 100 kHz: 110.2 kHz, 10 % above the carrier's
    # 100 kHz. The carrier is left 60 dB under the noise (its effect on the rate is of the order of
    # its power, 1e-6).
    f0, bw, span, parts = 100_000.0, 160_000.0, 0.5, 10
    sig = FmSignal(if_hz=f0, tones=(), start_phase=0.0)
    t = ifnoise.noisy_edge_times(sig, span, -60.0, bw, np.random.default_rng(31))
    assert np.all(np.diff(t) > 0) and t[0] >= 0 and t[-1] < span
    # Tolerance from the sample itself: 10 segments of 50 ms (the noise decorrelates within ~1 / B =
    # 6 us, so the segments are independent); the mean rate must lie within 5 standard errors.
    seg = np.diff(np.searchsorted(t, np.linspace(0, span, parts + 1))) / (span / parts)
    rice = math.sqrt(f0 ** 2 + bw ** 2 / 12)
    se = float(np.std(seg, ddof=1) / math.sqrt(parts))
    assert se < 0.01 * rice                  # premise: fine enough to tell 110.2 kHz from 100 kHz
    assert abs(float(np.mean(seg)) - rice) < 5 * se


def test_hysteresis_never_adds_edges():
    # Property of the comparator (no outside reference): between two rising edges with hysteresis
    # H2 the input fell below -H2 and rose to +H2, so a comparator with H1 < H2 had a rising edge in
    # between: count(H2) <= count(H1) + 1 (the +1 for the start of the span). At 0 dB CNR in a wide
    # band a plain comparator sees extra wiggle crossings that hysteresis removes.
    sig = FmSignal(if_hz=100_000.0, tones=(Tone(1000.0, 17_500.0, 0.3),), start_phase=0.1)
    counts = []
    for h in (0.0, 0.05, 0.1, 0.2):
        t = ifnoise.noisy_edge_times(sig, 0.05, 0.0, 100_000.0, np.random.default_rng(9), hysteresis=h)
        assert np.all(np.diff(t) > 0) and t[0] >= 0 and t[-1] < 0.05
        counts.append(t.size)
    assert all(b <= a + 1 for a, b in zip(counts, counts[1:]))
    assert counts[-1] < counts[0]


def test_edge_jitter_at_high_cnr():
    cnr_db, span = 40.0, 0.05
    sig = FmSignal(if_hz=300_000.0, tones=(Tone(15_000.0, 75_000.0, 2.0),), start_phase=0.8)
    clean = signals.edge_times(sig, span)
    noisy = ifnoise.noisy_edge_times(sig, span, cnr_db, None, np.random.default_rng(21))
    # at 40 dB no crossing is gained or lost (a click needs the noise to reach the carrier: 100 sigma)
    assert noisy.size == clean.size
    cnr = 10 ** (cnr_db / 10)
    z = (noisy - clean) * 2 * np.pi * sig.freq(clean) * np.sqrt(2 * cnr)   # deviation / sigma_t(f)
    # Sample size: n = 15000 edges, but the noise is band-limited to B = 180 kHz (Carson), so edges
    # 1/f apart are correlated by up to sinc(B dt). Var of the sample variance is 2 sigma^4 / n times
    # sum_k rho_k^2 <= 1 / a, a = B / f_max (Poisson summation: sum over all k of sinc^2(a k) = 1 / a
    # for a <= 1; f_max = 375 kHz is the densest edge spacing): n_eff >= n a = 7200. Relative std of
    # the sample std: 1 / sqrt(2 n_eff) = 0.83 %; 5 sigma = 4.2 %; the first-order model's own error
    # is O(1 / CNR) = 1e-4 and the refinement error (< 0.4 ns) against sigma_t ~ 3.8 ns adds < 0.6 % in
    # quadrature: tolerance 5 %. The mean has std 1 / sqrt(n_eff) = 0.012: 5 sigma = 0.06.
    n_eff = clean.size * (180_000.0 / 375_000.0)
    assert n_eff > 7000
    assert float(np.std(z)) == pytest.approx(1.0, rel=0.05)
    assert abs(float(np.mean(z))) < 0.06


# --- the FM threshold on the whole floating-point chain -------------------------------------------

SPEC_TOML = """
name = "thresh"
[signal]
if_hz = 100000
deviation_hz = 25000
audio_hz = 5000
[output]
rate_hz = 16000
format = "s16"
[target]
core = "cortex-m4"
cpu_hz = 168_000_000
timer_hz = 168_000_000
timer_bits = 32
capture_dma = true
capture_prescalers = [1]
"""
SPAN_S = 0.3            # measured span after LEAD_S
SEEDS = (101, 202)
ABOVE = (13.0, 16.0, 19.0, 22.0, 25.0)
BELOW = 3.0


@pytest.fixture(scope="module")
def chain():
    """The design (no de-emphasis, a 168 MHz timer), the test tone's deviation, the audio band W
    and the Carson band B_T = 2 (deviation + W) in which the formula defines the CNR."""
    d = edgetally.design(edgetally.parse_spec(tomllib.loads(SPEC_TOML)))
    dev = schemes.TEST_LEVEL * d.full_scale_hz
    return d, dev, d.audio_hz, 2.0 * (dev + d.audio_hz)


def _measure(d, dev, band_w, noise_bw, cnr_db, seed) -> float:
    rng = np.random.default_rng(seed)
    sig = signals.test_tone(d.if_hz, d.full_scale_hz, schemes.TEST_LEVEL, standard.PREFERRED_TONE_HZ, rng)
    assert sig.peak_deviation() == pytest.approx(dev)
    times = ifnoise.noisy_edge_times(sig, LEAD_S + SPAN_S, cnr_db, noise_bw, rng)
    stamps = signals.capture(times[::d.front.prescale], d.rates.timer_hz, d.front.timer_bits)
    out = reference.run(d, stamps)
    skip = int(round(LEAD_S * d.rates.out_hz))
    return metrics.sinad_db(out[skip:], d.rates.out_hz, standard.PREFERRED_TONE_HZ, standard.BAND_LOW_HZ, band_w)


def band_correction_db(d, band_w: float, noise_bw: float) -> float:
    """How much the measured band changes the formula's SNR, in dB (positive: less noise measured).

    The formula counts the discriminator's output noise, two-sided PSD c f^2 for |f| <= B_T / 2,
    over |f| <= W flat. The chain measures it after its own filters, relative to the tone at 1 kHz:
    the phase difference per grid period (a boxcar of the frequency: sinc(f / fg)), the CIC
    (Hogenauer's magnitude, written out here), decimation to fo (the noise at f + k fo folds onto f),
    the output IIR (scipy.signal.sosfreqz), counted over [BAND_LOW_HZ, W]. The ratio of the noise
    so counted to c * 2 W^3 / 3, both relative to the tone's gain, is the correction."""
    fg, fo, r, n = d.rates.grid_hz, d.rates.out_hz, d.cic.ratio, d.cic.order

    def pre(f):   # boxcar of the grid period times the CIC, both at the grid rate
        x = np.pi * np.asarray(f, dtype=float) / fg
        s = np.sin(x)
        safe = np.where(np.abs(s) < 1e-12, 1.0, s)
        cic_mag = np.where(np.abs(s) < 1e-12, 1.0, np.abs(np.sin(r * x) / (r * safe))) ** n
        return cic_mag * np.abs(np.sinc(np.asarray(f, dtype=float) / fg))

    sos = np.array([list(s.float_sos) for s in d.filters.sections])
    f = np.linspace(standard.BAND_LOW_HZ, band_w, 4001)
    _, h_out = ssig.sosfreqz(sos, worN=f, fs=fo)
    folded = np.zeros_like(f)
    for k in range(-int(fg / fo) - 2, int(fg / fo) + 3):
        fk = f + k * fo
        folded += pre(fk) ** 2 * fk ** 2 * (np.abs(fk) <= noise_bw / 2)
    noise = np.trapezoid(np.abs(h_out) ** 2 * folded, f)
    _, h_tone = ssig.sosfreqz(sos, worN=[standard.PREFERRED_TONE_HZ], fs=fo)
    tone_gain = abs(h_tone[0]) ** 2 * pre(standard.PREFERRED_TONE_HZ) ** 2
    return float(-10 * np.log10(noise / (tone_gain * band_w ** 3 / 3)))


def test_fm_threshold_and_above_threshold_formula(chain):
    d, dev, band_w, noise_bw = chain
    assert all(s.role != "deemphasis" for s in d.filters.sections)    # premise: no de-emphasis in the chain
    corr = band_correction_db(d, band_w, noise_bw)
    # The chain's own floor (timer quantisation, interpolation, filters, harmonic distortion) must be
    # far below the noise at the highest CNR, so that it is not the limit: 20 dB below adds < 0.05 dB.
    # That also makes the SINAD measured below the SNR of the formula (distortion is in the floor).
    floor = min(_measure(d, dev, band_w, noise_bw, math.inf, s) for s in SEEDS)
    assert floor > ifnoise.above_threshold_snr_db(max(ABOVE), dev, band_w) + corr + 20.0
    # Scatter of one measurement: the noise power is summed over K = W T = 5000 * 0.3 = 1500 bins of a
    # Hann periodogram; the f^2 shape leaves (5/9) K effective bins and the Hann correlation divides
    # by 1.94: K_eff = 430, relative std 4.8 %, 0.21 dB; the mean of two seeds 0.15 dB. The
    # above-threshold model's own error is O(1 / CNR): 5 % (0.2 dB) at 13 dB, and the clicks there
    # (Rice, from memory: rate ~ mean |deviation| exp(-CNR) ~ 2e-5 per second) add nothing. So the
    # band-matched prediction must hold to 5 sigma + 0.2 dB < 1 dB.
    for cnr_db in ABOVE:
        snr = float(np.mean([_measure(d, dev, band_w, noise_bw, cnr_db, s) for s in SEEDS]))
        formula = ifnoise.above_threshold_snr_db(cnr_db, dev, band_w)
        assert abs(snr - formula) < 3.0, (cnr_db, formula, snr)            # the acceptance
        assert abs(snr - (formula + corr)) < 1.0, (cnr_db, formula + corr, snr)
    # Below threshold (3 dB CNR) clicks dominate: the formula (with the same band correction) says
    # 27 dB, a click estimate (Rice, from memory: ~2000 clicks/s, each a unit-area impulse of
    # frequency, flat PSD, 2 N W in the band) about 9 dB. A chain without clicks would sit within
    # 1 dB of the formula as above; 10 dB short is far from both.
    snr = float(np.mean([_measure(d, dev, band_w, noise_bw, BELOW, s) for s in SEEDS]))
    assert snr < ifnoise.above_threshold_snr_db(BELOW, dev, band_w) + corr - 10.0


def test_formula_algebra():
    # 3 beta^2 (beta + 1) CNR (Haykin): beta = 5 gives 3 * 25 * 6 = 450 times the CNR, i.e. +26.53 dB
    assert ifnoise.above_threshold_snr_db(10.0, 25_000.0, 5000.0) == pytest.approx(10 + 10 * math.log10(450.0), abs=1e-12)
    # Carson's rule 2 (deviation + highest tone): 2 (75 + 15) kHz = 180 kHz (Haykin's FM broadcast
    # example gives 180 kHz for 75 kHz deviation and 15 kHz audio; from memory)
    sig = FmSignal(if_hz=300_000.0, tones=(Tone(15_000.0, 60_000.0), Tone(5000.0, 15_000.0)))
    assert ifnoise.carson_bandwidth_hz(sig) == pytest.approx(180_000.0)
