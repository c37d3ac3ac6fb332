"""The words of the stage before the filter sections (scale product, offset tracker) and of the
output word against the certificate's lines for them, on every example's design (each scheme
forced) and its shaped variant: the extreme inputs reach values inside each line's bound, and near
it, so a bound that is wrong or far too loose fails.

Outside references used here:
- exact integer arithmetic (Python ints) for rshr(y mult, shift), the definition the split product
  must equal (edgetally.fixedpoint.split_scale is compared with it on random values in
  tests/test_fixedpoint.py; here on each design's own extremes);
- C11 7.20.1.1 (exact-width integer types): int32_t holds -2^31 .. 2^31 - 1, the limit every
  32-bit line is held to.
"""

from __future__ import annotations

import pytest

from edgetally.check.choice import settle
from edgetally.designer.assemble import design as assemble_design
from edgetally.fixedpoint import rshr, split_scale, wrap_s32

import edgetally
from conftest import ALL_DESIGNS, EXAMPLE_FILES

INT32_MAX = (1 << 31) - 1


def _shaped():
    out = {}
    for path in EXAMPLE_FILES:
        spec = edgetally.load_spec(path)
        out[f"{path.stem}:shaped"] = assemble_design(spec, settle(spec), overrides={"arith": "shaped"})
    return out


DESIGNS = {**ALL_DESIGNS, **_shaped()}
IDS = sorted(DESIGNS)


def _cert(d):
    return {r.name: r for r in d.certificate}


def _extremes(d):
    """Every CIC output that matters for the scale stage: 0, the largest, the centre and around them."""
    y_max = _cert(d)["cic.output"].bound
    c = d.scale.centre
    return sorted({0, 1, y_max, y_max - 1, c, c - 1, c + 1, (1 << 16) - 1, 1 << 16} & set(range(0, y_max + 1)))


@pytest.mark.parametrize("key", IDS)
def test_scale_product_within_its_lines(key):
    d = DESIGNS[key]
    sc, cert = d.scale, _cert(d)
    assert sc.product in ("s32", "split", "split_low", "s64")
    for y in _extremes(d):
        yc = wrap_s32(y - sc.centre)
        exact = rshr(yc * sc.mult, sc.shift)  # Python ints: no bit lost
        if sc.product in ("split", "split_low"):
            assert split_scale(yc, sc.mult, sc.shift) == exact
            # the two halves' products, as the C forms them (fixedpoint.split_scale)
            half = 1 << (sc.shift - 1)
            if sc.product == "split":
                a = (yc >> 16) * sc.mult + (half >> 16)
                b = (yc & 0xFFFF) * sc.mult + (half & 0xFFFF)
            else:
                a = (yc >> 16) * sc.mult * (1 << (16 - sc.shift))
                b = (yc & 0xFFFF) * sc.mult + half
                assert abs(exact) <= cert["scale.split_hi"].bound
            assert abs(a) <= cert["scale.split_hi"].bound <= INT32_MAX
            assert 0 <= b <= cert["scale.split_lo"].bound <= INT32_MAX
        else:
            line = cert["scale.product"]
            assert abs(yc * sc.mult) + half_of(sc.shift) <= line.bound
            if sc.product == "s32":
                assert line.bits == 32 and line.bound <= INT32_MAX


def half_of(shift: int) -> int:
    return 1 << (shift - 1)


@pytest.mark.parametrize("key", IDS)
def test_tracker_and_output_words_within_their_lines(key):
    # The tracker dc_acc += u - rshr(dc_acc, s) (ir.Scale) fed its worst input, |u| = the scale.out
    # bound held for ten time constants, reaches (u_b + 1/2) 2^s at most; the certificate's
    # offset.acc line, with the rounding half the C adds, must cover it and not by more than the
    # one extra LSB of u its proof allows (designer.wordlength.tracker_bound).
    d = DESIGNS[key]
    sc, f, of, cert = d.scale, d.filters, d.output, _cert(d)
    u_b = cert["scale.out"].bound
    line = cert["offset.acc"]
    assert line.bits == sc.word
    for u in (u_b, -u_b):
        acc, peak = 0, 0
        for _ in range(10 << sc.dc_shift):
            acc += u - rshr(acc, sc.dc_shift)
            peak = max(peak, abs(acc))
        assert peak + half_of(sc.dc_shift) <= line.bound
        assert line.bound <= (u_b + 2) * (1 << sc.dc_shift)
    assert cert["offset.out"].bound == 2 * u_b + 1 and cert["offset.out"].bits == sc.word
    # the output word: the data limit through lmul, the rounding half and mid-scale
    o = f.limit * of.lmul + (half_of(of.rshift) if of.rshift else 0) + abs(of.mid)
    assert cert["output.word"].bound == o and cert["output.word"].bits == sc.word
    if sc.word == 32:
        assert max(line.bound, o, 2 * u_b + 1) <= INT32_MAX
    # the squelch level's word
    assert cert["squelch.level"].bits == d.squelch.level_bits
    if d.squelch.level_bits == 32:
        assert cert["squelch.level"].bound <= INT32_MAX
