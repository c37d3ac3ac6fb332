"""Output files are written whole and never over the user's own: an emit killed at any moment
leaves the old set or the new set; two emits into one folder never both succeed with different
designs; --force leaves a hand-written Makefile alone; folders that cannot take the set are refused
with one line (exit 2) before any file changes; report refuses before it computes."""

from __future__ import annotations

import hashlib
import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from edgetally.cli import folder
from edgetally.cli.main import main
from test_spec_errors import spec, to_toml

# Two designs with the same name (so the same file names) and different content.
SPEC_A = spec()
SPEC_B = spec({"signal.audio_hz": 2500})


def _tree(out: Path) -> dict[str, bytes]:
    """The visible files under ``out`` (not the lock file, manifest or temporary files)."""
    return {p.relative_to(out).as_posix(): p.read_bytes() for p in sorted(out.rglob("*"))
            if p.is_file() and not p.name.startswith(".")}


def _popen(*args) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "edgetally", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


@pytest.fixture(scope="module")
def specs(tmp_path_factory):
    """Spec paths A and B and their complete emitted sets (made in-process)."""
    base = tmp_path_factory.mktemp("sets")
    paths, sets = {}, {}
    for key, d in (("a", SPEC_A), ("b", SPEC_B)):
        paths[key] = base / f"{key}.toml"
        paths[key].write_text(to_toml(d), encoding="utf-8")
        assert main(["emit", str(paths[key]), "-o", str(base / f"set_{key}")]) == 0
        sets[key] = _tree(base / f"set_{key}")
    assert sets["a"].keys() == sets["b"].keys() and sets["a"] != sets["b"]
    return paths, sets


def test_killed_emit_leaves_old_or_new_set(specs, tmp_path):
    paths, sets = specs
    out = tmp_path / "out"
    assert main(["emit", str(paths["a"]), "-o", str(out)]) == 0
    t0 = time.monotonic()
    p = _popen("emit", paths["b"], "-o", out, "--force")
    assert p.wait(timeout=300) == 0, p.stderr.read()
    took = time.monotonic() - t0
    assert _tree(out) == sets["b"]
    rng = random.Random(12)
    seen = set()
    # Kills land anywhere from the start to past the end, most in the second half, where the files
    # are written. SIGINT is Ctrl-C, SIGTERM a process manager; SIGKILL cannot be held back, so
    # after it the next run's roll-forward (folder.recover) must complete the set.
    for k, sig in enumerate([signal.SIGINT, signal.SIGTERM] * 3 + [signal.SIGKILL] * 2):
        key = "ab"[k % 2]
        p = _popen("emit", paths[key], "-o", out, "--force")
        time.sleep(took * rng.uniform(0.3, 1.1))
        p.send_signal(sig)
        p.wait(timeout=300)
        if sig == signal.SIGKILL:
            with folder._locked(out):
                folder.recover(out)
        tree = _tree(out)
        assert tree in (sets["a"], sets["b"]), f"kill {k} ({sig.name}): a mixed set"
        seen.add("a" if tree == sets["a"] else "b")
    # a run after the kills cleans up and leaves no temporary file or journal behind
    assert main(["emit", str(paths["a"]), "-o", str(out), "--force"]) == 0
    assert _tree(out) == sets["a"]
    assert not list(out.rglob(folder.TEMP_PREFIX + "*")) and not (out / folder.JOURNAL).exists()


def test_journal_is_rolled_forward(specs, tmp_path):
    # A commit cut short after its journal (a hard kill mid-rename): the next run completes it.
    paths, sets = specs
    out = tmp_path / "out"
    assert main(["emit", str(paths["a"]), "-o", str(out)]) == 0
    names = sorted(sets["b"])
    moves = []
    for n in names:
        tmp = folder._temp_file((out / n).parent, Path(n).name, sets["b"][n])
        moves.append([os.path.relpath(tmp, out), n])
    # the first two renames were done before the kill
    for t, f in moves[:2]:
        os.replace(out / t, out / f)
    digests = {n: hashlib.sha256(sets["b"][n]).hexdigest() for n in names}
    (out / folder.JOURNAL).write_text(json.dumps({"moves": moves, "digests": digests}))
    assert _tree(out) not in (sets["a"], sets["b"])     # mixed until the roll-forward
    assert main(["emit", str(paths["b"]), "-o", str(out)]) == 0
    assert _tree(out) == sets["b"]


