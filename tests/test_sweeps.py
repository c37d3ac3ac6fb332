"""Sweeps (issue: every point runs the emitted C and checks it bit-exact against the model), and
what each sweep measures against something outside the project."""

import math

import numpy as np
import pytest
from scipy import signal

from edgetally.dsp import cic
from edgetally.check import hostbuild
from edgetally.measure import sweeps

from conftest import ALL_DESIGNS


@pytest.fixture(scope="module")
def campus():
    d = ALL_DESIGNS["campus_fm:auto"]
    return d, hostbuild.build(d)


def _designed_db(d, f):
    """The designed response from outside references: the CIC after Hogenauer (1981), H(f) =
    (sin(pi f R / f_grid) / (R sin(pi f / f_grid)))^N, and the float sections through
    scipy.signal.sosfreqz; times the front end's own average over one grid period (the phase step
    is the integral of the frequency over it: sinc(f / f_grid), numpy.sinc)."""
    c, g = d.cic, d.rates.grid_hz
    h_cic = (np.sin(np.pi * f * c.ratio / g) / (c.ratio * np.sin(np.pi * f / g))) ** c.order
    _, h_iir = signal.sosfreqz(np.array([list(s.float_sos) for s in d.filters.sections]), worN=f, fs=d.rates.out_hz)
    return 20 * np.log10(np.abs(h_cic * h_iir * np.sinc(f / g)))


def test_tone_sweep_follows_the_designed_response(campus):
    """The measured level of each swept tone against the designed response, with the tone at 70 %
    of full-scale deviation. Left unmodelled: the linear interpolation of phase between stamps (a
    triangle of one IF period: about (pi f / f_IF)^2 / 3 in power, 0.03 dB at 14 kHz and 300 kHz)
    and the level estimate's noise (SINAD >= 55 dB: amplitude error < 0.002 dB). 0.1 dB bounds them."""
    d, host = campus
    pts = [200.0, 1000.0, 3000.0, 7000.0, 12000.0, 14500.0]
    s = sweeps.run_sweep(d, "tone", pts, host=host)
    assert s.bit_exact and len(s.points) == len(pts)
    want = _designed_db(d, np.array(pts)) + 20 * math.log10(0.7)
    got = np.array([p.level_db for p in s.points])
    assert np.max(np.abs(got - want)) < 0.1, got - want


def test_deviation_sweep_is_linear_then_clips(campus):
    """Level grows 20 log10 of the deviation (a discriminator is linear in frequency: common
    practice, no source) up to the spec'd full scale; past it the output clips and says so."""
    d, host = campus
    fs = d.full_scale_hz
    pts = [0.1 * fs, 0.5 * fs, 0.9 * fs, 1.25 * fs]
    s = sweeps.run_sweep(d, "deviation", pts, host=host)
    assert s.bit_exact
    lin = [p for p in s.points if p.x <= fs]
    ref = lin[-1].level_db - 20 * math.log10(lin[-1].x)
    for p in lin:
        # noise on the level estimate at the lowest point (SINAD about 58 dB): < 0.02 dB
        assert abs(p.level_db - 20 * math.log10(p.x) - ref) < 0.02
        assert p.flags["clips"] == 0
    over = s.points[-1]
    assert over.flags["clips"] > 0 and over.thd_db > -45  # clipping shows as distortion


def test_offset_sweep_reads_the_carrier_offset(campus):
    """The offset output against a known carrier offset. What is left after the run: a step decays
    as exp(-T / tau) in the one-pole tracker (tau = 2^dc_shift output samples), and the 1 kHz tone
    leaves a ripple of amplitude dev / (2 pi f_tone tau) (a one-pole low-pass far below the tone)."""
    d, host = campus
    pts = [-0.3 * d.full_scale_hz, 0.0, 0.2 * d.full_scale_hz]
    s = sweeps.run_sweep(d, "offset", pts, host=host)
    assert s.bit_exact
    tau = 2**d.scale.dc_shift / d.rates.out_hz
    left = math.exp(-(sweeps.LEAD_S + sweeps.SECONDS) / tau)
    ripple = 0.7 * d.full_scale_hz / (2 * math.pi * 1000.0 * tau)
    for p in s.points:
        assert abs(p.offset_hz - p.x) <= abs(p.x) * left + ripple + 1.0, (p.x, p.offset_hz)


def test_cnr_sweep_points_are_bit_exact_and_show_the_threshold():
    """Noisy IF edges (real zero crossings of signal plus noise) through the C: bit-exact at every
    point; above threshold the SNR sits near the textbook formula plus this chain's filters
    (within 3 dB, the issue's acceptance; the formula: Haykin, 3 beta^2 (beta + 1) CNR), below it
    the clicks pull it far under (more than 10 dB at 0 dB CNR, ten under the usual ~10 dB FM
    threshold, common practice, no source; at 3 dB one seeded run of the flat-band chain sits 9.8 dB
    under, too near the bound to show the threshold by itself)."""
    d = ALL_DESIGNS["orchard_link:auto"]
    s = sweeps.run_sweep(d, "cnr", [0.0, 20.0])
    assert s.bit_exact
    gain = sweeps.chain_noise_gain_db(d, 1000.0)
    low, high = s.points
    assert abs(high.snr_db - (high.predicted_db + gain)) < 3.0
    assert low.snr_db < low.predicted_db + gain - 10.0


def test_every_kind_has_default_points_and_bad_kinds_are_refused():
    d = ALL_DESIGNS["tiny_irq:auto"]
    for kind in sweeps.KINDS:
        pts = sweeps.default_points(d, kind)
        assert len(pts) >= 5
    with pytest.raises(ValueError, match="expected one of"):
        sweeps.run_sweep(d, "bogus")
    # values the simulator cannot make are refused by the API, naming the value and the range
    with pytest.raises(ValueError, match=r"25000: a deviation must lie in \(0, 19000\) Hz"):
        sweeps.run_sweep(d, "deviation", [1000.0, 25000.0])
    with pytest.raises(ValueError, match="tone frequency"):
        sweeps.run_sweep(d, "tone", [5000.0])
    # the deviation sweep goes past the spec'd maximum, as the issue asks
    assert max(sweeps.default_points(d, "deviation")) > d.full_scale_hz


def test_cic_response_helper_matches_the_formula_used_here():
    """edgetally.cic.response_db is the same Hogenauer magnitude as _designed_db's CIC factor."""
    d = ALL_DESIGNS["campus_fm:auto"]
    f = np.array([500.0, 5000.0, 15000.0])
    c, g = d.cic, d.rates.grid_hz
    h = (np.sin(np.pi * f * c.ratio / g) / (c.ratio * np.sin(np.pi * f / g))) ** c.order
    np.testing.assert_allclose(
        cic.response_db(f / d.rates.out_hz, c.order, c.ratio), 20 * np.log10(np.abs(h)), atol=1e-9
    )
