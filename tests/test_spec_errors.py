"""Malformed and physically impossible specs, run through the real command line.

Every refusal must exit with status 2 and print exactly one line on stderr that names the
offending field and shows the value that was found. The runs of the parametrized table are
started side by side in one fixture and the tests then check one result each.
"""

from __future__ import annotations

import copy
import json
import math
import os
import re
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import pytest

import edgetally

# The values of examples/orchard_link.toml.
BASE = {
    "name": "orchard",
    "signal": {"if_hz": 24000, "deviation_hz": 6000, "audio_hz": 3000},
    "output": {"rate_hz": 8000, "format": "s16", "full_scale_hz": 6000},
    "target": {
        "core": "cortex-m0plus",
        "cpu_hz": 48_000_000,
        "timer_hz": 48_000_000,
        "timer_bits": 16,
        "capture_dma": False,
        "cpu_budget": 0.5,
    },
}

DELETE = object()


# --- a small TOML writer for flat tables of str / int / float / bool ----------------------------

def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        # A JSON string is a valid TOML basic string (same escapes, \uXXXX included).
        return json.dumps(v)
    raise TypeError(f"no TOML form for {v!r}")


def to_toml(d: dict) -> str:
    lines = [f"{k} = {_toml_value(v)}" for k, v in d.items() if not isinstance(v, dict)]
    for k, v in d.items():
        if isinstance(v, dict):
            lines += ["", f"[{k}]"] + [f"{kk} = {_toml_value(vv)}" for kk, vv in v.items()]
    return "\n".join(lines) + "\n"


def spec(changes: dict | None = None) -> dict:
    """BASE with changes applied; keys are "name" or "section.key"; DELETE removes the entry."""
    d = copy.deepcopy(BASE)
    for key, value in (changes or {}).items():
        where, _, leaf = key.rpartition(".")
        tbl = d[where] if where else d
        if value is DELETE:
            del tbl[leaf]
        else:
            tbl[leaf] = value
    return d


def test_toml_writer_round_trips():
    import tomllib

    d = spec({"name": 'a"b\\c', "signal.deemphasis_us": 50.5, "target.capture_dma": True})
    assert tomllib.loads(to_toml(d)) == d


# --- the table of refusals ----------------------------------------------------------------------

@dataclass(frozen=True)
class Case:
    id: str
    field: str           # the field the error line must name
    shows: str | None    # text the line must contain besides the field; None: the spec file's path
    changes: dict | None = None
    text: bytes | None = None   # raw file content instead of BASE + changes
    missing: bool = False       # do not write the file at all


CASES = [
    Case("missing-name", "name", "required", {"name": DELETE}),
    Case("name-starts-with-digit", "name", "9lives", {"name": "9lives"}),
    Case("name-keyword-int", "name", "int", {"name": "int"}),
    Case("name-keyword-static", "name", "static", {"name": "static"}),
    Case("unknown-top-level-key", "colour", "green", {"colour": "green"}),
    Case("unknown-signal-key", "signal.bandwidth_hz", "12000", {"signal.bandwidth_hz": 12000}),
    Case("missing-target-table", "target", "required", {"target": DELETE}),
    Case("if-negative", "signal.if_hz", "-24000", {"signal.if_hz": -24000}),
    Case("if-string", "signal.if_hz", "24 kHz", {"signal.if_hz": "24 kHz"}),
    Case("if-bool", "signal.if_hz", "true", {"signal.if_hz": True}),
    # Deviation equal to the IF: the instantaneous frequency would reach zero.
    Case("deviation-equals-if", "signal.deviation_hz", "24000", {"signal.deviation_hz": 24000}),
    # 6000 Hz is exactly twice the 3000 Hz audio band: not above it.
    Case("rate-not-above-twice-audio", "output.rate_hz", "6000", {"output.rate_hz": 6000}),
    # Lowest instantaneous frequency 24000 - 6000 = 18000 Hz; the band reaches 20000 Hz.
    Case("audio-above-lowest-frequency", "signal.audio_hz", "20000",
         {"signal.audio_hz": 20000, "output.rate_hz": 48000}),
    # 96 kHz timer over a 30 kHz highest frequency: 3.2 ticks per cycle.
    Case("timer-too-slow-for-if", "target.timer_hz", "96000", {"target.timer_hz": 96000}),
    # 48 MHz / 600 Hz = 80000 ticks between edges at the lowest frequency: more than 65536.
    # On a part that can only capture (with an edge interrupt or a counter the planner has other
    # ways, and says why the stamps are dropped in its table).
    Case("timer-16-bit-wraps-twice", "target.timer_bits", "16",
         {"signal.if_hz": 700, "signal.deviation_hz": 100, "signal.audio_hz": 100, "output.rate_hz": 1000,
          "output.full_scale_hz": 100, "target.has_edge_irq": False, "target.has_counter": False}),
    Case("timer-bits-24", "target.timer_bits", "24", {"target.timer_bits": 24}),
    Case("unknown-core", "target.core", "abacus-9", {"target.core": "abacus-9"}),
    Case("cpu-budget-above-one", "target.cpu_budget", "1.5", {"target.cpu_budget": 1.5}),
    Case("cpu-budget-zero", "target.cpu_budget", "0", {"target.cpu_budget": 0}),
    Case("format-u17", "output.format", "u17", {"output.format": "u17"}),
    Case("rate-does-not-divide-timer", "output.rate_hz", "44100", {"output.rate_hz": 44100}),
    # 10 us puts the corner at 15.9 kHz, above half of the 8 kHz output rate.
    Case("deemphasis-corner-above-half-rate", "signal.deemphasis_us", "10", {"signal.deemphasis_us": 10}),
    Case("isr-cycles-negative", "target.isr_cycles", "-5", {"target.isr_cycles": -5}),
    Case("capture-dma-string", "target.capture_dma", "yes", {"target.capture_dma": "yes"}),
    Case("invalid-toml", "(toml)", None, text=b'name = "orchard"\n[signal\nif_hz = 24000\n'),
    Case("missing-file", "(file)", None, missing=True),
    # Latin-1 e-acute in the name: not UTF-8.
    Case("not-utf8", "(file)", None, text=to_toml(BASE).encode().replace(b'"orchard"', b'"orch\xe9rd"')),
]


