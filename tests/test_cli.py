"""The command line: emit (files, reruns, edits, --force, determinism), plan, verify, arguments.

Each CLI process spends about a second importing scipy, so the runs that do not depend on each
other are started side by side in one fixture; the emit rerun sequence runs in order on its own.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

import edgetally

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
ORCHARD = EXAMPLES / "orchard_link.toml"
CAMPUS = EXAMPLES / "campus_fm.toml"
# the unit test sits in a subfolder of its own, so its build files cannot meet the user's
ORCHARD_FILES = {"orchard.h", "orchard.c", "orchard_port.c", "orchard_design.json", "orchard_test/orchard_test.c",
                 "orchard_test/orchard_vectors.h", "orchard_test/Makefile", "orchard_test/CMakeLists.txt"}


def _cli(*args) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "edgetally", *map(str, args)], capture_output=True, text=True,
                          timeout=300)


def _tree(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` by its relative path, without edgetally's hidden bookkeeping
    (the lock file and the manifest)."""
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file() and not p.name.startswith(".")}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Independent CLI runs, started side by side: {run id: CompletedProcess}, plus the emit folders."""
    base = tmp_path_factory.mktemp("cli")
    folders = {"a": base / "a", "b": base / "b" / "nested", "campus": base / "campus", "report": base / "report"}
    (base / "plain-file").write_text("not a folder\n")
    jobs = {
        "emit-a": ["emit", ORCHARD, "-o", folders["a"]],
        "emit-b": ["emit", ORCHARD, "-o", folders["b"]],
        "emit-campus": ["emit", CAMPUS, "-o", folders["campus"]],
        "plan-json": ["plan", ORCHARD, "--json"],
        "plan-text": ["plan", ORCHARD],
        "verify": ["verify", ORCHARD, "--json", "--seconds", "0.3"],
        "seconds-0": ["verify", ORCHARD, "--seconds", "0"],
        "seconds--1": ["verify", ORCHARD, "--seconds", "-1"],
        "unknown-command": ["frobnicate", ORCHARD],
        "version": ["--version"],
        "verify-more": ["verify", ORCHARD, "--json", "--seconds", "0.3", "--no-target", "--sweep", "tone",
                        "--points", "300,1000", "--scenario", "signal-loss", "--scenario", "inputs-lost"],
        "points-bad": ["verify", ORCHARD, "--no-target", "--sweep", "tone", "--points", "300,1e9"],
        "points-text": ["verify", ORCHARD, "--no-target", "--sweep", "cnr", "--points", "ten"],
        "points-alone": ["verify", ORCHARD, "--no-target", "--points", "1,2"],
        "loss-bad": ["verify", ORCHARD, "--no-target", "--scenario", "signal-loss", "--loss-ms", "-5"],
        "report": ["report", ORCHARD, "-o", folders["report"], "--no-target", "--seconds", "0.3"],
        "report-to-file": ["report", ORCHARD, "-o", base / "plain-file", "--no-target"],
    }
    with ThreadPoolExecutor(max_workers=max(2, os.cpu_count() or 2)) as pool:
        futures = {rid: pool.submit(_cli, *args) for rid, args in jobs.items()}
        results = {rid: f.result() for rid, f in futures.items()}
    results["folders"] = folders
    return results


# --- emit ---------------------------------------------------------------------------------------

def test_emit_writes_header_source_and_design(runs):
    r, folder = runs["emit-a"], runs["folders"]["a"]
    assert r.returncode == 0, r.stderr
    assert set(_tree(folder)) == ORCHARD_FILES
    assert sorted(r.stdout.splitlines()) == sorted(f"written: {folder / n}" for n in ORCHARD_FILES)
    design = json.loads((folder / "orchard_design.json").read_text(encoding="utf-8"))
    assert design["name"] == "orchard"


def test_emit_creates_missing_nested_folder(runs):
    r, folder = runs["emit-b"], runs["folders"]["b"]
    assert r.returncode == 0, r.stderr
    assert set(_tree(folder)) == ORCHARD_FILES


def test_emit_is_deterministic(runs):
    a, b = _tree(runs["folders"]["a"]), _tree(runs["folders"]["b"])
    assert set(a) == ORCHARD_FILES
    assert a == b


def _c_code_only(text: str) -> str:
    """C text without comments and string or character literals."""
    pattern = r'/\*.*?\*/|//[^\n]*|"(?:\\.|[^"\\\n])*"|\'(?:\\.|[^\'\\\n])*\''
    return re.sub(pattern, " ", text, flags=re.S)


@pytest.mark.parametrize("run, name", [("emit-a", "orchard"), ("emit-campus", "campus")])
def test_emitted_c_is_integer_only_and_static(runs, run, name):
    r = runs[run]
    assert r.returncode == 0, r.stderr
    folder = runs["folders"]["a" if run == "emit-a" else "campus"]
    for suffix in (".h", ".c"):
        text = (folder / f"{name}{suffix}").read_text(encoding="utf-8")
        code = _c_code_only(text)
        # The comment stripper must leave the code: the prefixed symbols and fixed-width integers.
        assert f"{name}_" in code and "int32_t" in code, f"{name}{suffix}: no code left after stripping"
        found = re.findall(r"\b(float|double|malloc|calloc|realloc|free)\b", code)
        assert found == [], f"{name}{suffix} uses {sorted(set(found))}"


def test_emit_rerun_edit_and_force(tmp_path):
    out = tmp_path / "out"
    first = _cli("emit", ORCHARD, "-o", out)
    assert first.returncode == 0, first.stderr
    original = _tree(out)
    assert set(original) == ORCHARD_FILES

    # An identical second run writes nothing and says so for every file.
    second = _cli("emit", ORCHARD, "-o", out)
    assert second.returncode == 0, second.stderr
    assert sorted(second.stdout.splitlines()) == sorted(f"unchanged: {out / n}" for n in ORCHARD_FILES)
    assert _tree(out) == original

    # A hand edit is not overwritten without --force; the refusal names the file.
    edited = original["orchard.c"] + b"/* local edit */\n"
    (out / "orchard.c").write_bytes(edited)
    refused = _cli("emit", ORCHARD, "-o", out)
    assert refused.returncode == 2
    assert "Traceback" not in refused.stderr
    lines = refused.stderr.splitlines()
    assert len(lines) == 1 and "orchard.c" in lines[0], refused.stderr
    assert "orchard.h" not in lines[0] and "orchard_design.json" not in lines[0] and "Makefile" not in lines[0]
    assert (out / "orchard.c").read_bytes() == edited
    assert {n: b for n, b in _tree(out).items() if n != "orchard.c"} == \
        {n: b for n, b in original.items() if n != "orchard.c"}

    # --force restores the emitted content and touches only the edited file.
    forced = _cli("emit", ORCHARD, "-o", out, "--force")
    assert forced.returncode == 0, forced.stderr
    assert _tree(out) == original
    assert sorted(forced.stdout.splitlines()) == sorted(
        [f"written: {out / 'orchard.c'}"] + [f"unchanged: {out / n}" for n in ORCHARD_FILES if n != "orchard.c"])


# --- plan ---------------------------------------------------------------------------------------

def test_plan_json_is_one_object(runs):
    r = runs["plan-json"]
    assert r.returncode == 0, r.stderr
    obj = json.loads(r.stdout)  # fails on anything but one JSON document
    assert isinstance(obj, dict)
    assert {"scheme", "ratio", "grid_hz", "options"} <= set(obj)
    assert obj["scheme"] == "timestamp"  # orchard_link: capture, linear (the settled choice)
    assert isinstance(obj["options"], list) and obj["options"]
    # The grid is the output rate times the CIC ratio (orchard: 8000 Hz output).
    assert obj["grid_hz"] == 8000 * obj["ratio"]
    kept = [o for o in obj["options"] if o["kept"]]
    assert len(kept) == 1
    assert (kept[0]["scheme"], kept[0]["variant"], kept[0]["ratio"]) == (obj["scheme"], obj["variant"], obj["ratio"])


def test_plan_text_marks_one_choice(runs):
    r = runs["plan-text"]
    assert r.returncode == 0, r.stderr
    chosen = [ln for ln in r.stdout.splitlines() if "CHOSEN" in ln]
    assert len(chosen) == 1, r.stdout
    assert r.stdout.startswith("edgetally plan for 'orchard'")


def test_plan_text_and_json_agree(runs):
    obj = json.loads(runs["plan-json"].stdout)
    chosen = next(ln for ln in runs["plan-text"].stdout.splitlines() if "CHOSEN" in ln)
    scheme, variant, ratio, grid = chosen.split()[:4]
    assert (scheme, variant, int(ratio), int(grid)) == (obj["scheme"], obj["variant"], obj["ratio"], obj["grid_hz"])


# --- verify -------------------------------------------------------------------------------------

def test_verify_json_is_bit_exact(runs):
    r = runs["verify"]
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert res["bit_exact"] is True
    assert res["mismatches"] == 0
    assert isinstance(res["samples"], int) and not isinstance(res["samples"], bool)
    assert res["samples"] > 0
    from edgetally.target.check import available_cores

    cores = available_cores()
    if cores:
        # the cycle figures and the ratio against the hand-written float chain are in verify's
        # output, for every emulated core installed here (float may win on an FPU core)
        assert set(res["target"]) == set(cores) and res["target_bit_exact"] is True
        for t in res["target"].values():
            assert t["cycles_per_output_sample"] > 0 and t["float_cycles_per_output_sample"] > 0
            assert t["float_ratio"] == round(t["float_cycles_per_output_sample"] / t["cycles_per_output_sample"], 2)
            assert t["isa_violations"] == []


@pytest.mark.parametrize("run, shown", [("seconds-0", "0"), ("seconds--1", "-1")], ids=["zero", "negative"])
def test_verify_refuses_bad_seconds(runs, run, shown):
    r = runs[run]
    assert r.returncode == 2
    assert r.stdout == ""
    assert "Traceback" not in r.stderr
    lines = r.stderr.splitlines()
    assert len(lines) == 1 and "--seconds" in lines[0] and shown in lines[0], r.stderr


def test_verify_json_carries_sweeps_and_scenarios(runs):
    r = runs["verify-more"]
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert res["bit_exact"] is True
    (sw,) = res["sweeps"]
    assert sw["kind"] == "tone" and [p["x"] for p in sw["points"]] == [300.0, 1000.0]
    assert all(p["bit_exact"] for p in sw["points"])
    assert [h["name"] for h in res["scenarios"]] == ["signal-loss", "inputs-lost"]
    assert all(h["passed"] for h in res["scenarios"])


@pytest.mark.parametrize("run, shown", [("points-bad", "1e+09"), ("points-text", "ten"), ("points-alone", "--sweep"),
                                        ("loss-bad", "--loss-ms"), ("report-to-file", "not a folder")])
def test_bad_measurement_options_exit_2_with_one_line(runs, run, shown):
    r = runs[run]
    assert r.returncode == 2, r.stderr
    assert "Traceback" not in r.stderr
    lines = r.stderr.splitlines()
    assert len(lines) == 1 and shown in lines[0], r.stderr


def test_report_writes_the_page_and_the_wavs(runs):
    r = runs["report"]
    assert r.returncode == 0, r.stderr
    folder = runs["folders"]["report"]
    names = {p.name for p in folder.iterdir() if not p.name.startswith(".")}   # not the lock file and manifest
    assert names == {"orchard_report.html", "orchard_tone.wav", "orchard_two_tone.wav", "orchard_sweep.wav"}
    page = (folder / "orchard_report.html").read_text(encoding="utf-8")
    for section in ("Plan", "Chain", "Sweeps", "Hostile conditions", "Listening"):
        assert f">{section}<" in page
    assert "all passed" in r.stdout and r.stdout.count("written: ") == 4
    assert r.stderr == ""            # not a terminal: no progress bar


# --- arguments ----------------------------------------------------------------------------------

def test_unknown_subcommand_exits_2(runs):
    r = runs["unknown-command"]
    assert r.returncode == 2
    assert r.stdout == ""
    assert "frobnicate" in r.stderr
    assert "Traceback" not in r.stderr


def test_version(runs):
    r = runs["version"]
    assert r.returncode == 0
    assert r.stdout.strip() == f"edgetally {edgetally.__version__}"
    assert re.fullmatch(r"\d+\.\d+\.\d+\S*", edgetally.__version__)


def test_cli_name_lists_match_the_api():
    """The CLI keeps its own copies of these names so that a bad argument is refused before scipy
    and numpy load; they must stay equal to the API's."""
    from edgetally.cli import main as cli
    from edgetally.measure import hostile
    from edgetally.measure import sweeps
    from edgetally.planner.choose import SCHEMES

    assert tuple(cli.SCHEME_NAMES) == tuple(SCHEMES)
    assert tuple(cli.SWEEP_KINDS) == tuple(sweeps.KINDS)
    assert tuple(cli.SCENARIO_NAMES) == tuple(hostile.SCENARIOS)