def test_concurrent_emits_of_different_designs_never_both_succeed(specs, tmp_path):
    paths, sets = specs
    for trial in range(2):
        out = tmp_path / f"out{trial}"
        procs = [_popen("emit", paths[k], "-o", out) for k in "ab"]
        codes = [p.wait(timeout=300) for p in procs]
        errs = [p.stderr.read() for p in procs]
        assert sorted(codes) == [0, 2], (codes, errs)
        winner = "ab"[codes.index(0)]
        assert _tree(out) == sets[winner]
        loser = errs[codes.index(2)]
        assert len(loser.splitlines()) == 1 and "-o" in loser, loser


def test_force_leaves_a_hand_written_makefile_alone(specs, tmp_path):
    paths, sets = specs
    out = tmp_path / "fw"
    out.mkdir()
    mine = b"# my firmware build\nall:\n\tcc -o fw main.c orchard.c\n"
    (out / "Makefile").write_bytes(mine)
    (out / "CMakeLists.txt").write_bytes(b"project(fw C)\n")
    assert main(["emit", str(paths["a"]), "-o", str(out), "--force"]) == 0
    assert (out / "Makefile").read_bytes() == mine
    assert (out / "CMakeLists.txt").read_bytes() == b"project(fw C)\n"
    # a hand-written file at one of edgetally's own names is refused even with --force, and no
    # file of the set changes
    test_make = out / "orchard_test" / "Makefile"
    test_make.write_bytes(mine)
    before = _tree(out)
    assert main(["emit", str(paths["b"]), "-o", str(out), "--force"]) == 2
    assert _tree(out) == before
    # an edgetally file edited by hand is replaced with --force (its banner says whose it is)
    test_make.unlink()
    assert main(["emit", str(paths["a"]), "-o", str(out), "--force"]) == 0
    (out / "orchard.c").write_bytes(sets["a"]["orchard.c"] + b"/* edit */\n")
    assert main(["emit", str(paths["a"]), "-o", str(out)]) == 2
    assert main(["emit", str(paths["a"]), "-o", str(out), "--force"]) == 0
    assert (out / "orchard.c").read_bytes() == sets["a"]["orchard.c"]


def _refused(capsys, argv, *words) -> str:
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and "Traceback" not in err and "internal error" not in err, err
    for w in words:
        assert w in lines[0], lines[0]
    return lines[0]


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root writes into read-only folders")
def test_read_only_folder(specs, tmp_path, capsys):
    paths, _ = specs
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        _refused(capsys, ["emit", str(paths["a"]), "-o", str(ro)], "permission")
        _refused(capsys, ["emit", str(paths["a"]), "-o", str(ro / "sub")], "permission")
    finally:
        ro.chmod(0o755)


def test_unwritable_places_are_refused_before_any_change(specs, tmp_path, capsys):
    paths, _ = specs
    a = str(paths["a"])
    afile = tmp_path / "afile"
    afile.write_text("x")
    _refused(capsys, ["emit", a, "-o", str(afile)], "not a folder")
    _refused(capsys, ["emit", a, "-o", str(afile / "sub" / "out")], "is a file")
    dangling = tmp_path / "dangling"
    dangling.symlink_to(tmp_path / "nowhere")
    _refused(capsys, ["emit", a, "-o", str(dangling)], "dangling")
    out = tmp_path / "out"
    (out / "orchard.h").mkdir(parents=True)
    _refused(capsys, ["emit", a, "-o", str(out)], "orchard.h", "folder named like an output")
    out2 = tmp_path / "out2"
    out2.mkdir()
    (out2 / "orchard.c").symlink_to(tmp_path / "nowhere.c")
    _refused(capsys, ["emit", a, "-o", str(out2)], "orchard.c", "link")
    out3 = tmp_path / "out3"
    out3.mkdir()
    (out3 / "orchard_test").write_text("a file where the test folder goes")
    _refused(capsys, ["emit", a, "-o", str(out3)], "orchard_test")
    for place in (out, out2, out3):
        assert not any(p.name.startswith(folder.TEMP_PREFIX) for p in place.rglob("*"))
    assert not os.path.lexists(tmp_path / "nowhere") and not os.path.lexists(tmp_path / "nowhere.c")


def test_report_refuses_a_clash_before_computing(specs, tmp_path, capsys, monkeypatch):
    paths, _ = specs
    out = tmp_path / "rep"
    out.mkdir()
    (out / "orchard_report.html").write_text("<p>my own page</p>")
    from edgetally.report import make as report_make

    def never(*a, **k):
        raise AssertionError("the report was computed before the clash was found")

    monkeypatch.setattr(report_make, "make", never)
    _refused(capsys, ["report", str(paths["a"]), "-o", str(out), "--no-target"], "orchard_report.html")
    assert (out / "orchard_report.html").read_text() == "<p>my own page</p>"


def test_file_names_match_what_emit_writes(specs):
    from edgetally.emit import file_names

    _, sets = specs
    assert set(file_names("orchard")) == set(sets["a"])