# Legal specs run in the same batch. IF of two to four times the peak deviation: common practice,
# no source; an IF of 10 kHz with 6 kHz deviation is under twice and must only warn.
NARROW_IF_5K = {"signal.if_hz": 10000, "signal.audio_hz": 2000, "output.rate_hz": 5000}
NARROW_IF_8K = {"signal.if_hz": 10000}
TINY_BAND = {"signal.audio_hz": 0.1}


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "edgetally", *args], capture_output=True, text=True,
                          timeout=120)


def _write(case: Case, folder) -> str:
    path = folder / f"{case.id}.toml"
    if case.missing:
        return str(path)
    path.write_bytes(case.text if case.text is not None else to_toml(spec(case.changes)).encode())
    return str(path)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """{run id: (spec path, CompletedProcess)} for every case and legal spec, run side by side."""
    folder = tmp_path_factory.mktemp("specs")
    jobs = {c.id: ["plan", _write(c, folder)] for c in CASES}
    for rid, changes in [("narrow-if-5k", NARROW_IF_5K), ("narrow-if-8k", NARROW_IF_8K), ("tiny-band", TINY_BAND)]:
        path = folder / f"{rid}.toml"
        path.write_text(to_toml(spec(changes)), encoding="utf-8")
        jobs[rid] = ["plan", str(path)]
    jobs["tiny-band"] = ["emit", jobs["tiny-band"][1], "-o", str(folder / "tiny-band-out")]
    with ThreadPoolExecutor(max_workers=max(2, os.cpu_count() or 2)) as pool:
        futures = {rid: pool.submit(_cli, *args) for rid, args in jobs.items()}
        return {rid: (jobs[rid][1], f.result()) for rid, f in futures.items()}


def _names(line: str, field: str) -> bool:
    """True if ``field`` appears in ``line`` as a whole name (not as part of a longer dotted name)."""
    return re.search(rf"(?<![\w.]){re.escape(field)}(?![\w.])", line) is not None


def test_case_ids_are_unique():
    assert len({c.id for c in CASES}) == len(CASES) >= 20


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_spec_is_refused_on_one_line(runs, case):
    path, r = runs[case.id]
    assert r.returncode == 2, (r.returncode, r.stdout, r.stderr)
    assert r.stdout == ""
    assert "Traceback" not in r.stderr
    lines = r.stderr.splitlines()
    assert len(lines) == 1, r.stderr
    line = lines[0]
    # Judge field and value on the line without the path prefix, so a path cannot supply them.
    rest = line.replace(path, "", 1)
    assert _names(rest, case.field), f"{case.field!r} not named in: {line}"
    shows = path if case.shows is None else case.shows
    assert shows.lower() in rest.lower(), f"{shows!r} not shown in: {line}"


