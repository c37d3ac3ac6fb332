"""Recordings made by tools outside edgetally, demodulated by the emitted C (bit-exact against the
model) to their known instantaneous frequency:
- a VCD written by pyvcd (its VCDWriter) of a square wave whose frequency steps between known
  values, its edges computed here by summing periods (not by edgetally's simulator);
- a linear sine sweep synthesised by sox (Debian's sox; sox(1), synth effect: "freq1:freq2" is a
  linear sweep, "the tone will change by a fixed number of hertz per second"), read as the IF;
- a SigMF IQ recording written with the sigmf library, the channel offset from its centre and its
  frequency stepping between known values.

What is compared: the demodulated frequency, the IF plus the offset output plus the audio output
in Hz (edgetally.check.replay.frequency_estimate), averaged over windows of W seconds, against the
known frequency. The error bound, term by term (``Bound``):
- phase quantisation: the chain sees the phase at each grid instant to within e cycles (a count:
  one whole cycle; a timer stamp: one tick at the highest frequency, f_max / f_timer, twice for the
  two stamps that bracket it); a mean over W of the frequency is then off by at most 2 e / W, and
  the filters multiply that by at most the l1 norm of their impulse response (CIC taps are
  positive with unit DC gain: norm 1; the IIR's norm from scipy.signal.sosfilt of an impulse);
- gain: the integer chain's DC gain differs from one by g (edgetally.measure.response at 0 Hz):
  |f - IF| g;
- rounding: half an LSB per rounding, at most (sections + 2) output LSBs and one offset LSB;
- the offset tracker: the audio is H(u - dc) and the offset dc, so their sum is u plus
  H(dc) - dc ~ tau_H dc' (tau_H the IIR's DC group delay, scipy.signal.group_delay), and dc is
  read once per output sample (held for up to 1 / out_hz); dc' decays as exp(-s / tau_dc) after a
  step of the carrier (tau_dc = 2**dc_shift output samples), and equals the sweep rate k on a ramp;
- the IIR's own settling after a step: its slowest pole r decays to 1e-4 of the step before the
  window opens (the window starts that late), so 1e-4 |step|.
"""

import math
import shutil
import subprocess

import numpy as np
import pytest
from scipy import signal

from edgetally.check.replay import frequency_estimate, output_t0, replay
from edgetally.measure.response import chain_response
from edgetally.stimulus import recordings

from conftest import ALL_DESIGNS

VCD_KEYS = ["orchard_link:timestamp", "orchard_link:interrupt", "orchard_link:counter", "tiny_irq:interrupt"]
ORCHARD = ["orchard_link:timestamp", "orchard_link:counter"]
HOLD_S = 0.25           # each frequency holds this long
WINDOW = (0.12, 0.24)   # measured over this span of each hold (s after its step)


def _iir(d):
    return np.array([s.float_sos for s in d.filters.sections], dtype=float)


def settle_after_step_s(d) -> float:
    r = float(np.max(np.abs(signal.sos2zpk(_iir(d))[1])))
    return math.log(1e-4) / math.log(r) / d.rates.out_hz


def bound_hz(d, f_dev: float, step: float, w: float, dcp: float) -> float:
    """The error bound of the module docstring for a window of w seconds, |f - IF| = f_dev, a step
    of ``step`` Hz before it, and |dc'| <= dcp Hz/s in it."""
    fr = d.front
    f_max = d.if_hz + d.full_scale_hz
    e = 1.0 if fr.kind == "count" else 2.0 * fr.prescale * f_max / d.rates.timer_hz
    imp = np.zeros(20000)
    imp[0] = 1.0
    l1 = float(np.sum(np.abs(signal.sosfilt(_iir(d), imp))))
    q_db, _ = chain_response(d, np.array([0.0]))
    g = abs(10 ** (q_db[0] / 20) - 1)
    lsb_out = d.full_scale_hz / 2 ** (d.output.bits - 1)
    lsb_off = d.full_scale_hz / 2 ** d.scale.q
    tau_h = sum(float(signal.group_delay((s[:3], s[3:]), w=[1e-6])[1][0]) for s in _iir(d)) / d.rates.out_hz
    return (2 * e * l1 / w + f_dev * g + (len(d.filters.sections) + 2) * lsb_out + lsb_off
            + dcp * (abs(tau_h) + 1 / d.rates.out_hz) + 1e-4 * abs(step))


def _tau_dc(d):
    return 2 ** d.scale.dc_shift / d.rates.out_hz


def check_holds(d, res, rec, freqs):
    """Each hold's mean demodulated frequency against its known value, within bound_hz."""
    assert res.bit_exact
    assert WINDOW[0] > settle_after_step_s(d) + (d.cic.order + 1) * d.cic.ratio / d.rates.grid_hz
    f_est = frequency_estimate(d, res)
    t = output_t0(d, rec) + np.arange(f_est.size) / d.rates.out_hz
    prev = d.if_hz                         # the offset tracker starts at the IF
    for k, f in enumerate(freqs):
        sel = (t >= k * HOLD_S + WINDOW[0]) & (t < k * HOLD_S + WINDOW[1])
        step = f - prev
        dcp = abs(step) / _tau_dc(d) * math.exp(-WINDOW[0] / _tau_dc(d))
        tol = bound_hz(d, abs(f - d.if_hz), step, WINDOW[1] - WINDOW[0], dcp)
        got = float(np.mean(f_est[sel]))
        assert abs(got - f) < tol, (k, f, got, tol)
        assert tol < 0.02 * d.full_scale_hz          # the bound is tight enough to mean something
        prev = f


