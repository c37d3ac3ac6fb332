"""Replay of every recording format, for every scheme where the format applies, bit-exact: the
emitted C (host build) and the integer model agree on every sample and counter; and the inputs the
readers make are the ones the hardware would make (checked with exact integer arithmetic here)."""

import numpy as np
import pytest

from edgetally import standard
from edgetally.check.replay import replay
from edgetally.stimulus import recordings, signals as fm
from edgetally.stimulus.inputs import make_inputs

from conftest import ALL_DESIGNS

KEYS = sorted(k for k in ALL_DESIGNS if not k.endswith(":auto"))  # every forced scheme (the autos repeat one)


def _seconds(d):
    return recordings.settle_s(d) + 0.03


def _sig(d):
    return fm.FmSignal(d.if_hz, (fm.Tone(1000.0, 0.5 * d.full_scale_hz, 0.4),), 0.3)


def _write_vcd(path, times_ps, end_ps, name="if_pin"):
    from vcd import VCDWriter

    with open(path, "w") as fh:
        with VCDWriter(fh, timescale="1 ps") as w:
            pin = w.register_var("board", name, "wire", size=1, init=0)
            w.register_var("board", "other", "wire", size=1, init=0)
            half = np.diff(np.append(times_ps, end_ps)) // 2
            for t, h in zip(times_ps.tolist(), half.tolist()):
                w.change(pin, t, 1)
                w.change(pin, t + h, 0)


def _check(d, rec):
    res = replay(d, rec)
    assert res.samples > 50
    assert res.bit_exact, (res.mismatches, res.first_mismatch)
    return res


