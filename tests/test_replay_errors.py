"""Malformed recordings: each one exits 2 with one line on stderr that names the file and, where the
fault has a place, its line or byte offset; never a traceback."""

import json
import math
import re
import struct
from pathlib import Path

import numpy as np
import pytest

from edgetally.cli.main import main
from edgetally.cli import replay as cli_replay
from edgetally.stimulus import recordings

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
ORCHARD = EXAMPLES / "orchard_link.toml"       # timestamp, 16-bit timer at 48 MHz, IF 24 kHz
SHAFT = EXAMPLES / "bench_counter.toml"        # counter, IF 1.5 MHz

GOOD_HEAD = "$timescale 1 ns $end\n$scope module la $end\n$var wire 1 ! if_pin $end\n$upscope $end\n$enddefinitions $end\n"


def _vcd_edges(period_ns=41667, n=4000):
    return "".join(f"#{k * period_ns}\n1!\n#{k * period_ns + period_ns // 2}\n0!\n" for k in range(n))


def _wav(path, rate, data):
    from scipy.io import wavfile
    wavfile.write(path, rate, data)


def _cases(tmp: Path):
    """(name, spec, file, extra args, regex the message must match: the file and its place)."""
    c = []
    p = tmp / "trunc.vcd"
    p.write_text("$timescale 1 ns $end\n$scope module la $end\n$var wire 1 ! if_pin")
    c.append(("vcd truncated in the header", ORCHARD, p, [], r"trunc\.vcd:\d+(:\d+)?: "))
    p = tmp / "garbage.vcd"
    p.write_text(GOOD_HEAD + "#0\n1!\n#10\n@@@ what\n")
    c.append(("vcd malformed value change", ORCHARD, p, [], r"garbage\.vcd:\d+:\d+: not a valid value change dump"))
    p = tmp / "names.vcd"
    p.write_text(GOOD_HEAD + _vcd_edges())
    c.append(("vcd unknown signal name", ORCHARD, p, ["--signal", "rf_in"], r"names\.vcd:5: no 1-bit signal 'rf_in'"))
    p = tmp / "back.vcd"
    p.write_text(GOOD_HEAD + "#0\n1!\n#500\n0!\n#200\n1!\n")
    c.append(("vcd time runs backwards", ORCHARD, p, [], r"back\.vcd:10: time runs backwards"))
    p = tmp / "flat.vcd"
    p.write_text(GOOD_HEAD + "#0\n0!\n#100000000\n0!\n")
    c.append(("vcd no edges", ORCHARD, p, [], r"flat\.vcd: 0 rising edge"))
    p = tmp / "short.vcd"
    p.write_text(GOOD_HEAD + _vcd_edges(n=100))
    c.append(("vcd shorter than settling", ORCHARD, p, [], r"short\.vcd: lasts [\d.]+ ms, shorter than the chain's settling"))
    p = tmp / "notint.csv"
    p.write_text("stamp\n100\n2100\n41x0\n")
    c.append(("csv not an integer", ORCHARD, p, [], r"notint\.csv:4: '41x0' is not an integer"))
    p = tmp / "backwards.csv"
    p.write_text("".join(f"{v}\n" for v in (70000, 72000, 74000, 73000, 76000)))
    c.append(("csv stamps run backwards", ORCHARD, p, [], r"backwards\.csv:4: stamps run backwards"))
    p = tmp / "cut.bin"
    p.write_bytes(np.arange(0, 20000, 2000, dtype="<u2").tobytes() + b"\x01")
    c.append(("bin truncated word", ORCHARD, p, [], r"cut\.bin: offset 20: 1 trailing byte"))
    p = tmp / "cut.wav"
    _wav(p, 192000, np.zeros(1000, dtype=np.int16))
    p.write_bytes(p.read_bytes()[:-300])
    c.append(("wav truncated data chunk", ORCHARD, p, [], r"cut\.wav: offset 36: chunk b'data' claims 2000 bytes"))
    p = tmp / "slow.wav"
    t = np.arange(8000) / 8000.0
    _wav(p, 8000, (1e4 * np.sin(2 * np.pi * 1000 * t)).astype(np.int16))
    c.append(("wav sample rate too low for the IF", ORCHARD, p, [], r"slow\.wav: sample rate 8000 Hz is too low for the IF"))
    p = tmp / "narrow_iq.wav"
    _wav(p, 20000, np.zeros((4000, 2), dtype=np.int16))
    c.append(("iq sample rate too low for the channel", ORCHARD, p, ["--offset-hz", "4000"],
              r"narrow_iq\.wav: sample rate 20000 Hz is too low for the channel"))
    p = tmp / "notwav.wav"
    p.write_bytes(b"ID3\x03 this is not audio")
    c.append(("wav not RIFF", ORCHARD, p, [], r"notwav\.wav: offset 0: not a RIFF/WAVE file"))
    p = tmp / "bad.sigmf-meta"
    p.write_text('{"global": {"core:datatype": "cf32_le",\n "core:sample_rate": }')
    (tmp / "bad.sigmf-data").write_bytes(b"\0" * 80)
    c.append(("sigmf metadata not JSON", ORCHARD, p, [], r"bad\.sigmf-meta:2: not valid JSON"))
    p = tmp / "odd.sigmf-meta"
    p.write_text(json.dumps({"global": {"core:datatype": "cf32_le", "core:sample_rate": 96000, "core:version": "1.0.0"},
                             "captures": [{"core:sample_start": 0}], "annotations": []}))
    (tmp / "odd.sigmf-data").write_bytes(b"\0" * 8003)
    c.append(("sigmf data truncated", ORCHARD, p, [], r"odd\.sigmf-data: offset 8000: 3 trailing byte"))
    p = tmp / "still.csv"
    p.write_text("".join("1234\n" for _ in range(5000)))
    c.append(("counts that never change", SHAFT, p, [], r"still\.csv: the count never changes"))
    p = tmp / "huge.csv"
    p.write_text("100\n200\n" + "9" * 30 + "\n")
    c.append(("csv value wider than 64 bits", ORCHARD, p, [], r"huge\.csv:3: 9+ is not an unsigned stamp"))
    p = tmp / "silent_iq.wav"
    _wav(p, 96000, np.zeros((96000, 2), dtype=np.int16))
    c.append(("iq recording of zeros", ORCHARD, p, [], r"silent_iq\.wav: every IQ sample is zero"))
    return c




