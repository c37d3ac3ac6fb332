"""Static analysis of the emitted C, as firmware teams check code before they merge it.

For every bundled example with its chosen scheme and every scheme that can be forced on it (and
the four-stamp cubic estimator, which no example chooses at its own CPU budget, both through the
interval's reciprocal and by division), the emitted <name>.c, <name>.h and <name>_port.c (the
wiring skeleton; the unit test is a host program and is left out) go through:
- cppcheck's MISRA C:2012 addon (Debian's cppcheck, its own library for the standard headers) and
  cppcheck's own warning, style, portability and performance checks: a finding fails unless the
  deviation list (edgetally.emit.deviations, printed in the header and README) covers it;
- clang-tidy with the bugprone-*, cert-* and clang-analyzer-* checks: no finding;
- gcc -fanalyzer under the strict warning flags: no finding.
Each tool is first shown a small known defect, so that a tool that silently checks nothing cannot
pass. A test skips only when its tool is missing (.ci/run installs them).
"""

from __future__ import annotations

import functools
import re
import shutil
import subprocess
import tempfile
import tomllib
from pathlib import Path

import pytest
from conftest import ALL_DESIGNS, EXAMPLES, scale_forms

import edgetally
from edgetally.designer.assemble import design as assemble_design
from edgetally.emit import emit
from edgetally.planner.choose import plan
from edgetally.emit.deviations import DEVIATIONS, covers, header_text, markdown

ROOT = Path(__file__).resolve().parent.parent
STRICT = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror"]
TIDY_CHECKS = "-*,bugprone-*,cert-*,clang-analyzer-*"


def _cubic_designs() -> dict:
    """The four-stamp cubic estimator, where no bundled example chooses it at its own CPU budget: the
    stamp examples with the budget raised to 95 % (the planner then takes it where it gains), on
    their own core (no divide instruction: quotients through the interval's reciprocal) and, for
    orchard_link, on a core that divides (quotients by division)."""
    out = {}
    for stem, core in (("tiny_irq", None), ("orchard_link", None), ("orchard_link", "cortex-m4")):
        raw = tomllib.loads((EXAMPLES / f"{stem}.toml").read_text())
        raw["target"]["cpu_budget"] = 0.95
        if core is not None:
            raw["target"]["core"] = core
        out[f"{stem}:budget95" + (f"-{core}" if core else "")] = edgetally.design(edgetally.parse_spec(raw))
    # the linear estimator through the reciprocal: orchard_link's own core (no divide) forced to it
    spec = edgetally.parse_spec(tomllib.loads((EXAMPLES / "orchard_link.toml").read_text()))
    p = plan(spec, scheme="timestamp", variant="k1-linear")
    out["orchard_link:k1-linear"] = assemble_design(spec, p)
    # the shaped arithmetic (32-bit words through the scale, tracker and output stage), and the word
    # forms of that stage no example chooses (conftest.scale_forms)
    shaped = assemble_design(spec, p, overrides={"arith": "shaped"})
    out["orchard_link:shaped"] = shaped
    # the split 27 x 16 arithmetic, which the examples' cores no longer choose (the shaped one is cheaper)
    out["orchard_link:mid"] = assemble_design(spec, p, overrides={"arith": "mid"})
    out.update({f"orchard_link:{k}": d for k, d in scale_forms(shaped).items()})
    return out


DESIGNS = {**ALL_DESIGNS, **_cubic_designs()}


def _unique_keys() -> list[str]:
    """One design id per distinct emitted text (a forced scheme equal to the chosen one is checked once)."""
    seen, keys = set(), []
    for key, design in DESIGNS.items():
        files = emit(design)
        text = tuple(sorted(files.items()))
        if text not in seen:
            seen.add(text)
            keys.append(key)
    return keys


KEYS = _unique_keys()
_TMP = tempfile.TemporaryDirectory(prefix="edgetally-static-")


@functools.cache
def _emitted(key: str) -> Path:
    """The emitted files of one design, written once per test session into their own folder."""
    out = Path(_TMP.name) / key.replace(":", "_")
    out.mkdir()
    for name, text in emit(DESIGNS[key]).items():
        (out / name).write_text(text)
    return out


def _sources(key: str) -> list[str]:
    p = DESIGNS[key].name
    return [f"{p}.c", f"{p}_port.c"]  # both include <name>.h, so the header is checked too


def _need(tool: str) -> None:
    if shutil.which(tool) is None:
        pytest.skip(f"{tool} is not installed (Debian package {tool}; .ci/run installs it)")


