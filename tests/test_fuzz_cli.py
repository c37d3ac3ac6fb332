"""Property-based fuzzing of the command line (hypothesis): specs, plausible and hostile mixed,
through plan, emit, verify and widths, run in-process (edgetally.cli.main.main). Whatever the
input, a command exits 0 or exits 2 with exactly one line that names a field or an option; never
1 (an internal error), never a traceback. Where plan accepts a spec, emit, verify and widths
must accept it too.

Two properties keep the run bounded: ``test_any_spec`` (FUZZ_SPECS specs, most refused by the
validation layer in milliseconds, every command run on each), and ``test_plausible_spec``
(PLAUSIBLE_SPECS specs drawn to look legal, where the design code runs in full: verify with a
short signal and no emulated targets, widths without its simulation). Examples are derandomised,
so a CI run is repeatable.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import re
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

from edgetally.cli.main import main
from edgetally.cores import CORES
from edgetally.spec import _SECTIONS, SpecError, load_spec

FUZZ_SPECS = 2000        # the acceptance: at least 2000 generated specs in CI
PLAUSIBLE_SPECS = 25     # about 40 % are accepted and run in full (about 3 s each for the four commands)
COMMANDS = ("plan", "emit", "verify", "widths")
FIELDS = {f"{sec}.{k}" for sec, keys in _SECTIONS.items() for k in keys} | {"name", *_SECTIONS}


# --- a TOML writer for any value hypothesis makes ----------------------------------------------

class Deep:
    """An array nested ``depth`` deep, written as text (no Python recursion)."""

    def __init__(self, depth: int):
        self.depth = depth


def _key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k)


def _value(v) -> str:
    if isinstance(v, Deep):
        return "[" * v.depth + "]" * v.depth
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v) if abs(v) < 10 ** 4000 else "9" * 5000
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def to_toml(d: dict) -> str:
    lines = [f"{_key(k)} = {_value(v)}" for k, v in d.items() if not isinstance(v, dict)]
    for k, v in d.items():
        if isinstance(v, dict):
            lines += ["", f"[{_key(k)}]"] + [f"{_key(kk)} = {_value(vv)}" for kk, vv in v.items()]
    return "\n".join(lines) + "\n"


# --- strategies --------------------------------------------------------------------------------

def _log_uniform(lo: float, hi: float):
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10 ** e)


@st.composite
def plausible(draw) -> dict:
    """A spec that looks legal: a band from 60 Hz to 20 kHz, an IF above the band plus the
    deviation (up to 2 MHz, so a full verify stays short), an output rate that divides a usual
    timer clock and mostly exceeds twice the band, a known core."""
    audio = draw(_log_uniform(60, 20000))
    dev_ratio = draw(st.floats(0.02, 0.8))
    if_hz = min(2e6, audio / (1 - dev_ratio) * draw(_log_uniform(1.2, 300)))
    if_hz = draw(st.sampled_from([if_hz, float(math.ceil(if_hz))]))
    dev = if_hz * dev_ratio
    rates = [1000, 2000, 4000, 8000, 16000, 32000, 48000, 96000]
    rate = draw(st.sampled_from([r for r in rates if r > 2 * audio] or rates) | st.sampled_from(rates))
    cpu = draw(st.sampled_from([8_000_000, 16_000_000, 48_000_000, 72_000_000, 96_000_000, 168_000_000, 480_000_000]))
    timer = cpu // draw(st.sampled_from([1, 2, 4, 8]))
    target = {"core": draw(st.sampled_from(sorted(CORES))), "cpu_hz": cpu, "timer_hz": timer,
              "timer_bits": draw(st.sampled_from([16, 32]))}
    for flag in ("has_capture", "has_edge_irq", "has_counter", "capture_dma", "counter_dma", "hw_divide", "mul64"):
        if draw(st.booleans()):
            target[flag] = draw(st.booleans())
    if draw(st.booleans()):
        target["capture_prescalers"] = draw(st.lists(st.sampled_from([1, 2, 4, 8]), min_size=1, max_size=4, unique=True))
    spec = {"name": draw(st.sampled_from(["rx", "probe", "Link_2"])),
            "signal": {"if_hz": if_hz, "deviation_hz": dev, "audio_hz": audio},
            "output": {"rate_hz": rate}, "target": target}
    if draw(st.booleans()):
        spec["output"]["full_scale_hz"] = dev * draw(st.floats(0.3, 1.5))
    if draw(st.booleans()):
        spec["output"]["format"] = draw(st.sampled_from(["s16", "u8", "u12", "u16"]))
    if draw(st.booleans()):
        spec["signal"]["deemphasis_us"] = draw(st.sampled_from([0, 50, 75, 750]))
    if draw(st.booleans()):
        spec["fixed"] = {"loss_limit_db": draw(st.floats(0.05, 3)), "arith": draw(st.sampled_from(["auto", "narrow", "wide"]))}
    return spec


HOSTILE = st.one_of(
    st.booleans(), st.integers(), st.integers(-(10 ** 30), 10 ** 30), st.just(10 ** 400),
    st.floats(allow_nan=True, allow_infinity=True), st.floats(-1e-300, 1e-300),
    st.text(max_size=12), st.text(min_size=2000, max_size=3000),
    st.lists(st.one_of(st.integers(), st.floats(), st.text(max_size=3)), max_size=4),
    st.dictionaries(st.text(max_size=6), st.integers(), max_size=3),
    st.integers(1, 3000).map(Deep),
)


@st.composite
def any_spec(draw) -> dict:
    """A plausible spec with one to four fields replaced by hostile values, removed, or added
    where none belongs."""
    spec = draw(plausible())
    for _ in range(draw(st.integers(1, 4))):
        sec = draw(st.sampled_from(["", *sorted(_SECTIONS)]))
        keys = sorted(_SECTIONS[sec]) if sec else ["name", *sorted(_SECTIONS)]
        key = draw(st.one_of(st.sampled_from(keys), st.text(min_size=1, max_size=8)))
        where = spec if not sec else spec.setdefault(sec, {})
        if not isinstance(where, dict):
            continue
        if draw(st.integers(0, 5)) == 0:
            where.pop(key, None)
        else:
            where[key] = draw(HOSTILE)
    return spec


ARGS = st.fixed_dictionaries({
    "seconds": st.one_of(st.just("0.3"), st.sampled_from(["0", "-1", "nan", "inf", "1e-9", "1e9", "x"])),
    "seed": st.one_of(st.none(), st.integers(-5, 2 ** 33).map(str), st.just("seed")),
    "set": st.one_of(st.none(), st.sampled_from(["foo", "filters.coef_bits=99", "filters.arith=wide",
                                                 "filters.data_bits=12", "filters.x=1", "="])),
})


# --- running ---------------------------------------------------------------------------------

def _run(argv: list[str]) -> tuple[int, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(argv)
        except SystemExit as e:        # argparse's refusals (one line, exit 2)
            code = e.code
    return code, err.getvalue()


def _argv(cmd: str, path: Path, out: Path, args: dict | None, seconds: str | None) -> list[str]:
    argv = [cmd, str(path)]
    if cmd == "emit":
        argv += ["-o", str(out), "--no-test"]
    if cmd == "verify":
        argv += ["--no-target", "--no-squelch"]
        secs = (args or {}).get("seconds", seconds)
        if secs is not None:            # None: verify's own default, the band's shortest measurable record
            argv += ["--seconds", secs]
        if args and args["seed"] is not None:
            argv += ["--seed", args["seed"]]
    if cmd == "widths":
        argv += ["--no-simulate"]
        if args and args["set"] is not None:
            argv += ["--set", args["set"]]
    return argv


def _keys(spec: dict) -> set[str]:
    """Every key of ``spec``, dotted under its table."""
    return {k for k in spec} | {f"{k}.{kk}" for k, v in spec.items() if isinstance(v, dict) for kk in v}


def _check(cmd: str, code: int, err: str, spec_path: Path, known: set[str] = frozenset()) -> None:
    assert code in (0, 2), f"{cmd}: exit {code}\n{err}"
    assert "Traceback" not in err and "internal error" not in err, err
    if code == 0:
        return
    lines = [ln for ln in err.splitlines() if not ln.startswith("edgetally: warning:")]
    assert len(lines) == 1, f"{cmd}: {err}"
    line = lines[0].replace(str(spec_path), "SPEC")
    assert len(line) < 800, line
    m = re.match(r"edgetally: (?:spec error in SPEC: (.+?) = |argument error: (-[-\w]+) = |error: (-o) |"
                 r"argument error: argument (--?\w[-\w/]*))", line)
    assert m, f"{cmd}: no field or option named: {line}"
    field = next(g for g in m.groups() if g)
    # a spec field, a key of this spec where none belongs (shown cut), the file, or an option
    assert (field in FIELDS | known or field.startswith(("(", "-")) or field.endswith("...")
            or not all(c.isprintable() for k in known for c in k)), line


def _parses(path: Path) -> bool:
    try:
        load_spec(path)
    except SpecError:
        return False
    return True


def _all_commands(spec: dict, args: dict | None, full: bool, seconds: str | None = "0.3") -> dict[str, int]:
    """Run the commands on ``spec``; {command: exit status}. Without ``full``, a spec that passes
    the validation layer goes through plan only (its full runs are test_plausible_spec's, whose
    bounded count keeps the time bounded), plus verify when its arguments are bad."""
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "spec.toml"
        path.write_text(to_toml(spec), encoding="utf-8")
        cmds = COMMANDS if full or not _parses(path) else ("plan", "verify")
        codes = {}
        for cmd in cmds:
            if cmd == "verify" and not full and cmds != COMMANDS and (args is None or args["seconds"] == seconds):
                continue
            argv = _argv(cmd, path, Path(tmp) / "out", args, seconds)
            code, err = _run(argv)
            _check(cmd, code, err, path, _keys(spec))
            codes[cmd] = code
        return codes


# no shrinking: a failure is reported as first found, and the run stays bounded
FAST = dict(deadline=None, database=None, derandomize=True, print_blob=True, phases=[Phase.explicit, Phase.generate],
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much])


@settings(max_examples=FUZZ_SPECS, **FAST)
@given(spec=any_spec(), args=ARGS)
def test_any_spec(spec, args):
    codes = _all_commands(spec, args, full=False)
    # one validation layer: a spec it refuses is refused by every command
    if len(codes) == len(COMMANDS) and codes["plan"] == 2 and args["set"] is None and args["seed"] is None:
        assert set(codes.values()) == {2}, codes


@settings(max_examples=PLAUSIBLE_SPECS, **FAST)
@given(spec=plausible())
def test_plausible_spec(spec):
    # verify at its default length: the standard test's own record for the band (edgetally.standard)
    codes = _all_commands(spec, None, full=True, seconds=None)
    # where plan says yes, emit, verify and widths must not then fail (and the reverse)
    assert len(set(codes.values())) == 1, codes