@pytest.fixture
def quick_design(monkeypatch):
    """The CLI designs from the spec each time; the examples' designs are made once (conftest)."""
    import edgetally.check.choice as choice
    import edgetally.designer.assemble as assemble
    from conftest import ALL_DESIGNS

    by_name = {d.name: d for k, d in ALL_DESIGNS.items() if k.endswith(":auto")}
    monkeypatch.setattr(assemble, "design", lambda spec, plan=None, scheme=None: by_name[spec.name])
    monkeypatch.setattr(choice, "design", lambda spec, chosen=None, scheme=None, overrides=None: by_name[spec.name])


def test_at_least_ten_malformed_recordings(tmp_path):
    assert len(_cases(tmp_path)) >= 10


@pytest.mark.parametrize("index", range(18))
def test_malformed_recording_exits_2_with_one_line(index, tmp_path, capsys, quick_design):
    name, spec, path, extra, pattern = _cases(tmp_path)[index]
    rc = main(["replay", str(spec), str(path), "-o", str(tmp_path / "out"), *extra])
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert rc == 2, (name, err)
    assert len(lines) == 1, (name, err)
    assert "Traceback" not in err
    assert re.search(pattern, lines[0]), (name, lines[0])
    assert not (tmp_path / "out").exists()                  # nothing written


def test_cli_lists_match_the_api():
    assert cli_replay.FORMATS == recordings.FORMATS


def test_cli_replay_of_a_good_recording(tmp_path, capsys, quick_design):
    """The worked replay: exit 0, the summary lines, a WAV at the output rate and the page."""
    from scipy.io import wavfile

    p = tmp_path / "good.vcd"
    p.write_text(GOOD_HEAD + _vcd_edges(period_ns=40000, n=6000))      # 25 kHz for 0.24 s
    rc = main(["replay", str(ORCHARD), str(p), "-o", str(tmp_path / "out")])
    out = capsys.readouterr().out
    assert rc == 0, out
    assert "BIT-EXACT" in out and "5999 IF edges" in out   # the first level, at #0, is not an edge
    # 25 kHz is 1 kHz above the 24 kHz IF: the offset output heads there (the tracker's time
    # constant is 2**9 / 8000 s = 64 ms, so after 0.24 s it is within exp(-3) of it)
    off = float(re.search(r"offset output at the end: ([+-][\d.]+) Hz", out).group(1))
    assert 1000 * (1 - math.exp(-3.0)) - 60 < off < 1000 + 5
    rate, pcm = wavfile.read(tmp_path / "out" / "orchard_replay.wav")
    assert rate == 8000 and pcm.dtype == np.int16 and pcm.size > 1500
    assert (tmp_path / "out" / "orchard_replay.html").read_text().count("<img") == 3
