"""The de-emphasis section of real designs (spec -> edgetally.design) against Recommendation ITU-R BS.450.

Outside references used here:
- Recommendation ITU-R BS.450: de-emphasis time constants 50 us and 75 us; their corners
  1/(2 pi tau) = 3183.1 Hz and 2122.1 Hz (values as quoted in DESIGN.md sec. 4, published to 0.1 Hz).
- The de-emphasis network is the first-order low-pass H_a(f) = 1 / (1 + j 2 pi f tau),
  |H_a|^2 = 1 / (1 + (2 pi f tau)^2), 10 log10(2) = 3.0103 dB down at its corner (common practice,
  no source: the RC network the time constant describes).
- The bilinear transform with pre-warping (e.g. Oppenheim & Schafer, Discrete-Time Signal Processing,
  sec. on the bilinear transformation; from memory): s = (2 pi fc / tan(pi fc / fs)) (1 - z^-1) /
  (1 + z^-1) maps the analog response at f_a to the digital one at f with
  f_a = fc tan(pi f / fs) / tan(pi fc / fs), exact at f = fc and at DC.
- scipy.signal.freqz as the evaluator of the integer section's response.

Which transform edgetally uses (codegen/iir.py, deemphasis_sos, called by the planner through
iir.output_filters): the bilinear transform pre-warped at the corner, k = tan(pi fc / fs),
b0 = b1 = k / (1 + k), a1 = (k - 1) / (k + 1). Substituting z = e^{jw} gives exactly
H(f) = 1 / (1 + j tan(pi f / fs) / k), i.e. the analog response evaluated at the warped frequency
f_w = fc tan(pi f / fs) / k. So:
- against the analog curve at f_w the digital section may differ only by coefficient rounding;
- against the analog curve at f it departs by D(f) = 10 log10(1 + (f/fc)^2) - 10 log10(1 + (f_w/fc)^2)
  dB, which has the sign of (fc - f) (tan(x)/x increases on (0, pi/2), so f_w < f below the corner and
  f_w > f above): the digital response is a little high below the corner (+0.010 dB at 1 kHz for 50 us)
  and falls faster above it, reaching zero at fs/2 (-3.43 dB at 15 kHz for 50 us, -3.56 dB for 75 us,
  at 48 kHz). That is the transform's, not a defect of the design.

Coefficient rounding bound: a1 is stored as an integer in Q(coef_bits), off by at most
delta = 2^-(coef_bits + 1) (checked below). Normalised to its DC gain the section is
(1 + a1)(1 + z^-1) / (2 (1 + a1 z^-1)), which depends on a1 alone (b0 = b1 carry only the gain and the
change of format), and equals the pre-warped bilinear design with k' = (1 + a1') / (1 - a1'). With
|dk/da1| = 2 / (1 - a1)^2, |k' - k| <= dk = 2 delta / (1 - |a1| - delta)^2. The response in dB,
-10 log10(1 + t^2 e^{-2 ln k}) with t = tan(pi f / fs), has |d/d ln k| <= 20 / ln 10, so it moves by at
most (20 / ln 10) dk / (k - dk) dB at any f; the corner (fs / pi) atan(k) moves by at most (fs / pi) dk.
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
from scipy import optimize, signal

import edgetally

DB = 20 / math.log(10)                 # d(20 log10 g) / d(ln g)
EVAL_DB = 1e-12                        # double-precision evaluation of freqz / tan / log10 (~1e-14 dB)
PUBLISHED_ROUNDING_HZ = 0.05           # the published corners are given to 0.1 Hz

# A 75 us variant of the campus receiver (examples/campus_fm.toml with 75 us de-emphasis).
CAMPUS_75US = """
name = "campus75"

[signal]
if_hz = 300000
deviation_hz = 75000
audio_hz = 15000
deemphasis_us = 75

[output]
rate_hz = 48000
format = "s16"
full_scale_hz = 75000

