"""The planner's CPU load against the load measured from the emitted C in the emulator.

Every estimate a user relies on is checked against a measurement: for every bundled example and
every scheme forced on it, the design's planned load (edgetally.planner, priced from the calibrated
per-core tables in edgetally/planner/costs.json) must be within 10 % of the load computed from the
cycles per event that the cross-compiled -Os build runs in the emulator
(edgetally.target.check.measured_load). The same holds for designs the calibration never probed:
the examples moved to other cores and timers. Measurements are the emulator's figures (per-class
timing tables on the Arm and RISC-V classes, simavr's exact cycle counter on the AVR), so the check
is of the planner's pricing, not of the cores' timing.
"""

import dataclasses

import numpy as np
import pytest

import edgetally
from edgetally.planner import costs
from edgetally.spec import parse_spec
from edgetally.stimulus.inputs import DEFAULT_SEED, make_inputs
from edgetally.target import build as target

from conftest import ALL_DESIGNS, EXAMPLE_FILES

for _mod in ("unicorn", "elftools", "capstone"):
    pytest.importorskip(_mod, reason=f"the Python package {_mod} is not installed")

# the acceptance bound: the plan's load within 10 % of the emulated load
TOLERANCE = 0.10


def _emulated_load(design):
    from edgetally.target import cycles
    from edgetally.target.check import measured_load

    core = costs.EMULATED_AS.get(design.budget.core, design.budget.core)
    if not target.available(core):
        pytest.skip(f"{core}: cross compiler or emulator not installed")
    b = target.cross_build(design, core, "-Os")
    x = make_inputs(design, 0.05, DEFAULT_SEED)
    c = cycles.measure(b, design, x, max_inputs=2000 if core == "avr" else 4000)
    return measured_load(design, c)


def _check(design):
    got = _emulated_load(design)
    est = design.budget.load_fraction
    assert abs(est - got) <= TOLERANCE * got, (
        f"{design.name} {design.scheme} {design.variant} on {design.budget.core}: planned load {est:.1%}, "
        f"emulated {got:.1%} ({est / got - 1:+.1%})")


@pytest.mark.parametrize("key", sorted(ALL_DESIGNS))
def test_planned_load_matches_emulator(key):
    _check(ALL_DESIGNS[key])


def _moved(path, **target_fields):
    import tomllib

    raw = tomllib.loads(path.read_text())
    raw["target"].update(target_fields)
    raw["target"]["cpu_budget"] = 1.0
    return parse_spec(raw)


# Designs outside the calibration's probes (which keep each example's timer): each example on a
# RISC-V and a Cortex-M4 class core with the other timer width.
HELD_OUT = [(p, core, bits) for p in EXAMPLE_FILES for core, bits in (("rv32imc", 16), ("cortex-m4", 16))]


@pytest.mark.parametrize("path,core,bits", HELD_OUT, ids=[f"{p.stem}-{c}-t{b}" for p, c, b in HELD_OUT])
def test_planned_load_matches_emulator_held_out(path, core, bits):
    try:
        d = edgetally.design(_moved(path, core=core, timer_bits=bits))
    except edgetally.SpecError as e:
        pytest.skip(f"no design: {e}")
    _check(d)


def test_table_records_its_provenance():
    """The shipped table says when and with which compilers it was made, and covers every emulated
    core the planner can name."""
    import importlib.resources
    import json

    t = json.loads(importlib.resources.files("edgetally.planner").joinpath(costs.TABLE_FILE).read_text())
    assert t["generated"] and t["opt"] == "-Os"
    for core in target.TARGETS:
        assert core in t["cores"] and t["compilers"][core]
        assert np.isfinite(t["cores"][core]["output"]["section"]["d32c32a64"])


def test_uncalibrated_override_falls_back():
    """A part whose divider or multiplier the spec overrides is not priced from the core's table
    (its emulated build has neither): the op-count model prices it."""
    from edgetally.planner import schemes

    spec = edgetally.load_spec(EXAMPLE_FILES[0])
    assert schemes.calibrated(spec.target) == (costs.table(spec.target.core) is not None)
    other = dataclasses.replace(spec.target, hw_divide=not spec.target.hw_divide)
    assert not schemes.calibrated(other)


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.stem)
def test_planned_load_matches_emulator_named_shaped(path):
    # a spec that names the shaped arithmetic is planned with it (planner.schemes.planned_filter_cycles)
    import tomllib

    raw = tomllib.loads(path.read_text())
    raw.setdefault("fixed", {})["arith"] = "shaped"
    d = edgetally.design(parse_spec(raw))
    assert d.filters.shaped
    _check(d)



def test_planned_load_matches_emulator_replanned_low_clock():
    # the 24 MHz pin-interrupt voice part (tests/test_choice.py): planned again with the shaped
    # arithmetic's cost, its timestamp design's planned load is within 10 % of the emulated one, and
    # the emulated load is inside its 60 % budget
    from test_choice import _voice

    d = edgetally.design(parse_spec(_voice(24)))
    assert d.scheme == "interrupt" and d.filters.shaped
    _check(d)
    assert _emulated_load(d) <= 0.6
