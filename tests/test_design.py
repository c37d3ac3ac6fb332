"""The Design IR: JSON round trip, determinism, and the word-length bounds it promises."""

import math

import pytest

import edgetally
from edgetally.dsp import cic
from edgetally.emit import emit
from edgetally.ir import Design

from conftest import EXAMPLE_FILES


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.stem)
def test_json_round_trip(path):
    d = edgetally.design(edgetally.load_spec(path))
    again = Design.from_json(d.to_json())
    assert again == d
    assert again.to_json() == d.to_json()


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.stem)
def test_emit_is_deterministic(path):
    a = emit(edgetally.design(edgetally.load_spec(path)))
    b = emit(edgetally.design(edgetally.load_spec(path)))
    assert a == b and len(a) == 3     # header, source, wiring skeleton


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.stem)
def test_word_lengths_cannot_overflow(path):
    d = edgetally.design(edgetally.load_spec(path))
    fr, c, sc = d.front, d.cic, d.scale
    if fr.kind == "stamp":
        # The phase fraction: (g - t_prev) < D <= gap_ticks, shifted by phase_shift, fits 32 bits.
        assert fr.gap_ticks << fr.phase_shift < 1 << 32
    else:
        # The count step: any counter difference, clamped to diff_limit, shifted, fits 32 bits.
        assert fr.diff_limit << fr.step_shift == fr.x_limit < 1 << 32
    # Hogenauer 1981: registers of Bin + ceil(N log2 R) bits make wrap-around harmless; one spare
    # bit keeps the (positive) CIC output below 2**31 so it reads correctly as int32.
    assert fr.x_limit < 1 << (c.in_bits - 1)
    assert cic.full_width(c.in_bits, c.order, c.ratio) <= c.width - 1
    # Scaling product |wrap_s32(y - centre)| * mult stays inside int64.
    assert (1 << 31) * sc.mult < 1 << 63
    # IIR accumulators: with 64 bits, the sum of |coefficient| * data limit + rounding constant
    # fits; with 32 bits, each product does (the certificate covers the final sum).
    f = d.filters
    for s in f.sections:
        coefs = (s.b0, s.b1, s.b2, s.a1, s.a2)
        if f.acc_bits == 64:
            assert sum(abs(v) for v in coefs) * f.limit + (1 << (f.coef_bits - 1)) < 1 << 63
        elif f.acc_bits == 48:
            # the split products: 27-bit data, 16-bit coefficients, every partial sum in the certificate
            assert (f.data_bits, f.coef_width) == (27, 16) and 8 <= f.coef_bits <= 16
            names = {r.name for r in d.certificate}
            assert all(f"iir.{k}.split_{w}" in names for k in range(len(f.sections))
                       for w in ("hi", "mid", "lo", "top", "out"))
        elif f.shaped:
            # one 32-bit product per term taken modulo 2^32: the data word and the coefficient format
            # share 31 bits, so the rounded output times 2^coef_bits plus the rounding half fits
            # int32; the certificate bounds that final sum and the fed-back rounding errors
            assert f.data_bits + f.coef_bits <= 31 and f.coef_width == 16
            names = {r.name for r in d.certificate}
            assert all(f"iir.{k}.acc" in names for k in range(len(f.sections)))
            assert all(f"iir.{k}.error" in names for k, s in enumerate(f.sections) if not s.fir)
        else:
            assert max(abs(v) for v in coefs) * f.limit < 1 << 31 and f.data_bits == f.coef_width == 16
    # Every register of the certificate has a non-negative margin.
    assert d.certificate and all(r.margin_bits >= 0 for r in d.certificate)
    # The 16-bit timer: the gap limit keeps one stamp interval unambiguous.
    if fr.kind == "stamp" and fr.timer_bits == 16:
        assert fr.gap_ticks < 1 << 16


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.stem)
def test_scale_maps_full_scale_deviation(path):
    """Centre and gain: the IF maps to 0, IF + full-scale deviation to 2**q (to the precision of
    the 15-bit multiplier: mult lies in [2**14, 2**15) and is rounded to the nearest integer, so its
    relative error is at most 0.5 / 2**14 = 2**-15)."""
    d = edgetally.design(edgetally.load_spec(path))
    shift = d.front.phase_shift if d.front.kind == "stamp" else d.front.step_shift
    unit = d.rates.grid_hz * d.front.prescale / (2 ** shift * d.cic.ratio ** d.cic.order)   # Hz per CIC LSB
    assert abs(d.scale.centre * unit - d.if_hz) <= unit
    u = d.full_scale_hz / unit * d.scale.mult / 2 ** d.scale.shift
    assert 2 ** 14 <= d.scale.mult < 2 ** 15
    assert math.isclose(u, 2 ** d.scale.q, rel_tol=2 ** -15)
