"""Every variant the planner can choose, emitted and checked bit for bit at least once: on the host
(cffi, the standard test and a hostile stream) and in the emulator (one Cortex-M0+ class core, the
class the planner's cheapest options are for).

The variants: the stamp estimators (linear, cubic) at every capture prescaler (1, 2, 4, 8), the
edge interrupt's stamp (linear, cubic) and count forms, the IF-clocked counter, and each output
arithmetic (narrow, shaped, mid, wide). Each is forced with ``plan(variant=...)`` and the designer's overrides on
a scenario of our own whose budget lets every variant through (the point here is the code paths,
not the choice). Bit-exact means equal on every output sample, compared in full, and equal gap and
clamp counts.
"""

from __future__ import annotations

import numpy as np
import pytest

import edgetally
from edgetally.check import hostbuild, model
from edgetally.designer.assemble import design as assemble_design
from edgetally.planner.choose import plan
from edgetally.stimulus.inputs import make_inputs
from edgetally.target.check import available_cores, target_check

from conftest import scale_forms

# A demo scenario (invented): a pump controller's FM telemetry at a 20 kHz IF, +-5 kHz, 2.5 kHz
# band, read by a 48 MHz Cortex-M0+ class part with a 16-bit timer; a generous budget so that every
# way of seeing the edges is feasible.
SCENARIO = {
    "name": "pump",
    "signal": {"if_hz": 20000, "deviation_hz": 5000, "audio_hz": 2500},
    "output": {"rate_hz": 8000, "format": "s16", "full_scale_hz": 5000},
    "target": {"core": "cortex-m0plus", "cpu_hz": 48_000_000, "timer_hz": 48_000_000, "timer_bits": 16,
               "capture_dma": False, "cpu_budget": 0.95},
}

# (scheme, variant label, output arithmetic or None for the designer's choice)
VARIANTS = [("timestamp", f"k{k}-{order}", None) for k in (1, 2, 4, 8) for order in ("linear", "cubic")]
VARIANTS += [("interrupt", "stamp-linear", None), ("interrupt", "stamp-cubic", None), ("interrupt", "count", None),
             ("counter", "count", None), ("timestamp", "k1-linear", "narrow"), ("timestamp", "k1-linear", "mid"),
             ("timestamp", "k1-linear", "wide"), ("timestamp", "k1-linear", "shaped")]


# The same link on an M4-class part (a divide instruction): its stamp fronts divide per grid instant
# instead of using the reciprocal (planner.schemes.uses_reciprocal); both estimators checked there.
M4 = {**SCENARIO, "target": {**SCENARIO["target"], "core": "cortex-m4"}}
M4_VARIANTS = [("timestamp", "k1-linear", None, "m4"), ("timestamp", "k1-cubic", None, "m4")]


def _design(scheme, label, arith, core=None):
    spec = edgetally.parse_spec(M4 if core == "m4" else SCENARIO)
    p = plan(spec, scheme=scheme, variant=label)
    # the designer itself: the variant and arithmetic are forced, not chosen by simulation
    return assemble_design(spec, p, overrides={"arith": arith} if arith else None)


BASE_FORMS = ["s32-w32", "s32-w64", "s64-w32", "s64-w64", "split-w64-level64"]


@pytest.fixture(scope="module")
def built():
    out = {v: _design(*v) for v in VARIANTS + M4_VARIANTS}
    narrow = out[("timestamp", "k1-linear", "narrow")]
    assert (narrow.scale.product, narrow.scale.word) == ("split", 32)
    out.update(scale_forms(narrow))
    return out


def test_every_variant_is_covered(built):
    # every variant the M0+ class profile offers the planner appears above, and each arithmetic
    from edgetally.planner import schemes

    spec = edgetally.parse_spec(SCENARIO)
    offered = {(v.scheme, v.label) for v, why in schemes.variants(spec.target) if why is None}
    assert offered == {(s, lab) for s, lab, _ in VARIANTS}
    assert {d.filters.acc_bits for d in built.values()} == {32, 48, 64}
    assert {d.filters.shaped for d in built.values()} == {True, False}
    assert {d.front.prescale for d in built.values()} == {1, 2, 4, 8}
    assert {d.cubic for d in built.values()} == {True, False}
    assert {d.front.divide for d in built.values() if d.stamps} == {"reciprocal", "division"}
    assert all(built[v].front.divide == "division" for v in M4_VARIANTS)
    # every word form of the scale / tracker / output stage and of the squelch level
    forms = {(d.scale.product, d.scale.word) for d in built.values()}
    assert {("s32", 32), ("s32", 64), ("split", 32), ("split", 64), ("split_low", 64), ("s64", 32), ("s64", 64)} <= forms
    assert {d.squelch.level_bits for d in built.values()} == {32, 64}


ALL = VARIANTS + M4_VARIANTS + BASE_FORMS
IDS = ["-".join(filter(None, v)) if isinstance(v, tuple) else v for v in ALL]


@pytest.mark.parametrize("v", ALL, ids=IDS)
def test_variant_bit_exact_on_host(built, v):
    d = built[v]
    if isinstance(v, tuple):
        assert (d.scheme, d.variant) == v[:2]
    if isinstance(v, tuple) and v[2]:
        assert d.filters.acc_bits == {"narrow": 32, "shaped": 32, "mid": 48, "wide": 64}[v[2]]
        assert d.filters.shaped == (v[2] == "shaped")
    host = hostbuild.build(d)
    inputs = make_inputs(d, 0.3, seed=17)
    want = model.run(d, inputs)
    got, counters = host.process(inputs)
    assert got.size == want.out.size >= 0.25 * d.rates.out_hz
    np.testing.assert_array_equal(got, want.out)
    assert counters["gaps"] == want.gaps and counters["clamps"] == want.clamps
    # a hostile tail: random inputs after the signal (short intervals, wild counts) stay bit-exact
    rng = np.random.default_rng(5)
    mask = (1 << d.input_bits) - 1
    step = d.front.grid_ticks if d.stamps else 4
    tail = inputs.astype(np.int64)[-1] + np.cumsum(rng.integers(1, 3 * step, size=2000))
    hostile = np.concatenate([inputs.astype(np.int64), tail & mask]).astype(inputs.dtype)
    want = model.run(d, hostile)
    got, counters = hostbuild.build(d).process(hostile)
    np.testing.assert_array_equal(got, want.out)
    assert counters["gaps"] == want.gaps and counters["clamps"] == want.clamps


@pytest.mark.slow
@pytest.mark.parametrize("v", ALL, ids=IDS)
def test_variant_bit_exact_in_emulator(built, v):
    core = "cortex-m4" if v in M4_VARIANTS else "cortex-m0plus"
    if core not in available_cores():
        pytest.skip("no arm-none-eabi-gcc or unicorn here")
    res = target_check(built[v], seed=17, seconds=0.1, cores=(core,))[core]
    assert res["bit_exact"] and res["samples"] > 0
    assert res["isa_violations"] == []
