"""The standard test fits any audio band (edgetally.standard): the tone, the measured band and the
record length follow the band, and verify measures a plausible SINAD from 5 Hz to 20 kHz bands."""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest

from edgetally import standard
from edgetally.check.verify import TooShort, verify
from edgetally.designer.assemble import design
from edgetally.measure import metrics
from edgetally.spec import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
# output rates that divide the 84 MHz timer, a little above 8/3 of the band
OUT_HZ = {5: 20, 20: 60, 100: 300, 200: 600, 300: 800, 800: 2400, 1500: 4000, 3000: 8000, 20000: 48000}


def band_spec(w: int):
    """A family of links scaled with the band: IF 8 W, deviation 2 W (as the orchard example)."""
    return parse_spec({"name": "band", "signal": {"if_hz": 8 * w, "deviation_hz": 2 * w, "audio_hz": w},
                       "output": {"rate_hz": OUT_HZ[w], "format": "s16", "full_scale_hz": 2 * w},
                       "target": {"core": "cortex-m4", "cpu_hz": 168e6, "timer_hz": 84e6, "timer_bits": 32,
                                  "capture_dma": True, "cpu_budget": 0.5}})


def test_tone_choice():
    # 1 kHz whenever it lies at most half way up the band (common practice, no source), else a tone
    # well inside the band
    assert standard.tone_hz(2000) == 1000 and standard.tone_hz(20000) == 1000
    assert standard.tone_hz(800) == 200 and standard.tone_hz(5) == 1 and standard.tone_hz(300) == 100
    for w in (1.0, 5.0, 7.5, 20.0, 99.0, 150.0, 800.0, 1999.0, 2000.0, 15000.0):
        t = standard.standard_test(w)
        assert t.band_lo_hz < t.tone_hz <= w / 2
        assert t.min_seconds * t.tone_hz >= standard.MIN_PERIODS
        assert t.min_seconds * t.band_lo_hz >= standard.MIN_BINS
        # the offset tracker's corner a decade under the measured band
        assert standard.dc_corner_hz(w) <= t.band_lo_hz / 10


@pytest.mark.parametrize("w", sorted(OUT_HZ))
def test_bands_verify_plausibly(w):
    d = design(band_spec(w))
    r = verify(d)
    assert r.bit_exact
    assert r.tone_hz == d.test.tone_hz and r.seconds == d.test.default_seconds >= d.test.min_seconds
    # the float reference within 3 dB of the prediction, or the result says why it may not be
    assert abs(r.float_sinad_db - r.predicted_sinad_db) <= 3.0 or r.prediction_doubt
    # fixed point never beats the float reference by more than the estimate's spread (~1 dB, see
    # test_sinad_meter_low_band), and the figure is a real measurement (not a float floor)
    assert r.sinad_db <= r.float_sinad_db + 1.0
    assert 30.0 < r.float_sinad_db < 140.0


@pytest.mark.parametrize("w", [100, 200, 300, 800])
def test_issue_low_bands_of_the_orchard_link(w):
    # these bands raised ZeroDivisionError (100-300 Hz) or measured a 1 kHz tone outside an 800 Hz
    # band (C 116 dB, float 159 dB): now the tone sits inside the band and the figures agree
    raw = tomllib.loads((EXAMPLES / "orchard_link.toml").read_text())
    raw["signal"]["audio_hz"] = w
    d = design(parse_spec(raw))
    r = verify(d)
    assert r.bit_exact and r.tone_hz <= w / 2
    assert abs(r.float_sinad_db - r.predicted_sinad_db) <= 3.0 or r.prediction_doubt
    assert r.sinad_db <= r.float_sinad_db + 1.0 and r.float_sinad_db < 140.0


def test_too_short_is_refused_with_its_reason():
    d = design(band_spec(5))
    with pytest.raises(TooShort, match="needs 20 s"):
        verify(d, seconds=1.0)


def test_sinad_meter_low_band():
    """The SINAD meter at the 5 Hz band's standard test (tone 1 Hz, 20 s at 20 Hz) against an analytic
    figure: a tone of amplitude A has power A^2 / 2; white noise of variance s^2 sampled at fs has a
    flat one-sided density 2 s^2 / fs, so [lo, hi] holds s^2 (hi - lo) 2 / fs (Parseval; e.g. Oppenheim
    & Schafer, Discrete-Time Signal Processing, periodogram of white noise)."""
    t = standard.standard_test(5.0)
    fs = 20.0
    n = int(t.min_seconds * fs)
    rng = np.random.default_rng(7)
    a, s = 1.0, 0.01
    k = np.arange(n)
    x = a * np.cos(2 * np.pi * t.tone_hz / fs * k + 0.3) + 0.2 + rng.normal(0.0, s, n)
    want = 10 * np.log10((a * a / 2) / (s * s * (t.band_hi_hz - t.band_lo_hz) * 2 / fs))
    got = metrics.sinad_db(x, fs, t.tone_hz, t.band_lo_hz, t.band_hi_hz)
    # ~95 periodogram bins in the band, about 63 independent with the Hann window (1.5 bins of
    # equivalent noise bandwidth): the power estimate's relative spread is ~1/sqrt(63) = 0.55 dB;
    # three of them
    assert abs(got - want) < 1.65


def test_cli_refuses_a_record_too_short_with_one_line():
    # the issue's `verify --seconds 0.0001` ended in exit 1; a record shorter than the band's minimum
    # is refused with exit 2 and the reason
    import subprocess
    import sys

    r = subprocess.run([sys.executable, "-m", "edgetally", "verify", str(EXAMPLES / "orchard_link.toml"),
                        "--seconds", "0.0001", "--no-target"], capture_output=True, text=True, timeout=300)
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "--seconds" in lines[0] and "too short" in lines[0]
