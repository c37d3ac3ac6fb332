"""Quality metrics (edgetally.metrics) checked against signals whose figures are known by construction
and against scipy.signal.periodogram.

Outside references used here:
- Definitions of SINAD, SNR and THD for a test tone (common practice, no source): SINAD = tone /
  (noise + distortion), SNR = tone / noise, THD = sum of harmonic powers / tone power, THD in percent
  = 100 sqrt(that ratio).
- scipy.signal.periodogram (scaling="density", one-sided) as an independent band-power estimator.
- Statistics of a periodogram of Gaussian white noise (derived below, textbook facts of the DFT of
  Gaussian noise: bins are complex Gaussian, cov(|X_k|^2, |X_l|^2) = |E X_k X_l*|^2).

The synthetic record: fs = 48 kHz, N = 48000 samples (1 s, so 1 kHz holds exactly 1000 periods),
tone amplitude A = 1, second harmonic 1 % (0.01), third 0.5 % (0.005), white Gaussian noise of
standard deviation sigma = 0.01 at every frequency, band [50 Hz, 15 kHz].

Expected values of the estimators (exact for the model, up to the O(m/K) terms noted):
- Hann periodogram of white noise: E|X_k|^2 = sigma^2 sum(w^2) for every bin, so band_power over K
  bins has mean 2 K sigma^2 / N exactly (K counted on numpy.fft.rfftfreq's grid).
- Fitting m sinusoids by least squares removes, on average, the noise's projection on them: each
  fitted sinusoid takes 2 sigma^2 / N of power (its cosine and sine coefficients each have variance
  2 sigma^2 / N), about one bin's worth, so the in-band residual has mean 2 (K - m) sigma^2 / N
  (m = 1 for SINAD, 5 for SNR here). The correction is m/K = 3e-4, far inside the tolerances.
- A fitted harmonic power has mean (true power + 2 sigma^2 / N) (the two coefficient variances).

Standard deviations (the tolerances are 5 of them; a 5-sigma Gaussian excursion has probability 6e-7):
- Noise power over K contiguous bins of a Hann periodogram: the Hann window's squared weights are
  3/8 - (1/2) cos + (1/8) cos 2, so neighbouring bins are correlated with coefficients -(1/4)/(3/8) =
  -2/3 and (1/16)/(3/8) = 1/6; var(sum)/mean^2 = (1 + 2 (4/9) + 2 (1/36)) / K = (35/18) / K, i.e.
  K_eff = K / 1.944 (a little more than the 1.5-bin equivalent noise bandwidth suggests).
  K = 14951 gives a relative standard deviation of 0.0114 (observed 0.0117 over 400 records while
  writing this test).
- Cross term harmonics x noise in the SINAD residual: (2 / sum w^2) sum w^2 h n has variance
  4 sigma^2 p_h sum(w^4) / (sum w^2)^2 = (70/9) sigma^2 p_h / N (sum w^2 = 3N/8, sum w^4 = 35N/128).
- Tone power (a^2 + b^2)/2: relative standard deviation 2 sqrt(2 sigma^2 / N) / A = 4.1e-5.
- Sum of harmonic powers: variance (2 sigma^2 / N) sum(a_h^2) (a_h the true amplitudes) plus, for
  each harmonic with no power, (2 sigma^2 / N)^2 (a chi-square with two degrees of freedom).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from edgetally.measure import metrics

FS = 48000.0
N = 48000
TONE = 1000.0
BAND = (50.0, 15000.0)
A, H2, H3 = 1.0, 0.01, 0.005
SIGMA = 0.01
EPS = 2.0 ** -52                       # spacing of doubles near 1 (IEEE 754 binary64)
DB = 10 / math.log(10)                 # d(10 log10 p) / d(ln p)


def _tones(n, fs, parts):
    """Sum of a cos(2 pi f k / fs + phi) for (f, a, phi) in parts, k = 0..n-1."""
    k = np.arange(n)
    return sum(a * np.cos(2 * np.pi * f / fs * k + phi) for f, a, phi in parts)


def _bins_in(n, fs, lo, hi):
    f = np.fft.rfftfreq(n, 1 / fs)
    return int(np.sum((f >= lo) & (f <= hi)))


def _up_down_db(rel):
    """A symmetric dB tolerance covering a relative error of +-rel on a power."""
    return -10 * math.log10(1 - rel)


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_figures_of_tone_with_known_distortion_and_noise(seed):
    rng = np.random.default_rng(seed)
    x = 0.2 + _tones(N, FS, [(TONE, A, 0.4), (2 * TONE, H2, 1.1), (3 * TONE, H3, -2.0)])
    x = x + SIGMA * rng.standard_normal(N)
    r = metrics.tone_analysis(x, FS, TONE, *BAND, harmonics=5)
    assert r.harmonic_orders == (2, 3, 4, 5)            # 2..5 kHz all below 15 kHz and fs/2

    K = _bins_in(N, FS, *BAND)
    assert K == 14951
    bin_p = 2 * SIGMA ** 2 / N                          # mean noise power per bin and per fitted sinusoid
    p_tone = A ** 2 / 2
    p_h = (H2 ** 2 + H3 ** 2) / 2                       # 6.25e-5: THD 1.118 %, -39.03 dB
    s_tone = 2 * math.sqrt(bin_p) / A                   # relative std of the tone power, 4.1e-5
    s_noise = math.sqrt(35 / 18 / K)                    # relative std of a K-bin Hann power sum, 0.0114

    # SNR: tone / in-band residual of the joint fit (5 sinusoids removed).
    noise = bin_p * (K - 5)
    rel = 5 * math.hypot(s_noise, s_tone)
    assert r.noise_power == pytest.approx(noise, rel=rel)
    assert r.snr_db == pytest.approx(10 * math.log10(p_tone / noise), abs=_up_down_db(rel))   # ~39.06 dB +-0.25

    # SINAD: tone / (noise with only the tone removed + harmonics), plus the harmonics x noise term.
    nad = bin_p * (K - 1) + p_h
    s_nad = math.sqrt((s_noise * bin_p * (K - 1)) ** 2 + 70 / 9 * SIGMA ** 2 * p_h / N) / nad
    rel = 5 * math.hypot(s_nad, s_tone)
    assert r.sinad_db == pytest.approx(10 * math.log10(p_tone / nad), abs=_up_down_db(rel))   # ~36.04 dB +-0.21
    # ... and it is the established figure itself (same computation, floating point only).
    assert r.sinad_db == metrics.sinad_db(x, FS, TONE, *BAND)

    # THD: fitted harmonic powers (4 fitted, 2 of them empty) over the fitted tone.
    harm = p_h + 4 * bin_p
    s_harm = math.sqrt(bin_p * 2 * (H2 ** 2 + H3 ** 2) + 2 * bin_p ** 2) / harm
    rel = 5 * math.hypot(s_harm, s_tone)
    assert r.harmonic_power == pytest.approx(harm, rel=rel)
    assert r.thd_db == pytest.approx(10 * math.log10(harm / p_tone), abs=_up_down_db(rel))    # ~-39.03 dB +-0.26
    # percent = 100 sqrt(ratio): half the relative error of the power ratio
    assert r.thd_percent == pytest.approx(100 * math.sqrt(harm / p_tone), rel=rel / 2)

    # Level: the peak amplitude; each coefficient has std sqrt(2 sigma^2 / N) = 6.5e-5.
    assert r.level == pytest.approx(A, abs=5 * math.sqrt(bin_p))
    assert r.tone_power == pytest.approx(r.level ** 2 / 2, rel=1e-12)


def _ls_tolerance_db(n, fs, freqs, a_max, a_min):
    """dB bound on a ratio of two fitted powers of exact sinusoids, from double-precision least squares.

    A backward-stable solver (LAPACK's SVD-based gelsd behind numpy.linalg.lstsq) returns coefficients
    with relative error <= c kappa eps (zero residual, so kappa and not kappa^2), kappa the condition
    number of the basis; c <= n is the worst-case growth of the backward error. A coefficient of size
    a_min then has relative error <= n kappa eps a_max / a_min. The test signal itself departs from
    exact sinusoids by the rounding of its arguments, <= eps (w n + 1) per sample and per component,
    which moves a coefficient by at most twice that (projection onto a sinusoid of mean square 1/2).
    A power is off by twice the relative amplitude error, a ratio of two powers by the sum."""
    k = np.arange(n)
    cols = [np.ones(n)] + [g(2 * np.pi * f / fs * k) for f in freqs for g in (np.cos, np.sin)]
    kappa = np.linalg.cond(np.column_stack(cols))
    rel = n * kappa * EPS * a_max / a_min
    rel += 2 * EPS * (2 * np.pi * max(freqs) / fs * n + 1) * len(freqs) * a_max / a_min
    return DB * 4 * rel


@pytest.mark.parametrize("n", [48000, 47777])   # 1000 whole periods, and 995.35 periods
def test_thd_of_exact_sinusoids_without_noise(n):
    parts = [(TONE, A, 0.4), (2 * TONE, H2, 1.1), (3 * TONE, H3, -2.0)]
    x = 0.2 + _tones(n, FS, parts)
    r = metrics.tone_analysis(x, FS, TONE, *BAND, harmonics=5)
    thd = 10 * math.log10((H2 ** 2 + H3 ** 2) / A ** 2)         # -39.0309 dB, 1.1180 %
    tol = _ls_tolerance_db(n, FS, [TONE * k for k in range(1, 6)], A, H3)
    assert tol < 1e-6                                            # ~3e-7 dB: the check is sharp
    assert r.thd_db == pytest.approx(thd, abs=tol)
    assert r.thd_percent == pytest.approx(100 * math.sqrt((H2 ** 2 + H3 ** 2)) / A, rel=tol / DB)
    assert r.level == pytest.approx(A, rel=tol / DB)
    # No noise: the joint fit leaves only rounding, at least ~200 dB below the tone (see
    # test_pure_tone_has_large_finite_sinad for the bound).
    assert r.snr_db > 200
    assert r.sinad_db == metrics.sinad_db(x, FS, TONE, *BAND)


def test_sinad_of_exact_sinusoids_without_noise():
    # Whole periods: the harmonics are orthogonal to DC and the tone, so the DC + tone fit leaves
    # exactly the harmonics, and SINAD = tone / harmonics = -THD. band_power of a sinusoid well inside
    # the band returns its power up to the window term sum(w^2 cos(2 w_h n + 2 phi)) / sum(w^2), which
    # is evaluated here (numpy.hanning); the LS bound covers the fit.
    x = 0.2 + _tones(N, FS, [(TONE, A, 0.4), (2 * TONE, H2, 1.1), (3 * TONE, H3, -2.0)])
    w2 = np.hanning(N) ** 2
    k = np.arange(N)
    leak = max(abs(np.sum(w2 * np.exp(2j * (2 * np.pi * f / FS * k)))) / np.sum(w2) for f in (2 * TONE, 3 * TONE))
    tol = _ls_tolerance_db(N, FS, [TONE], A, H3) + DB * (leak + 1e-12)   # 1e-12: sums of 48000 terms
    r = metrics.tone_analysis(x, FS, TONE, *BAND)
    assert r.sinad_db == pytest.approx(10 * math.log10(A ** 2 / (H2 ** 2 + H3 ** 2)), abs=tol)


def test_pure_tone_has_large_finite_sinad():
    # Zero noise, zero distortion: every in-band residual is rounding. Decided behaviour: a finite
    # figure, never inf/nan or a division by zero; every power in a ratio is floored at
    # eps^2 mean(x^2) (metrics module docstring), so SINAD <= 10 log10(p_tone / (eps^2 mean x^2)).
    # Lower bound: the residual is at most the rounding of the sinusoids' arguments (test signal and
    # fit basis each <= eps (w n + 1) per sample, a further 4 eps for cos/sin and the fit), so
    # |r| <= A eps (2 (w N + 1) + 4), and band_power(r) <= max r^2 (Hann-weighted mean of r^2).
    a = 0.5
    x = _tones(N, FS, [(TONE, a, 0.4)])
    r = metrics.tone_analysis(x, FS, TONE, *BAND)
    r_max = a * EPS * (2 * (2 * np.pi * TONE / FS * N + 1) + 4)
    low = 10 * math.log10((a ** 2 / 2) / r_max ** 2)                 # 228 dB
    ceiling = 10 * math.log10((a ** 2 / 2) / (EPS ** 2 * np.mean(x ** 2)))   # 313.1 dB
    for v in (r.sinad_db, r.snr_db):
        assert math.isfinite(v)
        assert low <= v <= ceiling + 1e-9
    assert -ceiling - 1e-9 <= r.thd_db <= -low
    assert r.thd_percent < 100 * 10 ** (-low / 20)


def test_harmonics_above_band_or_nyquist_are_not_fitted():
    # Above band_hi: 1 kHz tone, band to 2.5 kHz -> only the 2nd is fitted. A 3rd at 3 kHz present in
    # the signal is then not counted as a harmonic (with whole periods it is orthogonal to the basis,
    # so the fitted 2nd is exact to the LS bound).
    x = _tones(N, FS, [(TONE, A, 0.4), (2 * TONE, H2, 1.1), (3 * TONE, H3, -2.0)])
    r = metrics.tone_analysis(x, FS, TONE, 50.0, 2500.0, harmonics=5)
    assert r.harmonic_orders == (2,)
    tol = _ls_tolerance_db(N, FS, [TONE, 2 * TONE], A, H2) / DB
    assert r.harmonic_power == pytest.approx(H2 ** 2 / 2, rel=tol)
    # strictly below band_hi: with the band ending exactly at 3 kHz the 3rd is still not fitted
    assert metrics.tone_analysis(x, FS, TONE, 50.0, 3000.0).harmonic_orders == (2,)

    # Above Nyquist: a 7 kHz tone, band_hi beyond fs/2. The 4th harmonic (28 kHz) would alias to
    # 20 kHz; it is not fitted, so a 20 kHz component counts as noise, with its whole power
    # (band_power over [50 Hz, fs/2]: a sinusoid thousands of bins from both band edges; Hann
    # sidelobes fall 18 dB per octave, so the leakage is at the level of rounding).
    p20 = 0.002
    y = _tones(N, FS, [(7000.0, A, 0.3), (14000.0, H2, 0.9), (20000.0, math.sqrt(2 * p20), 0.5)])
    r = metrics.tone_analysis(y, FS, 7000.0, 50.0, 40000.0, harmonics=5)
    assert r.harmonic_orders == (2, 3)
    assert r.harmonic_power == pytest.approx(H2 ** 2 / 2, rel=1e-6)
    assert r.noise_power == pytest.approx(p20, rel=1e-9)


def test_floors_and_refusals():
    x = _tones(N, FS, [(TONE, A, 0.0)])
    # No harmonic below band_hi: harmonic power is 0, THD sits at the float floor eps^2 mean(x^2) /
    # p_tone = eps^2 (mean(x^2) = p_tone for a pure tone of whole periods): 20 log10(2^-52) = -313.07 dB.
    r = metrics.tone_analysis(x, FS, TONE, 50.0, 1500.0)
    assert r.harmonic_orders == () and r.harmonic_power == 0.0 and r.thd_percent == 0.0
    assert r.thd_db == pytest.approx(20 * math.log10(EPS), abs=1e-9)
    # A record of zeros has no tone: refused.
    with pytest.raises(ValueError, match="zeros"):
        metrics.tone_analysis(np.zeros(N), FS, TONE, *BAND)
    # The tone must lie strictly inside (0, fs/2): at DC or Nyquist the sine column vanishes.
    for bad in (0.0, FS / 2, -5.0):
        with pytest.raises(ValueError, match="tone_hz"):
            metrics.tone_analysis(x, FS, bad, *BAND)
    # Exact level of an exact sinusoid: 20 log10(0.25) = -12.0412 dB.
    q = _tones(N, FS, [(TONE, 0.25, 1.0)])
    assert 20 * math.log10(metrics.tone_analysis(q, FS, TONE, *BAND).level) == pytest.approx(
        20 * math.log10(0.25), abs=_ls_tolerance_db(N, FS, [TONE], 1.0, 1.0))


# --- band_power against scipy.signal.periodogram ----------------------------------------------------

def _record(n, seed):
    rng = np.random.default_rng(seed)
    return 0.3 + _tones(n, FS, [(1234.5, 1.0, 0.2)]) + 0.05 * rng.standard_normal(n)


def _scipy_band(x, window, lo, hi):
    """Integral of scipy's one-sided density over [lo, hi]: sum(density) * df. detrend=False because
    scipy removes the mean by default and band_power does not."""
    f, pxx = signal.periodogram(x, FS, window=window, detrend=False, scaling="density")
    sel = (f >= lo) & (f <= hi)
    return float(np.sum(pxx[sel]) * (f[1] - f[0])), pxx


@pytest.mark.parametrize("n", [4096, 9999])
def test_band_power_equals_scipy_periodogram_with_the_same_window(n):
    # scipy.signal.periodogram with scaling="density": pxx = |X_k|^2 / (fs sum w^2), doubled for every
    # one-sided bin but DC and (even n) Nyquist; times df = fs/n that is 2 |X_k|^2 / (n sum w^2), which
    # is band_power's per-bin scale. With the same window (numpy's symmetric Hann) the two are the same
    # sum; they differ only by rounding of two FFT implementations (~log2(n) eps): 1e-12 relative.
    x = _record(n, 5)
    want, _ = _scipy_band(x, np.hanning(n), 300.0, 3400.0)
    assert metrics.band_power(x, FS, 300.0, 3400.0) == pytest.approx(want, rel=1e-12)
    # The one difference: band_power doubles the DC bin too (and the Nyquist bin), so a band from
    # 0 Hz exceeds scipy's integral by exactly one more DC bin: pxx[0] * df.
    got_dc = metrics.band_power(x, FS, 0.0, 3400.0)
    want_dc, pxx = _scipy_band(x, np.hanning(n), 0.0, 3400.0)
    assert got_dc == pytest.approx(want_dc + pxx[0] * FS / n, rel=1e-12)
    assert pxx[0] * FS / n > 1e-4 * want_dc                       # the 0.3 DC makes this visible


@pytest.mark.parametrize("n", [4096, 9999])
def test_band_power_close_to_scipy_periodogram_with_periodic_hann(n):
    # window="hann" in scipy is the periodic ("DFT-even") Hann, 0.5 - 0.5 cos(2 pi k / n); numpy's
    # hanning is the symmetric one, 0.5 - 0.5 cos(2 pi k / (n - 1)). Bound on the difference (band
    # without DC and Nyquist): with S_i = sqrt(P_i / c_i) the root band energies (c_i = 2 / (n sum w_i^2)),
    # the triangle inequality and Parseval give |S_1 - S_2| <= ||band part of DFT((w_1 - w_2) x)||
    # <= sqrt(n sum(((w_1 - w_2) x)^2) / 2) (the positive bins hold at most half the DFT energy).
    x = _record(n, 6)
    lo, hi = 300.0, 3400.0
    w1, w2 = np.hanning(n), signal.get_window("hann", n)
    got = metrics.band_power(x, FS, lo, hi)
    want, _ = _scipy_band(x, "hann", lo, hi)
    c1, c2 = 2 / (n * np.sum(w1 ** 2)), 2 / (n * np.sum(w2 ** 2))
    d = math.sqrt(n * np.sum(((w1 - w2) * x) ** 2) / 2)
    s1, s2 = math.sqrt(got / c1), math.sqrt(want / c2)
    assert abs(s1 - s2) <= d * (1 + 1e-12)
    # The bound is meaningful (about pi / n relative to the band's root energy): the two powers differ
    # by less than 0.3 % for n = 4096, so a wrong scale factor (2x, sum w vs sum w^2) would fail.
    rel = (1 + 2 * d / s2 + (d / s2) ** 2) * (1 + abs(c1 / c2 - 1)) - 1
    assert rel < 3e-3
    assert got == pytest.approx(want, rel=rel)


def test_sinad_db_floors_as_tone_analysis_and_gives_minus_inf_for_zeros():
    # sinad_db follows the module's float floor (eps^2 mean(x^2)): a noiseless tone gives the same
    # large finite figure as tone_analysis; a constant record (no tone) the floor's 0 dB ratio, never
    # a division by zero; a record of zeros (a muted output) -inf, where tone_analysis refuses it.
    x = _tones(N, FS, [(TONE, 0.5, 0.4)])
    assert metrics.sinad_db(x, FS, TONE, *BAND) == metrics.tone_analysis(x, FS, TONE, *BAND).sinad_db
    assert math.isfinite(metrics.sinad_db(x, FS, TONE, *BAND))
    assert metrics.sinad_db(np.full(N, 128.0), FS, TONE, *BAND) == pytest.approx(0.0, abs=1e-9)
    assert metrics.sinad_db(np.zeros(N), FS, TONE, *BAND) == -math.inf