def _cppcheck(folder: Path, files: list[str]) -> list[tuple[str, int, str]]:
    """(file, line, id) of every cppcheck finding (MISRA ids are "misra-c2012-<rule>")."""
    r = subprocess.run(
        [
            "cppcheck",
            "--addon=misra",
            "--std=c99",
            "--quiet",
            "--enable=warning,style,portability,performance",
            "--template={file}\t{line}\t{id}",
            *files,
        ],
        cwd=folder,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert r.returncode == 0, r.stderr
    found = []
    for line in (r.stdout + r.stderr).splitlines():
        parts = line.split("\t")
        if len(parts) == 3 and parts[1].isdigit():
            found.append((parts[0], int(parts[1]), parts[2].split()[0]))
        elif line.strip():
            raise AssertionError(f"unexpected cppcheck output: {line}")
    return found


@functools.cache
def _misra(key: str) -> tuple[list[str], frozenset[str]]:
    """The findings of one design that no deviation covers, and the rules of the deviations used."""
    folder, prefix = _emitted(key), DESIGNS[key].name
    bad, used = [], set()
    for file, line, ident in _cppcheck(folder, _sources(key)):
        text = (folder / file).read_text().splitlines()[line - 1] if line > 0 else ""
        m = re.fullmatch(r"misra-c2012-(\d+\.\d+)", ident)
        dev = covers(m.group(1), file, text, prefix) if m else None
        if dev is None:
            bad.append(f"{file}:{line}: {ident}: {text.strip()}")
        else:
            used.add(dev.rule)
    return bad, frozenset(used)


def test_cppcheck_misra_finds_a_known_violation(tmp_path):
    """The addon runs and reports: && of two relational operands without parentheses breaks rule
    12.1 and a hexadecimal constant above INT_MAX without a U suffix breaks rule 7.2 (MISRA C:2012
    rule headlines, from memory)."""
    _need("cppcheck")
    (tmp_path / "bad.c").write_text(
        "#include <stdint.h>\n"
        "uint32_t bad_pick(uint32_t x);\n"
        "uint32_t bad_pick(uint32_t x)\n{\n    uint32_t r = x;\n    if (x > 3u && x < 9u) {\n        r = 0x80000000;\n    }\n"
        "    return r;\n}\n"
    )
    ids = {ident for _, _, ident in _cppcheck(tmp_path, ["bad.c"])}
    assert {"misra-c2012-12.1", "misra-c2012-7.2"} <= ids


@pytest.mark.parametrize("key", KEYS)
def test_misra_only_documented_deviations(key):
    _need("cppcheck")
    bad, _ = _misra(key)
    assert bad == [], "MISRA or cppcheck findings outside the deviation list:\n" + "\n".join(bad)


def test_every_deviation_is_needed():
    """A deviation that no emitted file needs any more is stale: remove it from the list."""
    _need("cppcheck")
    used = set().union(*(_misra(key)[1] for key in KEYS))
    assert {d.rule for d in DEVIATIONS} == used


def test_the_cubic_estimator_is_checked():
    assert any(DESIGNS[key].cubic for key in KEYS)


def test_every_arithmetic_and_stamp_front_is_checked():
    """The checked designs emit each kind of C the generator can write: the split 27 x 16 filter
    arithmetic (48-bit accumulator as three 32-bit sums), the 32- and 64-bit ones, the shaped one,
    each word form of the scale, tracker and output stage and of the squelch level, the counter
    front, the stamp front with the reciprocal and by division, and the cubic both ways."""
    checked = [DESIGNS[key] for key in KEYS]
    assert {d.filters.acc_bits for d in checked} >= {32, 48, 64}
    assert {d.filters.shaped for d in checked} == {False, True}
    assert {d.scale.product for d in checked} >= {"s32", "split", "split_low", "s64"}
    assert {d.scale.word for d in checked} == {32, 64} and {d.squelch.level_bits for d in checked} == {32, 64}
    assert any(not d.stamps for d in checked)
    for cubic in (False, True):
        assert any(d.stamps and d.cubic == cubic and d.recip is not None for d in checked)
        assert any(d.stamps and d.cubic == cubic and d.recip is None for d in checked)


def test_header_and_readme_print_the_deviation_list():
    assert markdown() in (ROOT / "README.md").read_text()
    for key in KEYS:
        p = DESIGNS[key].name
        assert header_text(p) in (_emitted(key) / f"{p}.h").read_text()


def _tidy(folder: Path, files: list[str]) -> subprocess.CompletedProcess:
    return subprocess.run(
        ["clang-tidy", "--quiet", f"--checks={TIDY_CHECKS}", "--warnings-as-errors=*", *files, "--", "-std=c99", "-I."],
        cwd=folder,
        capture_output=True,
        text=True,
        timeout=600,
    )


def _findings(text: str) -> list[str]:
    return [ln for ln in text.splitlines() if re.search(r": (warning|error): ", ln)]


def test_clang_tidy_finds_a_known_defect(tmp_path):
    """A null pointer written through: clang-analyzer-core.NullDereference (clang's static
    analyzer documentation)."""
    _need("clang-tidy")
    (tmp_path / "bad.c").write_text(
        "void bad_store(int v);\nvoid bad_store(int v)\n{\n    int *q = 0;\n    *q = v;\n}\n"
    )
    r = _tidy(tmp_path, ["bad.c"])
    assert r.returncode != 0 and any("NullDereference" in ln for ln in _findings(r.stdout + r.stderr))


@pytest.mark.parametrize("key", KEYS)
def test_clang_tidy_clean(key):
    _need("clang-tidy")
    r = _tidy(_emitted(key), _sources(key))
    found = _findings(r.stdout + r.stderr)
    assert r.returncode == 0 and found == [], "\n".join(found) or r.stderr


def _analyze(folder: Path, file: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        ["gcc", *STRICT, "-fanalyzer", "-I.", "-c", file, "-o", "/dev/null"],
        cwd=folder,
        capture_output=True,
        text=True,
        timeout=600,
    )


def test_gcc_analyzer_finds_a_known_defect(tmp_path):
    """A double free: -Wanalyzer-double-free (GCC manual, static analyzer options)."""
    _need("gcc")
    (tmp_path / "bad.c").write_text(
        "#include <stdlib.h>\nvoid bad_twice(void);\nvoid bad_twice(void)\n{\n    void *m = malloc(4u);\n"
        "    free(m);\n    free(m);\n}\n"
    )
    r = _analyze(tmp_path, "bad.c")
    assert r.returncode != 0 and "double-free" in r.stderr


@pytest.mark.parametrize("key", KEYS)
def test_gcc_analyzer_clean(key):
    _need("gcc")
    folder = _emitted(key)
    for file in _sources(key):
        r = _analyze(folder, file)
        assert r.returncode == 0 and r.stderr == "", f"{file}:\n{r.stderr}"
