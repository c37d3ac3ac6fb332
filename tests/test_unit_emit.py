"""The desktop unit test that emit writes in its own subfolder beside the C: it passes with make and with CMake in a
fresh folder, and fails with the failing index when one expected value is altered."""

import re
import shutil
import subprocess
import sys

import pytest

from conftest import EXAMPLES


def _emit(tmp_path, example):
    """Emit into ``tmp_path``; the unit test's own folder (the one subfolder emit makes)."""
    r = subprocess.run([sys.executable, "-m", "edgetally", "emit", str(EXAMPLES / example), "-o", str(tmp_path)],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    (folder,) = [p for p in tmp_path.iterdir() if p.is_dir()]
    assert folder.name.endswith("_test") and (folder / "Makefile").exists()
    return folder


@pytest.mark.parametrize("example", ["tiny_irq.toml", "bench_counter.toml", "weather_station_fsk.toml"])
def test_make_test_passes(tmp_path, example):
    folder = _emit(tmp_path, example)
    r = subprocess.run(["make", "-s", "test"], cwd=folder, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    line = r.stdout.strip().splitlines()[-1]
    m = re.fullmatch(r"\w+ unit test: (\d+) samples, 0 mismatches", line)
    assert m and int(m.group(1)) > 0


@pytest.mark.skipif(shutil.which("cmake") is None, reason="cmake is not installed")
def test_ctest_passes(tmp_path):
    folder = _emit(tmp_path / "src", "orchard_link.toml")
    build = tmp_path / "build"
    for cmd in (["cmake", "-S", str(folder), "-B", str(build)], ["cmake", "--build", str(build)],
                ["ctest", "--test-dir", str(build), "--output-on-failure"]):
        r = subprocess.run(cmd, capture_output=True, text=True)
        assert r.returncode == 0, r.stdout + r.stderr
    assert "100% tests passed" in r.stdout


def test_altered_vector_fails_with_its_index(tmp_path):
    folder = _emit(tmp_path, "tiny_irq.toml")
    vec = folder / "probe_vectors.h"
    text = vec.read_text()
    head, outputs = text.split("probe_test_outputs", 1)
    values = re.findall(r"\(probe_sample_t\)\((-?\d+)\)", outputs)
    k = len(values) // 2
    pos = [m.start() for m in re.finditer(r"\(probe_sample_t\)\(-?\d+\)", outputs)][k]
    old = f"(probe_sample_t)({values[k]})"
    outputs = outputs[:pos] + f"(probe_sample_t)({int(values[k]) + 1})" + outputs[pos + len(old):]
    vec.write_text(head + "probe_test_outputs" + outputs)
    r = subprocess.run(["make", "-s", "test"], cwd=folder, capture_output=True, text=True)
    assert r.returncode != 0
    assert "1 mismatches" in r.stdout
    assert f"first mismatch at sample {k}: got {values[k]}, expected {int(values[k]) + 1}" in r.stdout


def test_data_unit_test_checks_bits_and_frames(tmp_path):
    # a data design's unit test also reads the bits and frames after every block and compares them
    # with the model's; flipping one expected bit must fail it with one bit mismatch
    folder = _emit(tmp_path, "weather_station_fsk.toml")
    r = subprocess.run(["make", "-s", "test"], cwd=folder, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    data_line = r.stdout.strip().splitlines()[-2]
    m = re.fullmatch(r"\w+ unit test data path: (\d+) bits, 0 bit mismatches, (\d+) frames, 0 frame mismatches", data_line)
    assert m and int(m.group(1)) > 100 and int(m.group(2)) >= 2, data_line
    vec = folder / "wx_vectors.h"
    text = vec.read_text()
    head, rest = text.split("wx_test_bits[", 1)
    body, tail = rest.split("};", 1)
    k = body.index("= {") + 3
    bits = re.search(r"[01]", body[k:])
    pos = k + bits.start()
    flipped = body[:pos] + ("1" if body[pos] == "0" else "0") + body[pos + 1:]
    vec.write_text(head + "wx_test_bits[" + flipped + "};" + tail)
    r = subprocess.run(["make", "-s", "test"], cwd=folder, capture_output=True, text=True)
    assert r.returncode != 0
    assert ", 1 bit mismatches, " in r.stdout, r.stdout