def _holds(d):
    """Three known frequencies about the IF (within +-half full-scale deviation)."""
    return [d.if_hz + 0.45 * d.full_scale_hz, d.if_hz - 0.4 * d.full_scale_hz, d.if_hz + 0.15 * d.full_scale_hz]


@pytest.mark.parametrize("key", VCD_KEYS)
def test_pyvcd_square_wave(key, tmp_path):
    from vcd import VCDWriter

    d = ALL_DESIGNS[key]
    freqs = _holds(d)
    # edges by summing whole periods in picoseconds: frequency freqs[k] during [k HOLD_S, (k+1) HOLD_S)
    at, t = [], 0
    for k, f in enumerate(freqs):
        period = round(1e12 / f)
        while t < round((k + 1) * HOLD_S * 1e12):
            at.append(t)
            t += period
    with open(tmp_path / "la.vcd", "w") as fh:
        with VCDWriter(fh, timescale="1 ps", date="2026-12-02", version="logic analyzer export") as w:
            w.register_var("la", "ch0_clock", "wire", size=1, init=0)
            pin = w.register_var("la", "ch1_if", "wire", size=1, init=0)
            for a in at:
                w.change(pin, a, 1)
                w.change(pin, a + round(5e11 / freqs[min(int(a / (HOLD_S * 1e12)), 2)]), 0)
    rec = recordings.load(d, tmp_path / "la.vcd", signal="ch1_if")
    # the periods are rounded to 1 ps: the frequency moves by f^2 0.5e-12 at most (0.0003 Hz here)
    check_holds(d, replay(d, rec), rec, freqs)


@pytest.mark.skipif(shutil.which("sox") is None, reason="needs sox (Debian package sox; .ci/run installs it)")
@pytest.mark.parametrize("key", ORCHARD)
def test_sox_chirp_as_the_if(key, tmp_path):
    d = ALL_DESIGNS[key]
    f1, f2, secs, rate = d.if_hz - 0.35 * d.full_scale_hz, d.if_hz + 0.35 * d.full_scale_hz, 1.0, 192000
    wav = tmp_path / "chirp.wav"
    # -D: no dither; the rate before -n so that synth runs at 192 kHz (not at 48 kHz, resampled)
    subprocess.run(["sox", "-D", "-r", str(rate), "-n", "-b", "16", str(wav), "synth", f"{secs:g}", "sine",
                    f"{f1:g}:{f2:g}"], check=True, capture_output=True)
    rec = recordings.load(d, wav)
    res = replay(d, rec)
    assert res.bit_exact
    assert res.tone_hz is None and res.sinad_db is None      # a ramp is no steady tone
    k = (f2 - f1) / secs
    f_est = frequency_estimate(d, res)
    t = output_t0(d, rec) + np.arange(f_est.size) / d.rates.out_hz
    # the chain's delay for a ramp: the CIC's order (R - 1) / 2 grid periods (Hogenauer 1981: a
    # linear-phase FIR) and half a grid period (a step is the mean frequency over the grid period
    # before its instant); the IIR's delay is taken out by the offset tracker on a steady ramp,
    # leaving tau_H k exp(-t / tau_dc) (module docstring)
    delay = (d.cic.order * (d.cic.ratio - 1) / 2 + 0.5) / d.rates.grid_hz
    w, start = 0.1, 0.35
    tau = _tau_dc(d)
    windows = np.arange(start, secs - w - 0.04, w)
    assert windows.size == 6
    for a in windows:
        sel = (t >= a) & (t < a + w)
        want = f1 + k * (np.mean(t[sel]) - delay)
        dcp = (abs(f1 - d.if_hz) / tau + k) * math.exp(-a / tau) + k
        tol = bound_hz(d, max(abs(f1 - d.if_hz), abs(f2 - d.if_hz)), 0.0, w, dcp)
        got = float(np.mean(f_est[sel]))
        assert abs(got - want) < tol, (a, want, got, tol)
        assert tol < 0.02 * d.full_scale_hz


@pytest.mark.parametrize("key", ORCHARD)
def test_sigmf_iq_recording(key, tmp_path):
    from sigmf import SigMFFile

    d = ALL_DESIGNS[key]
    freqs = _holds(d)
    fs, offset = 48000, 10000.0                 # the channel lies 10 kHz above the recording's centre
    n = int(round(3 * HOLD_S * fs))
    f_if = np.array(freqs)[np.minimum((np.arange(n) / fs / HOLD_S).astype(int), 2)]
    cycles = np.concatenate(([0.0], np.cumsum(f_if - d.if_hz + offset)[:-1])) / fs
    z = (0.6 * np.exp(2j * np.pi * cycles)).astype(np.complex64)
    z.tofile(tmp_path / "band.sigmf-data")
    meta = SigMFFile(data_file=str(tmp_path / "band.sigmf-data"),
                     global_info={"core:datatype": "cf32_le", "core:sample_rate": fs,
                                  "core:description": "FSK test channel 10 kHz above the centre"})
    meta.add_capture(0, metadata={"core:frequency": 868.3e6})
    meta.tofile(tmp_path / "band.sigmf-meta")
    rec = recordings.load(d, tmp_path / "band.sigmf-meta", offset_hz=offset)
    # the phase is piecewise linear, sampled: a hold's frequency is exact, only the step's own
    # sample interval is not (it lies outside every window)
    check_holds(d, replay(d, rec), rec, freqs)