def test_non_utf8_file_says_utf8(runs):
    _, r = runs["not-utf8"]
    assert "UTF-8" in r.stderr


# --- unusual but legal ----------------------------------------------------------------------------

def test_if_under_twice_deviation_is_accepted_with_warning(runs):
    # IF of two to four times the peak deviation: common practice, no source.
    # IF 10 kHz, deviation 6 kHz; 5 kHz output keeps the 10 kHz grid at the mean edge rate.
    _, r = runs["narrow-if-5k"]
    assert r.returncode == 0, r.stderr
    warnings = [ln for ln in r.stderr.splitlines() if "warning" in ln]
    assert len(warnings) == 1 and "twice" in warnings[0] and "signal.if_hz" in warnings[0], r.stderr
    assert "CHOSEN" in r.stdout


def test_if_under_twice_deviation_at_8k_output_is_accepted(runs):
    # IF of two to four times the peak deviation: common practice, no source.
    # IF 10 kHz, deviation 6 kHz, audio 3 kHz, output 8 kHz, 48 MHz timer: legal, with a warning.
    _, r = runs["narrow-if-8k"]
    assert "twice" in r.stderr
    assert r.returncode == 0, r.stderr


def test_tiny_audio_band_is_a_spec_error_not_an_internal_error(runs):
    _, r = runs["tiny-band"]
    assert r.returncode == 2, r.stderr
    lines = r.stderr.splitlines()
    assert len(lines) == 1 and _names(lines[0], "signal.audio_hz") and "0.1" in lines[0], r.stderr


# --- the API ------------------------------------------------------------------------------------

API_CASES = {
    "missing-name": ({"name": DELETE}, "name"),
    "keyword-name": ({"name": "static"}, "name"),
    "name-with-dash": ({"name": "orchard-link"}, "name"),
    "name-double-underscore": ({"name": "or__chard"}, "name"),
    "name-not-a-string": ({"name": 7}, "name"),
    "signal-not-a-table": ({"signal": 5}, "signal"),
    "unknown-signal-key": ({"signal.colour": 1}, "signal.colour"),
    "missing-target": ({"target": DELETE}, "target"),
    "if-negative": ({"signal.if_hz": -1}, "signal.if_hz"),
    "if-bool": ({"signal.if_hz": True}, "signal.if_hz"),
    "if-inf": ({"signal.if_hz": math.inf}, "signal.if_hz"),
    "if-nan": ({"signal.if_hz": math.nan}, "signal.if_hz"),
    "deviation-equals-if": ({"signal.deviation_hz": 24000}, "signal.deviation_hz"),
    "deviation-above-if": ({"signal.deviation_hz": 30000}, "signal.deviation_hz"),
    "rate-fractional": ({"output.rate_hz": 8000.5}, "output.rate_hz"),
    "rate-does-not-divide-timer": ({"output.rate_hz": 44100}, "output.rate_hz"),
    "timer-above-four-times-cpu": ({"target.cpu_hz": 1_000_000}, "target.timer_hz"),
    "timer-bits-24": ({"target.timer_bits": 24}, "target.timer_bits"),
    "core-missing": ({"target.core": DELETE}, "target.core"),
}


@pytest.mark.parametrize("changes, field", API_CASES.values(), ids=API_CASES.keys())
def test_parse_spec_error_names_field(changes, field):
    with pytest.raises(edgetally.SpecError) as info:
        edgetally.parse_spec(spec(changes))
    assert info.value.field == field


def test_parse_spec_accepts_base():
    s = edgetally.parse_spec(spec())
    assert (s.name, s.signal.if_hz, s.target.timer_bits) == ("orchard", 24000, 16)
    assert s.warnings == ()


def test_parse_spec_refuses_non_table():
    with pytest.raises(edgetally.SpecError) as info:
        edgetally.parse_spec(["not", "a", "table"])
    assert info.value.field == "(spec)"


@pytest.mark.parametrize("content, field", [
    (None, "(file)"),
    (b"name = \"orch\xe9rd\"\n", "(file)"),
    (b"name = \n", "(toml)"),
], ids=["missing-file", "not-utf8", "invalid-toml"])
def test_load_spec_error_names_field(tmp_path, content, field):
    path = tmp_path / "spec.toml"
    if content is not None:
        path.write_bytes(content)
    with pytest.raises(edgetally.SpecError) as info:
        edgetally.load_spec(path)
    assert info.value.field == field
    assert info.value.value == str(path)
