"""The output rate holds through a signal loss on stamp designs: the service loop's clock drives
<name>_advance, which makes the grid instants that pass with no edges (muted), bit-exact with the
model (model.clocked)."""

from __future__ import annotations

import pytest

from edgetally.designer.assemble import design
from edgetally.measure import hostile

from conftest import ALL_DESIGNS
from test_standard_test import band_spec

STAMPS = sorted(k for k, d in ALL_DESIGNS.items() if d.stamps)


@pytest.mark.parametrize("loss_ms", [5.0, 50.0])
@pytest.mark.parametrize("key", STAMPS)
def test_loss_keeps_the_output_rate(key, loss_ms):
    d = ALL_DESIGNS[key]
    r = hostile.run_scenario(d, "signal-loss", options=hostile.Options(loss_ms=loss_ms))
    assert r.bit_exact and r.flag_raised
    # output_ok holds the rate check: the samples made during the loss within one per 10 ms of
    # loss_ms * out_hz (RATE_SLACK_S), and silence once the chain has forgotten the tone
    assert r.output_ok and "at the output rate" in r.output_note, r.output_note
    assert r.passed, (r.recovery_ms, r.predicted_recovery_ms)


def test_cubic_stamps_keep_the_output_rate():
    d = design(band_spec(300))          # a four-stamp (cubic) front: one stamp of look-ahead more
    assert d.cubic
    r = hostile.run_scenario(d, "signal-loss", options=hostile.Options(loss_ms=50.0))
    assert r.bit_exact and r.output_ok and r.passed, r.output_note


def test_count_designs_need_no_clock():
    # counts are read on the grid timer, edges or not: the output rate never depended on the edges
    for key, d in ALL_DESIGNS.items():
        if not d.stamps:
            r = hostile.run_scenario(d, "signal-loss")
            assert r.bit_exact and "at the output rate" not in r.output_note
