"""FM test-signal simulator (edge times, capture stamps, phase) checked against references outside the
project.

Outside references used here:
- scipy.integrate.quad of the instantaneous frequency f0 + sum A sin(2 pi fm t + th), written out
  independently in this file, as the reference phase (the phase in cycles is its integral).
- fractions.Fraction (exact rational arithmetic) for floor(t * f_timer).
- Bessel functions: the spectrum of exp(j beta sin(w t)) has lines J_k(beta) (Jacobi-Anger expansion;
  e.g. Haykin, Communication Systems, from memory); scipy.special.jv as the reference values;
  first zero of J0 at 2.404826 (Abramowitz & Stegun, Table 9.5; value from memory, agrees with
  scipy.special.jv below).
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from scipy import integrate, special

from edgetally.stimulus import signals
from edgetally.stimulus.signals import FmSignal, Tone


def _inst_freq(tones, f0):
    """f(t) = f0 + sum A_k sin(2 pi f_k t + th_k), written out independently of signals.py."""
    def f(t):
        return f0 + sum(a * math.sin(2 * math.pi * fm * t + th) for (fm, a, th) in tones)
    return f


def _quad_phase(f, phi0, t_end, piece):
    """phi0 + integral_0^t_end f dt by scipy.integrate.quad over pieces of length <= piece (a modulation
    period or less keeps each integrand smooth and non-oscillatory for the quadrature)."""
    total = phi0
    edges = np.arange(0.0, t_end, piece).tolist() + [t_end]
    for a, b in zip(edges[:-1], edges[1:]):
        val, err = integrate.quad(f, a, b, epsabs=1e-13, epsrel=1e-13, limit=200)
        assert err < 1e-11            # quad's own error estimate, far below the 1e-9 cycle checks
        total += val
    return total


# (IF, tones as (fm, deviation, phase), duration): narrowband, wideband, two-tone, slow tone.
CASES = [
    (24000.0, [(1000.0, 6000.0, None)], 0.006),
    (300000.0, [(15000.0, 75000.0, None)], 0.0012),
    (24000.0, [(700.0, 3000.0, None), (2300.0, 2500.0, None)], 0.005),
    (50000.0, [(137.0, 20000.0, None)], 0.004),
]


def _make(case, seed):
    f0, tones, dur = case
    rng = np.random.default_rng(seed)
    tn = tuple((fm, a, float(rng.uniform(0, 2 * math.pi)) if th is None else th) for (fm, a, th) in tones)
    sig = FmSignal(if_hz=f0, tones=tuple(Tone(fm, a, th) for (fm, a, th) in tn),
                   start_phase=float(rng.uniform(0, 1)))
    return sig, tn, dur


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("seed", [11, 12])
def test_edge_count_matches_integrated_phase(case, seed):
    sig, tn, dur = _make(case, seed)
    f = _inst_freq(tn, sig.if_hz)
    piece = 0.25 / max(fm for fm, _, _ in tn)
    ph0 = sig.start_phase                                   # phase at t = 0, by definition
    ph_t = _quad_phase(f, ph0, dur, piece)                  # scipy.integrate.quad reference
    # The count of integers n with ph(0) <= n <= ph(T) is floor(ph(T)) - ceil(ph(0)) + 1. The simulator
    # returns edges in [0, T), which differs only if ph(T) is an integer: excluded by this premise.
    assert abs(ph_t - round(ph_t)) > 1e-6
    expected = math.floor(ph_t) - math.ceil(ph0) + 1
    t = signals.edge_times(sig, dur)
    assert t.size == expected


@pytest.mark.parametrize("case", CASES)
def test_every_edge_is_an_integer_phase_crossing(case):
    sig, tn, dur = _make(case, 5)
    f = _inst_freq(tn, sig.if_hz)
    t = signals.edge_times(sig, dur)
    assert t.size > 20
    assert t[0] >= 0.0 and t[-1] < dur
    assert np.all(np.diff(t) > 0)                            # strictly increasing
    # Mean-value theorem: one cycle between consecutive edges at a frequency <= f0 + sum|A| means
    # dt >= 1 / (f0 + sum|A|); relative slack 1e-9 for the Newton tolerance on both edges.
    fmax = sig.if_hz + sum(abs(a) for _, a, _ in tn)
    assert np.min(np.diff(t)) >= (1.0 / fmax) * (1 - 1e-9)
    # Independent phase at each edge: quad from 0 to t_0, then edge to edge (short smooth intervals).
    # Each must be within 1e-9 cycles of an integer (the brief's tolerance, the simulator's Newton
    # tolerance), and the integers must be consecutive, starting at ceil(phase(0)). The reference's own
    # error is kept well below that: the summed quad error estimates are asserted < 1e-10 cycles, and
    # double rounding of a running sum of n < 400 terms reaching < 400 cycles adds at most
    # n * 400 * eps/2 < 2e-11.
    ph = _quad_phase(f, sig.start_phase, float(t[0]), 0.25 / max(fm for fm, _, _ in tn))
    n0 = math.ceil(sig.start_phase)
    assert abs(ph - n0) < 1e-9
    err_sum = 0.0
    for k in range(1, t.size):
        val, err = integrate.quad(f, float(t[k - 1]), float(t[k]), epsabs=1e-13, epsrel=1e-13)
        err_sum += err
        ph += val
        assert abs(ph - (n0 + k)) < 1e-9, (k, ph - (n0 + k))
    assert err_sum < 1e-10
    # and no edge is missing after the last one: the phase at T has not reached the next integer.
    rest, _ = integrate.quad(f, float(t[-1]), dur, epsabs=1e-13, epsrel=1e-13)
    assert ph + rest < n0 + t.size


@pytest.mark.parametrize("case", CASES)
def test_phase_method_matches_quad(case):
    # FmSignal.phase (closed form) against the quad reference at a few times: same 1e-9 cycles.
    sig, tn, dur = _make(case, 7)
    f = _inst_freq(tn, sig.if_hz)
    piece = 0.25 / max(fm for fm, _, _ in tn)
    for tt in np.linspace(0.0, dur, 7):
        ref = _quad_phase(f, sig.start_phase, float(tt), piece) if tt > 0 else sig.start_phase
        assert float(sig.phase(tt)) == pytest.approx(ref, abs=1e-9)


def _floor_ticks(t, timer_hz):
    return [math.floor(Fraction(float(x)) * timer_hz) for x in t]   # exact rational floor(t * f_timer)


@pytest.mark.parametrize("offset", [0, 12345, 65535])
def test_capture_16_bit_wraps(offset):
    sig = FmSignal(if_hz=24000.0, tones=(Tone(1000.0, 6000.0, 0.3),), start_phase=0.42)
    timer_hz = 48_000_000
    t = signals.edge_times(sig, 0.006)        # 288000 ticks: the 16-bit counter wraps 4 times
    stamps = signals.capture(t, timer_hz, 16, offset_ticks=offset)
    assert stamps.dtype == np.uint16
    ticks = _floor_ticks(t, timer_hz)
    assert ticks[-1] + offset > 4 * 65536      # premise: several wraps happen
    # The latch is (floor(t f) + offset) mod 2^16 (free-running counter; common practice, no source).
    assert [int(s) for s in stamps] == [(k + offset) % 65536 for k in ticks]
    # Differences modulo 2^16 reproduce the true tick differences (each < 2^16 here).
    d_true = np.diff(ticks)
    assert d_true.max() < 65536
    d_wrapped = np.diff(stamps.astype(np.int64)) % 65536
    np.testing.assert_array_equal(d_wrapped, d_true)


def test_capture_32_bit_wraps():
    sig = FmSignal(if_hz=300000.0, tones=(Tone(15000.0, 75000.0, 1.1),), start_phase=0.9)
    timer_hz = 84_000_000
    t = signals.edge_times(sig, 0.001)
    offset = 2 ** 32 - 40000                   # the 32-bit counter wraps during the capture
    stamps = signals.capture(t, timer_hz, 32, offset_ticks=offset)
    assert stamps.dtype == np.uint32
    ticks = _floor_ticks(t, timer_hz)
    assert ticks[0] + offset < 2 ** 32 <= ticks[-1] + offset
    assert [int(s) for s in stamps] == [(k + offset) % 2 ** 32 for k in ticks]
    np.testing.assert_array_equal(np.diff(stamps.astype(np.int64)) % 2 ** 32, np.diff(ticks))


# --- FM spectrum: Bessel line amplitudes -------------------------------------------------------

def _lines(beta, theta, start):
    """FFT of exp(2j pi phase(t)) over exactly 10 modulation periods and 240 IF cycles, so that every
    line f0 + k fm falls on a bin (no leakage). Returns (bin spectrum / N, carrier bin, bins per fm)."""
    f0, fm, fs, n = 24000.0, 1000.0, 256000.0, 2560      # bin = 100 Hz
    sig = FmSignal(if_hz=f0, tones=(Tone(fm, beta * fm, theta),), start_phase=start)
    t = np.arange(n) / fs
    z = np.exp(2j * np.pi * sig.phase(t))
    x = np.fft.fft(z) / n
    return x, int(f0 / (fs / n)), int(fm / (fs / n))


# Error analysis for the line amplitudes: phase(t) < 300 cycles is computed with an absolute rounding
# error ~ 300 * eps = 7e-14 cycles, i.e. ~4e-13 in each phasor sample, and the FFT adds ~log2(N) eps;
# the averaging 1/N keeps each bin's error below ~1e-12. Aliasing: line k and k + 256 share a bin
# (fs / fm = 256), and sum_{|k| >= 128} |J_k(beta)| < 1e-150 for beta <= 2.5. So 1e-10 is a safe bound.
AMP_TOL = 1e-10


@pytest.mark.parametrize("seed", [0, 1])
def test_bessel_null_of_the_carrier(seed):
    rng = np.random.default_rng(seed)
    beta = 2.404826            # first zero of J0 (Abramowitz & Stegun, Table 9.5)
    # scipy.special.jv as the reference: J0 at the 6-decimal table value is ~0 (|J0'| = J1 = 0.52, times
    # the 5e-7 rounding of the table value: < 3e-7).
    assert abs(special.jv(0, beta)) < 3e-7
    x, c, step = _lines(beta, float(rng.uniform(0, 2 * np.pi)), float(rng.uniform(0, 1)))
    power = np.abs(x) ** 2
    assert np.sum(power) == pytest.approx(1.0, abs=1e-12)      # Parseval: |exp(j.)| = 1
    # The brief's check: carrier line at least 40 dB below the total power.
    assert 10 * np.log10(power[c] / np.sum(power)) < -40.0
    # Stronger, from the error analysis: the carrier amplitude equals |J0(beta)| within AMP_TOL.
    assert abs(np.abs(x[c]) - abs(special.jv(0, beta))) < AMP_TOL


@pytest.mark.parametrize("beta", [1.0, 2.404826, 0.3])
def test_bessel_line_amplitudes(beta):
    rng = np.random.default_rng(int(beta * 1000))
    x, c, step = _lines(beta, float(rng.uniform(0, 2 * np.pi)), float(rng.uniform(0, 1)))
    power = np.abs(x) ** 2
    if beta == 1.0:
        # Brief: carrier power J0(1)^2 = 0.5864 within 0.01 (scipy.special.jv reference); the error
        # analysis above gives 2 * AMP_TOL, so that tighter bound is checked as well.
        assert power[c] == pytest.approx(special.jv(0, 1.0) ** 2, abs=0.01)
        assert power[c] == pytest.approx(special.jv(0, 1.0) ** 2, abs=2 * AMP_TOL)
    # Every line f0 + k fm has amplitude |J_k(beta)| (Jacobi-Anger expansion, scipy.special.jv values),
    # for |k| <= 12; every bin that is not a line is empty (within AMP_TOL).
    for k in range(-12, 13):
        assert abs(np.abs(x[c + k * step]) - abs(special.jv(k, beta))) < AMP_TOL, k
    line_bins = {(c + k * step) % x.size for k in range(-128, 128)}
    others = np.array([i for i in range(x.size) if i not in line_bins])
    assert np.max(np.abs(x[others])) < AMP_TOL


def test_edge_solver_converges_on_a_long_fast_if():
    """A 1.5 MHz IF for 2.2 s reaches 3.3e6 cycles, where a double's own rounding of the phase is
    about 5e-10 cycles: the solver must still converge (its tolerance follows that rounding), and
    every edge must sit where the phase, computed independently in long double arithmetic
    (numpy.longdouble: 64-bit mantissa on x86; on a platform where it is a plain double the bound
    below still holds with the double's rounding), crosses its integer: within 1e-7 cycles, which
    is 7e-14 s at this IF, far below a 48 MHz timer tick."""
    sig = signals.FmSignal(1.5e6, (signals.Tone(1000.0, 350e3, 0.3),), start_phase=0.25)
    t = signals.edge_times(sig, 2.2)
    assert t.size == int(np.floor(sig.phase(2.2))) - int(np.ceil(sig.phase(0.0))) + 1
    k = np.arange(0, t.size, 104729)                   # a spread of edges
    tl = t[k].astype(np.longdouble)
    w = 2 * np.pi * np.longdouble(1000.0)
    ph = (np.longdouble(0.25) + np.longdouble(1.5e6) * tl
          + np.longdouble(350e3) / w * (np.cos(np.longdouble(0.3)) - np.cos(w * tl + np.longdouble(0.3))))
    assert np.max(np.abs(ph - np.round(ph))) < 1e-7
