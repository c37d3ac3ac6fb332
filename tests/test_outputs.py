"""Output formats and the offset output."""

import math

import numpy as np
import pytest

import edgetally
from edgetally.dsp import cic
from edgetally.check import hostbuild
from edgetally.measure import metrics
from edgetally.check import model
from edgetally.stimulus import signals
from edgetally.stimulus.inputs import make_inputs
from edgetally.check.verify import verify

from conftest import EXAMPLES


def _spec(path, **changes):
    import tomllib

    raw = tomllib.loads((EXAMPLES / path).read_text())
    for dotted, value in changes.items():
        sec, key = dotted.split("__")
        raw.setdefault(sec, {})[key] = value
    return edgetally.parse_spec(raw)


@pytest.mark.parametrize("fmt,bits", [("u12", 12), ("u8", 8), ("u16", 16)])
def test_unsigned_codes_sit_at_mid_scale(fmt, bits):
    """An unsigned N-bit code for a DAC or PWM compare value: mid-scale 2**(N-1) at the IF centre,
    full-scale deviation spans the code range, bit-exact C."""
    # An N-bit code's own rounding limits the SINAD to about 6.02 N + 1.76 dB at full scale, less
    # 3.1 dB at the test's 70 % level (the uniform quantiser, common practice, no source): 12 bits
    # (~70 dB) already cost a few dB on a design near 71 dB, 8 bits (~46 dB) cost ~25 dB. The
    # [fixed] target binds every command, so this test of the code mapping allows the top of its
    # range for the narrow codes; 16 bits meet the default 0.5 dB.
    d = edgetally.design(_spec("orchard_link.toml", output__format=fmt,
                               **({"fixed__loss_limit_db": 40.0} if bits < 16 else {})))
    assert (d.output.lo, d.output.hi, d.output.mid) == (0, (1 << bits) - 1, 1 << (bits - 1))
    res = verify(d, seconds=0.3)
    assert res.bit_exact
    out = model.run(d, make_inputs(d, 0.3, seed=1)).out.astype(np.int64)
    settled = out[len(out) // 3:]
    assert abs(np.mean(settled) - (1 << (bits - 1))) < 0.01 * (1 << bits)     # centred: no DC
    # 70 % deviation tone: amplitude (least-squares fit) 0.7 of half the code range, times the
    # CIC's droop at 1 kHz (closed form) and the droop compensator's gain there
    # (scipy.signal.sosfreqz of its quantised sections, Q(coef_bits) read back as floats), within
    # 0.2 dB: the elliptic pass band ripples by 0.1 dB, the code's rounding and the estimator's own
    # error add far less
    from scipy import signal
    from edgetally.designer import wordlength

    power, _ = metrics.tone_fit(settled.astype(float), d.rates.out_hz, 1000.0)
    rows = [r for r, s in zip(wordlength.quantised_rows(d.filters, d.scale.q), d.filters.sections) if s.role == "droop"]
    comp = 1.0
    if rows:
        _, h = signal.sosfreqz(np.array(rows), worN=[0.0, 1000.0], fs=d.rates.out_hz)
        comp = abs(h[1]) / abs(h[0])                 # the compensator's gain at 1 kHz against DC
    expected = 0.7 * (1 << (bits - 1)) * comp * 10 ** (cic.response_db(1000.0 / d.rates.out_hz, d.cic.order, d.cic.ratio) / 20)
    assert abs(20 * np.log10(np.sqrt(2 * power) / expected)) <= 0.2


def test_offset_output_reads_the_tuning_error_and_the_audio_has_no_dc():
    """An IF 3 kHz above the nominal centre: the offset output reads +3 kHz (within the ripple the
    one-pole tracker leaves from the 1 kHz tone: deviation x corner / tone frequency), and the
    audio carries no DC."""
    d = edgetally.design(edgetally.load_spec(EXAMPLES / "campus_fm.toml"))
    tone = signals.Tone(1000.0, 0.7 * d.full_scale_hz, 0.3)
    sig = signals.FmSignal(d.if_hz + 3000.0, (tone,), 0.25)
    inputs = make_inputs(d, 0.6, seed=5, sig=sig)
    host = hostbuild.build(d)
    out, counters = host.process(inputs)
    want = model.run(d, inputs)
    np.testing.assert_array_equal(out, want.out)
    hz = counters["offset"] * d.full_scale_hz / 2 ** d.scale.q
    corner = d.rates.out_hz / (2 * math.pi * 2 ** d.scale.dc_shift)
    ripple = tone.deviation_hz * corner / tone.freq_hz
    assert abs(hz - 3000.0) <= 1.2 * ripple + 10
    tail = out[-int(0.2 * d.rates.out_hz):].astype(float)
    assert abs(np.mean(tail)) < 0.002 * 32768           # 3 kHz would be 4 % of full scale as DC
