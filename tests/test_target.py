"""The emitted C cross-compiled for Cortex-M0+ and Cortex-M4 (strict flags, freestanding) and run
in an instruction emulator equals the integer model on every sample; instruction counts per event
are measured and plausible.

Needs arm-none-eabi-gcc with libgcc (Debian: gcc-arm-none-eabi) and the Python packages unicorn and
pyelftools; skipped with the reason when one is missing. capstone is optional (cycle classes).
"""

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

from edgetally.check import model
from edgetally.target import build as target
from edgetally.target import cycles as target_cycles
from edgetally.target import run as target_run
from edgetally.stimulus.inputs import make_inputs

from conftest import ALL_DESIGNS, EXAMPLES

for _mod in ("unicorn", "elftools"):
    pytest.importorskip(_mod, reason=f"the Python package {_mod} is not installed (pip install "
                                      f"{'pyelftools' if _mod == 'elftools' else _mod})")
if target.toolchain() is None:
    pytest.skip("arm-none-eabi-gcc is not installed (Debian package gcc-arm-none-eabi)", allow_module_level=True)

CORES = sorted(target.CORE_FLAGS)
IDS = sorted(ALL_DESIGNS)
AUTO_IDS = [k for k in IDS if k.endswith(":auto")]
COUNTER_KEYS = ("gaps", "clamps", "saturations", "clips")


@pytest.fixture(scope="module")
def builds(tmp_path_factory):
    """Every design x core at -Os, and the chosen scheme of each example at -O2 as well."""
    root = tmp_path_factory.mktemp("target")
    jobs = [(k, c, "-Os") for k in IDS for c in CORES] + [(k, c, "-O2") for k in AUTO_IDS for c in CORES]

    def one(job):
        k, c, opt = job
        wd = root / f"{k.replace(':', '_')}_{c}{opt}"
        try:
            return job, target.cross_build(ALL_DESIGNS[k], c, opt=opt, workdir=wd)
        except target.TargetBuildError as e:      # reported by the test of that build, not here
            return job, e

    with ThreadPoolExecutor(max_workers=2) as pool:
        return dict(pool.map(one, jobs))


def _get(builds, key, core, opt="-Os"):
    b = builds[(key, core, opt)]
    if isinstance(b, Exception):
        pytest.fail(f"cross build failed:\n{b}")
    return b


_MODEL = {}


def _model(key, seconds, seed):
    if (key, seconds, seed) not in _MODEL:
        x = make_inputs(ALL_DESIGNS[key], seconds, seed=seed)
        _MODEL[(key, seconds, seed)] = (x, model.run(ALL_DESIGNS[key], x))
    return _MODEL[(key, seconds, seed)]


def _assert_equal(got: target_run.TargetRun, want: model.ModelRun):
    assert got.outputs.dtype == want.out.dtype
    assert got.outputs.size == want.out.size > 0
    np.testing.assert_array_equal(got.outputs, want.out)
    assert {k: got.counters[k] for k in COUNTER_KEYS} == {k: getattr(want, k) for k in COUNTER_KEYS}


@pytest.mark.parametrize("core", CORES)
@pytest.mark.parametrize("key", IDS)
def test_cross_build_strict(builds, key, core):
    """-Os under -Wall -Wextra -Wpedantic -Wconversion -Wsign-conversion -Werror, freestanding;
    the sizes come out of the ELF."""
    b = _get(builds, key, core)
    p = ALL_DESIGNS[key].name
    assert b.elf.is_file()
    for fn in ("init", "process", "service"):
        assert b.flash_by_function.get(f"{p}_{fn}", 0) > 0
    assert f"{p}_coef" in b.flash_by_object
    assert 0 < b.flash_demod < b.flash_total < 16384
    assert 0 < b.ram_state <= b.ram_total
    assert b.ram_by_object["harness_state"] == b.ram_state


