"""A flat band by default: the CIC droop is compensated when it exceeds fixed.droop_limit_db (1 dB
unless the spec says otherwise; 0 opts out), and the compensated response, computed outside the
project's own response code, is flat to that limit.

Outside references used here:
- scipy.signal.freqz for every response: the CIC as its FIR form at the grid rate (the convolution
  of `order` boxcars of `ratio` ones, Hogenauer 1981 eq. for H(z)) and each quantised section at the
  output rate;
- the elliptic low-pass's passband ripple, LPF_RIPPLE_DB (0.1 dB by design, scipy.signal.ellip).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import signal

import edgetally
from edgetally.designer import wordlength
from edgetally.dsp import cic, iir
from edgetally.spec import DROOP_LIMIT_DB

from conftest import ALL_DESIGNS, EXAMPLES


def _compensated_db(design, f_hz):
    """CIC x every section but the de-emphasis (which is meant to slope), in dB, by freqz."""
    c = design.cic
    box = np.ones(c.ratio)
    fir = np.array([1.0])
    for _ in range(c.order):
        fir = np.convolve(fir, box)
    _, h = signal.freqz(fir / fir.sum(), worN=f_hz, fs=design.rates.grid_hz)
    rows = wordlength.quantised_rows(design.filters, design.scale.q)
    for row, sec in zip(rows, design.filters.sections):
        if sec.role != "deemphasis":
            _, hs = signal.freqz(row[:3], row[3:], worN=f_hz, fs=design.rates.out_hz)
            h = h * hs
    return 20 * np.log10(np.abs(h))


@pytest.mark.parametrize("key", sorted(ALL_DESIGNS))
def test_band_is_flat(key):
    d = ALL_DESIGNS[key]
    f = np.linspace(1.0, d.audio_hz, 300)
    db = _compensated_db(d, f)
    droop = cic.droop_db(d.audio_hz, d.rates.out_hz, d.cic.order, d.cic.ratio)
    compensated = any(s.role == "droop" for s in d.filters.sections)
    # every bundled example uses the default limit, or campus_fm's own 1 dB
    assert compensated == (droop > DROOP_LIMIT_DB)
    # Bound: the compensator's own residual (<= the limit, by its least-squares design when it
    # meets it with at most 7 taps, as here), the low-pass ripple (0.1 dB), and the coefficient
    # quantisation (the spec's response tolerance, 0.05 dB by default).
    bound = DROOP_LIMIT_DB + iir.LPF_RIPPLE_DB + 0.05
    assert db.max() - db.min() <= bound, (key, db.max() - db.min(), droop)


def test_opting_out_leaves_the_droop():
    spec = edgetally.load_spec(EXAMPLES / "orchard_link.toml")
    off = dataclasses.replace(spec, fixed=dataclasses.replace(spec.fixed, droop_limit_db=0.0))
    d_on, d_off = edgetally.design(spec), edgetally.design(off)
    assert any(s.role == "droop" for s in d_on.filters.sections)
    assert not any(s.role == "droop" for s in d_off.filters.sections)
    f = np.array([1.0, off.signal.audio_hz])
    db = _compensated_db(d_off, f)
    # uncompensated: the edge sits below DC by the CIC's droop (Hogenauer's H(z) through freqz),
    # less the elliptic ripple
    want = cic.droop_db(off.signal.audio_hz, d_off.rates.out_hz, d_off.cic.order, d_off.cic.ratio)
    assert db[0] - db[1] == pytest.approx(want, abs=iir.LPF_RIPPLE_DB + 0.05)
    assert want > 1.0


def test_compensator_meets_the_limit_where_it_can():
    # The compensator alone (float taps, scipy.signal.sosfreqz) times the CIC (freqz of its FIR):
    # within the flatness it was asked for, for a range of droops from 1.5 to 6 dB.
    for order, ratio, band, fs in [(3, 2, 3000, 8000), (3, 3, 3000, 8000), (3, 6, 15000, 48000), (3, 4, 4000, 16000)]:
        sos = iir.droop_fir(order, ratio, band, fs, 1.0)
        f = np.linspace(1.0, band, 300)
        _, hc = signal.sosfreqz(sos, worN=f, fs=fs)
        fir = np.array([1.0])
        for _ in range(order):
            fir = np.convolve(fir, np.ones(ratio))
        _, h = signal.freqz(fir / fir.sum(), worN=f, fs=fs * ratio)
        db = 20 * np.log10(np.abs(h * hc))
        assert db.max() - db.min() <= 1.0, (order, ratio, band, fs, db.max() - db.min())
