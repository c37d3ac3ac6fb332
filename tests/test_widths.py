"""The widths command: the table on every example, and the user's own word lengths re-checked."""

import json
import subprocess
import sys

import pytest

from conftest import EXAMPLE_FILES, EXAMPLES


def _widths(*args):
    return subprocess.run(
        [sys.executable, "-m", "edgetally", "widths", *map(str, args)], capture_output=True, text=True
    )


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.stem)
def test_every_example_is_safe(path):
    r = _widths(path, "--json")
    assert r.returncode == 0, r.stdout + r.stderr
    rep = json.loads(r.stdout)
    assert rep["ok"] and rep["bit_exact"] is True and not rep["failures"]
    assert all(reg["margin_bits"] >= 0 for reg in rep["registers"])
    assert rep["simulated_loss_db"] <= 0.5  # issue acceptance: loss at most 0.5 dB


def test_too_narrow_accumulator_is_named():
    """32-bit accumulators under 32-bit data: every product and sum overflows; exit 1, each named,
    and no C is run (it would be undefined)."""
    # the wide arithmetic named: with 32-bit sums alone any arithmetic whose sums fit would do
    r = _widths(EXAMPLES / "campus_fm.toml", "--set", "filters.arith=wide", "--set", "filters.acc_bits=32", "--json")
    assert r.returncode == 1
    rep = json.loads(r.stdout)
    named = " ".join(rep["failures"])
    for k in range(3):
        assert f"iir.{k}.acc" in named and f"iir.{k}.product" in named
    assert rep["bit_exact"] is None


def test_too_few_coefficient_bits_fail_the_response():
    # the 64-bit accumulator takes any coefficient width; 6 bits move the poles (the check's job)
    r = _widths(
        EXAMPLES / "orchard_link.toml", "--set", "filters.arith=wide", "--set", "filters.coef_bits=6", "--no-simulate"
    )
    assert r.returncode == 1 and "response error" in r.stdout


def test_split_arithmetic_names_its_coefficient_range():
    # the split 16-bit coefficient products hold Q8..Q16 only: a width outside is a spec error
    r = _widths(EXAMPLES / "orchard_link.toml", "--set", "filters.arith=mid", "--set", "filters.coef_bits=6")
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "Q8..Q16" in r.stderr


@pytest.mark.parametrize(
    "sets",
    [
        ["filters.arith=wide", "filters.coef_bits=20"],
        ["filters.arith=mid"],
        ["filters.arith=narrow"],
        ["filters.arith=wide", "filters.scaling=l2"],
    ],
    ids=lambda s: ",".join(s),
)
def test_changed_widths_stay_bit_exact(sets):
    """Issue acceptance: bit-exact verification still passes after every width change (whether or
    not the new widths meet the noise target)."""
    args = [EXAMPLES / "orchard_link.toml", "--json"]
    for s in sets:
        args += ["--set", s]
    rep = json.loads(_widths(*args).stdout)
    assert rep["bit_exact"] is True


def test_narrow_arithmetic_on_a_wideband_design_misses_the_loss_target():
    r = _widths(EXAMPLES / "campus_fm.toml", "--set", "filters.arith=narrow", "--json")
    rep = json.loads(r.stdout)
    assert r.returncode == 1 and rep["bit_exact"] is True
    assert any("implementation loss" in f for f in rep["failures"])


@pytest.mark.parametrize("bad", ["filters.acc_bits=24", "filters.colour=3", "acc_bits=32", "filters.coef_bits=x"])
def test_bad_set_is_a_one_line_error(bad):
    r = _widths(EXAMPLES / "orchard_link.toml", "--set", bad)
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "--set" in r.stderr