@pytest.mark.parametrize("path, seconds, seed", [("block", 0.05, 1), ("isr", 0.02, 5)])
@pytest.mark.parametrize("core", CORES)
@pytest.mark.parametrize("key", IDS)
def test_target_equals_model(builds, key, core, path, seconds, seed):
    """Block path (<name>_process in blocks of 4096), and the scheme's ISR function(s) per input
    with <name>_service every quarter queue: every sample and the counters."""
    d = ALL_DESIGNS[key]
    x, want = _model(key, seconds, seed)
    got = target_run.run(_get(builds, key, core), d, x, isr=path == "isr")
    _assert_equal(got, want)
    assert got.counters["overruns"] == 0


@pytest.mark.parametrize("core", CORES)
@pytest.mark.parametrize("key", AUTO_IDS)
def test_o2_build_equals_model(builds, key, core):
    d = ALL_DESIGNS[key]
    x, want = _model(key, 0.05, 1)
    _assert_equal(target_run.run(_get(builds, key, core, "-O2"), d, x, block=997), want)


@pytest.mark.parametrize("core", CORES)
@pytest.mark.parametrize("key", AUTO_IDS)
def test_measure_plausible(builds, key, core):
    d = ALL_DESIGNS[key]
    x, _ = _model(key, 0.05, 1)
    c = target_cycles.measure(_get(builds, key, core), d, x)
    assert c.inputs > 1000 and c.grid_instants > 0 and c.outputs > 10
    assert set(c.isr_instr) == set(target_cycles.isr_functions(d))
    for name, n in c.isr_instr.items():
        assert 3 <= n < 60, name
        assert c.isr_cycles[name] >= n and c.isr_cycles_with_entry[name] > c.isr_cycles[name]
    assert 5 < c.instr_per_grid < 400
    assert 0 < c.instr_per_input < 2000
    assert 50 < c.instr_per_output < 5000
    assert c.instr_per_output_total >= c.instr_per_output
    assert c.cycles_per_grid >= c.instr_per_grid and c.cycles_per_output >= c.instr_per_output
    assert 0 < c.stack_bytes < 1024


def test_cores_differ_where_expected(builds):
    """The M0+ has no divide and no long multiply: the output path (64-bit products) and a stamp
    front end (division) cost more instructions there than on the M4."""
    key = "campus_fm:timestamp"
    d = ALL_DESIGNS[key]
    x, _ = _model(key, 0.05, 1)
    m0 = target_cycles.measure(_get(builds, key, "cortex-m0plus"), d, x)
    m4 = target_cycles.measure(_get(builds, key, "cortex-m4"), d, x)
    assert m0.instr_per_output > m4.instr_per_output
    assert m0.instr_per_input > m4.instr_per_input


def test_build_errors_carry_the_compiler_output(tmp_path):
    d = ALL_DESIGNS[AUTO_IDS[0]]
    with pytest.raises(ValueError, match="unknown core"):
        target.cross_build(d, "cortex-m99", workdir=tmp_path)
    with pytest.raises(target.TargetBuildError, match="arm-none-eabi-gcc"):
        target.cross_build(d, "cortex-m4", opt="-Onot-a-level", workdir=tmp_path)


def test_plan_measured_drops_an_option_over_budget(tmp_path):
    """plan --measured uses the emulated figures: campus_fm with a 45 % budget fits by estimate at
    R = 5 (about 42 %) but measures about 49 %, so that option is dropped and the plan falls back
    to a lighter one whose measured load fits."""
    import json
    import subprocess
    import sys

    text = (EXAMPLES / "campus_fm.toml").read_text().replace("cpu_budget = 0.5", "cpu_budget = 0.45")
    spec = tmp_path / "campus45.toml"
    spec.write_text(text)
    r = subprocess.run([sys.executable, "-m", "edgetally", "plan", str(spec), "--measured", "--json"],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    obj = json.loads(r.stdout)
    dropped = obj["measured"]["dropped_after_measuring"]
    assert dropped and all("exceeds the budget 45%" in d["reason"] for d in dropped)
    assert obj["measured"]["load_fraction"] <= 0.45
    assert (obj["scheme"], obj["variant"], obj["ratio"]) not in {(d["scheme"], d["variant"], d["ratio"]) for d in dropped}