@pytest.mark.parametrize("key", KEYS)
def test_vcd(key, tmp_path):
    d = ALL_DESIGNS[key]
    sec = _seconds(d)
    ps = np.round(fm.edge_times(_sig(d), sec) * 1e12).astype(np.int64) + 1000
    end = int(sec * 1e12) + 2000
    _write_vcd(tmp_path / "a.vcd", ps, end)
    rec = recordings.load(d, tmp_path / "a.vcd", signal="if_pin")
    # exact integer expectation: floor(t f_timer) at a 1 ps time unit
    ticks = np.array([v * d.rates.timer_hz // 10**12 for v in ps.tolist()], dtype=np.int64)
    fr = d.front
    if fr.kind == "stamp":
        want = ticks[:: fr.prescale] & ((1 << fr.timer_bits) - 1)
    else:
        # the recording ends at its last value change, the final falling edge (_write_vcd), not at end
        last = int(ps[-1]) + (end - int(ps[-1])) // 2
        grid = np.arange((last * d.rates.timer_hz // 10**12) // fr.grid_ticks + 1) * fr.grid_ticks
        want = np.searchsorted(ticks, grid, side="left") & ((1 << fr.counter_bits) - 1)
    assert np.array_equal(rec.inputs.astype(np.int64), want)
    _check(d, rec)


@pytest.mark.parametrize("key", KEYS)
def test_csv_and_binary(key, tmp_path):
    d = ALL_DESIGNS[key]
    inputs = make_inputs(d, _seconds(d), seed=11)
    bits = d.front.timer_bits if d.front.kind == "stamp" else d.front.counter_bits
    (tmp_path / "s.csv").write_text(
        "# logged over the UART\nn,value\n" + "".join(f"{k},{v}\n" for k, v in enumerate(inputs.tolist()))
    )
    rec = recordings.load(d, tmp_path / "s.csv", signal="value")
    assert np.array_equal(rec.inputs, inputs)
    ref = _check(d, rec)
    for endian, code in (("little", "<"), ("big", ">")):
        inputs.astype(f"{code}u{bits // 8}").tofile(tmp_path / f"{endian}.bin")
        rec = recordings.load(d, tmp_path / f"{endian}.bin", endian=endian)
        assert np.array_equal(rec.inputs, inputs)
        assert np.array_equal(_check(d, rec).out, ref.out)
    # 64-bit words of the unwrapped values (a wider timer or an extended count): wrapped on reading
    unwrapped = np.concatenate(([0], np.cumsum(np.diff(inputs.astype(np.int64)) & ((1 << bits) - 1))))
    (unwrapped + int(inputs[0]) + (1 << 40)).astype("<u8").tofile(tmp_path / "wide.bin")
    rec = recordings.load(d, tmp_path / "wide.bin", word_bits=64)
    assert np.array_equal(rec.inputs, inputs)


def _iq(d, fs, sec, offset):
    sig = _sig(d)
    t = np.arange(int(sec * fs)) / fs
    return np.exp(2j * np.pi * (sig.phase(t) - d.if_hz * t + offset * t))


@pytest.mark.parametrize("key", KEYS)
def test_iq_wav_and_sigmf(key, tmp_path):
    from scipy.io import wavfile
    from sigmf import SigMFFile

    d = ALL_DESIGNS[key]
    sec, offset = _seconds(d), 0.2 * d.full_scale_hz
    fs = 4.0 * (abs(offset) + d.full_scale_hz + d.audio_hz)
    z = _iq(d, fs, sec, offset)
    wavfile.write(tmp_path / "iq.wav", int(fs), np.column_stack([z.real, z.imag]).astype(np.float32))
    rec = recordings.load(d, tmp_path / "iq.wav", offset_hz=offset)
    _check(d, rec)
    z.astype(np.complex64).tofile(tmp_path / "iq.sigmf-data")
    meta = SigMFFile(
        data_file=str(tmp_path / "iq.sigmf-data"), global_info={"core:datatype": "cf32_le", "core:sample_rate": int(fs)}
    )
    meta.add_capture(0, metadata={"core:frequency": 433.92e6})
    meta.tofile(tmp_path / "iq.sigmf-meta")
    rec = recordings.load(d, tmp_path / "iq.sigmf-meta", offset_hz=offset)
    _check(d, rec)


@pytest.mark.parametrize("key", KEYS)
def test_if_wav(key, tmp_path):
    """A one-channel WAV is the IF itself; its rising crossings equal the exact edge times to
    within the cubic refinement's bound (edgetally.stimulus.ifnoise docstring, oversample 16 here:
    8.9e-5 / f s at unit amplitude), so the stamps match the exact edges' stamps but where an edge
    lies that close to a tick boundary."""
    from scipy.io import wavfile

    d = ALL_DESIGNS[key]
    sig, sec = _sig(d), _seconds(d)
    fs = 16 * (d.if_hz + d.full_scale_hz + d.audio_hz)
    t = np.arange(int(sec * fs)) / fs
    wavfile.write(tmp_path / "if.wav", int(fs), np.sin(2 * np.pi * sig.phase(t)).astype(np.float32))
    rec = recordings.load(d, tmp_path / "if.wav")
    exact = fm.edge_times(sig, sec)
    exact = exact[(exact > 2.5 / fs) & (exact < (t.size - 2) / fs)]
    f_min = d.if_hz - sig.peak_deviation()
    # float32 samples: 6e-8 relative, a time error of 6e-8 / (2 pi f) on top of the cubic bound
    bound = 8.9e-5 / f_min + 1e-7 / (2 * np.pi * f_min)
    assert rec.edge_times.size == exact.size
    assert np.max(np.abs(rec.edge_times - exact)) < bound
    _check(d, rec)


def test_steady_tone_found_with_its_sinad(tmp_path):
    """A 1 kHz FM tone: the summary finds it and its SINAD equals the SINAD measured at the known
    tone frequency (edgetally.measure.metrics, as verify measures it) on the same settled samples.
    The fitted frequency's spread at this SINAD and length is about 1e-4 Hz (Cramer-Rao bound for a
    tone in white noise, sqrt(12) / (2 pi N^1.5 T sqrt(SNR)) with N = 2400, SNR >= 40 dB; Rife and
    Boorstyn, IEEE Trans. IT-20(5), 1974, from memory): 0.01 Hz is far outside it."""
    import math

    from edgetally.measure import metrics

    d = ALL_DESIGNS["orchard_link:timestamp"]
    sec = 0.3 + recordings.settle_s(d)
    ps = np.round(fm.edge_times(_sig(d), sec) * 1e12).astype(np.int64) + 1000
    _write_vcd(tmp_path / "tone.vcd", ps, int(sec * 1e12) + 2000)
    res = _check(d, recordings.load(d, tmp_path / "tone.vcd", signal="if_pin"))
    assert abs(res.tone_hz - 1000.0) < 0.01
    settled = d.output.fraction(res.out[int(math.ceil(res.settle_s * d.rates.out_hz)) :])
    want = metrics.sinad_db(settled, d.rates.out_hz, 1000.0, d.test.band_lo_hz, d.audio_hz)
    assert want > 40 and abs(res.sinad_db - want) < 0.1