[target]
core = "cortex-m4"
cpu_hz = 168_000_000
timer_hz = 84_000_000
timer_bits = 32
capture_dma = true
cpu_budget = 0.5

[fixed]
droop_limit_db = 1.0
"""

# (which design, tau in s, the corner published in Recommendation ITU-R BS.450)
CASES = [("campus_fm", 50e-6, 3183.1), ("campus_75us", 75e-6, 2122.1)]


@pytest.fixture(scope="module")
def built(designs):
    """The two designs: campus_fm.toml through load_spec (built once by conftest), and the 75 us text
    through parse_spec."""
    return {"campus_fm": designs["campus_fm"],
            "campus_75us": edgetally.design(edgetally.parse_spec(tomllib.loads(CAMPUS_75US)))}


def _deemphasis(d):
    """(section, its input format q_in) of the one de-emphasis section."""
    secs = d.filters.sections
    idx = [k for k, s in enumerate(secs) if s.role == "deemphasis"]
    assert len(idx) == 1
    k = idx[0]
    q_in = d.scale.q if k == 0 else secs[k - 1].q_out
    return secs[k], q_in


def _normalised_db(sec, coef_bits, f, fs):
    """20 log10 |H(f) / H(0)| of the integer section, by scipy.signal.freqz on int / 2^coef_bits."""
    sc = 2.0 ** coef_bits
    b = [sec.b0 / sc, sec.b1 / sc, sec.b2 / sc]
    a = [1.0, sec.a1 / sc, sec.a2 / sc]
    _, h = signal.freqz(b, a, worN=np.concatenate([[0.0], np.atleast_1d(f)]), fs=fs)
    return 20 * np.log10(np.abs(h[1:]) / np.abs(h[0]))


def _analog_db(f, tau):
    return -10 * np.log10(1 + (2 * np.pi * np.asarray(f) * tau) ** 2)


def _rounding(sec, coef_bits, tau, fs):
    """(k of the exact design, bound dk on |k' - k|) from the rounding of a1 (module docstring)."""
    delta = 2.0 ** -(coef_bits + 1)
    k = math.tan(1 / (2 * tau * fs))                      # tan(pi fc / fs), fc = 1 / (2 pi tau)
    a1 = (k - 1) / (k + 1)
    # premise: a1 is the design's coefficient rounded to the nearest integer in Q(coef_bits)
    assert sec.float_sos[4] == pytest.approx(a1, abs=1e-15)
    assert abs(sec.a1 - a1 * 2.0 ** coef_bits) <= 0.5
    return k, 2 * delta / (1 - abs(a1) - delta) ** 2


@pytest.mark.parametrize("which,tau,corner", CASES)
def test_section_is_first_order_bilinear_form(built, which, tau, corner):
    # A first-order section with its zero at z = -1 (b0 = b1, b2 = a2 = 0): the bilinear image of
    # 1 / (1 + s tau), whose zero at s = infinity maps to z = -1. Its DC gain is the change of format
    # 2^(q_out - q_in) that the b coefficients carry (ir.Section), to the rounding of b0 and a1:
    # relative error <= delta / (b0 g) + delta / (1 + a1 - delta), first order.
    d = built[which]
    assert d.rates.out_hz == 48000 and d.audio_hz == 15000
    sec, q_in = _deemphasis(d)
    cb = d.filters.coef_bits
    assert sec.b0 == sec.b1 and sec.b2 == 0 and sec.a2 == 0
    assert sec.b0 > 0 and sec.a1 < 0                      # a real pole at 0 < -a1 < 1
    sc, delta = 2.0 ** cb, 2.0 ** -(cb + 1)
    g = 2.0 ** (sec.q_out - q_in)
    dc = 2 * sec.b0 / sc / (1 + sec.a1 / sc)
    tol = delta / (sec.float_sos[0] * g) + delta / (1 + sec.float_sos[4] - delta)
    assert dc == pytest.approx(g, rel=2 * tol)


def _section_and_rounding(d, tau):
    """(output rate, the de-emphasis section, coefficient bits, k, dk) of a design."""
    fs = d.rates.out_hz
    sec, _ = _deemphasis(d)
    cb = d.filters.coef_bits
    k, dk = _rounding(sec, cb, tau, fs)
    return fs, sec, cb, k, dk


@pytest.mark.parametrize("which,tau,corner", CASES)
def test_response_against_analog_de_emphasis(built, which, tau, corner):
    fs, sec, cb, k, dk = _section_and_rounding(built[which], tau)
    tol = DB * dk / (k - dk) + EVAL_DB                   # 6.3e-7 dB (50 us), 1.9e-6 dB (75 us)
    assert tol < 1e-5

    f = np.geomspace(100.0, 15000.0, 241)
    got = _normalised_db(sec, cb, f, fs)
    fc = 1 / (2 * math.pi * tau)
    f_w = fc * np.tan(np.pi * f / fs) / k                # the pre-warped bilinear frequency map
    # 1. The quantised section IS the analog BS.450 response at the warped frequency, to rounding.
    assert np.max(np.abs(got - _analog_db(f_w, tau))) <= tol
    # 2. Against the analog response at f itself it departs by exactly the warping term D(f) (module
    #    docstring): positive below the corner, negative above, largest at the top of the band.
    dev = got - _analog_db(f, tau)
    warp = _analog_db(f_w, tau) - _analog_db(f, tau)
    assert np.all(np.abs(dev - warp) <= tol)
    assert np.all(warp[f < fc] >= 0) and np.all(warp[f > fc] <= 0)
    # below the corner the departure is small: the maximum of D over (0, fc) is 0.0217 dB near
    # 2.06 kHz for 50 us and 0.0096 dB near 1.37 kHz for 75 us (D evaluated on a fine grid while
    # writing this test); at 15 kHz it is the bilinear's -3.43 / -3.56 dB
    assert np.max(dev[f <= fc]) <= 0.03
    assert -3.6 <= dev[-1] <= -3.4


@pytest.mark.parametrize("which,tau,corner", CASES)
def test_corner_frequency(built, which, tau, corner):
    # The -3.0103 dB point (|H / H(0)|^2 = 1/2) of the quantised section. Pre-warping makes the
    # transform exact at fc = 1/(2 pi tau), so the tolerance is the rounding of a1 ((fs / pi) dk,
    # ~2e-4 Hz at 50 us, 5e-4 Hz at 75 us) plus the root finder's 1e-9 Hz plus evaluation (|H|^2 off by
    # ~1e-15 over a slope of ~1e-4 per Hz: 1e-11 Hz); against the published figure add its rounding to
    # 0.1 Hz.
    fs, sec, cb, k, dk = _section_and_rounding(built[which], tau)
    fc = 1 / (2 * math.pi * tau)
    f3 = optimize.brentq(lambda x: _normalised_db(sec, cb, x, fs)[0] + 10 * math.log10(2), fc / 2, 2 * fc,
                         xtol=1e-9)
    tol = fs / math.pi * dk + 1e-6
    assert abs(f3 - fc) <= tol
    assert abs(fc - corner) <= PUBLISHED_ROUNDING_HZ        # the ITU figures themselves
    assert abs(f3 - corner) <= PUBLISHED_ROUNDING_HZ + tol
    # The check tells the transforms apart: a bilinear design without pre-warping would put the corner
    # at (fs / pi) atan(pi fc / fs) (3138.2 Hz for 50 us), an impulse-invariant / matched-z pole
    # exp(-2 pi fc / fs) near 3230 Hz; both are more than ten hertz off (13.5 and 13.7 Hz at 75 us).
    unwarped = fs / math.pi * math.atan(math.pi * fc / fs)
    assert abs(unwarped - corner) > 100 * (PUBLISHED_ROUNDING_HZ + tol)
