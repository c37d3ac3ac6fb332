"""The one list of MISRA C:2012 deviations of the emitted C (rule, where, why).

The emitted header prints it (``header_text``), README.md carries it as a table (``markdown``;
tests/test_static_analysis.py checks that README's copy is this one) and the static-analysis test
accepts a finding of cppcheck's MISRA addon only when a deviation here covers it (``covers``).
Every other rule is followed. Scope: <name>.c, <name>.h and the wiring skeleton <name>_port.c;
the desktop unit test (<name>_test.c, a host program with stdio) is not firmware and is not checked.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass


@dataclass(frozen=True)
class Deviation:
    rule: str  # MISRA C:2012 rule number, e.g. "2.3"
    category: str  # "advisory" or "required" (no mandatory rule is deviated)
    where: str  # the emitted names it covers ({p}: the design's prefix, {P}: upper case)
    files: tuple[str, ...]  # the emitted files it may occur in
    marks: tuple[str, ...]  # a flagged source line must contain one of these texts
    why: str

    def fill(self, text: str, prefix: str) -> str:
        return text.replace("{p}", prefix).replace("{P}", prefix.upper())


DEVIATIONS: tuple[Deviation, ...] = (
    Deviation(
        "2.3",
        "advisory",
        "the typedefs `{p}_check_*` and `{p}_port_check_ring`",
        ("{p}.c", "{p}_port.c"),
        ("typedef char {p}_check_", "typedef char {p}_port_check_"),
        "compile-time checks of the build assumptions (two's complement, arithmetic right shift, type "
        "sizes, power-of-two lengths): C99 has no static assertion, so each is an array type whose size "
        "turns negative, stopping the build, when its assumption fails; the type is never used.",
    ),
    Deviation(
        "2.5",
        "advisory",
        "the macros `{P}_TIMER_HZ` and `{P}_GRID_HZ`",
        ("{p}.h",),
        ("#define {P}_TIMER_HZ", "#define {P}_GRID_HZ"),
        "public constants of the header for the code that sets up the timers; the demodulator itself "
        "works in timer ticks and does not use them.",
    ),
    Deviation(
        "8.9",
        "advisory",
        "the table `{p}_coef`",
        ("{p}.c",),
        ("static const int16_t {p}_coef[", "static const int32_t {p}_coef["),
        "the IIR coefficient table stays a named const object at file scope beside the design constants, "
        "so that map files (and edgetally's target size check) attribute its flash by name; it has "
        "internal linkage and one user, `{p}_post`.",
    ),
    Deviation(
        "10.1",
        "required",
        "the shifts in `{p}_rshr` and `{p}_asr32`",
        ("{p}.c",),
        ("(x + (int64_t)half) >> s", "return x >> s;"),
        "round half up then shift right of a signed 64-bit value, and the floor shift of a signed 32-bit "
        "word (the one signed shift that the split filter arithmetic, the 32-bit rounding of the cubic and "
        "the reciprocal's Newton steps call), are the defined arithmetic of the integer model "
        "(`edgetally.fixedpoint.rshr`, `>>` on Python ints); C99 leaves >> of a negative value "
        "implementation-defined, and the typedef `{p}_check_arith_shift` refuses to compile where it is "
        "not an arithmetic shift.",
    ),
)


def covers(rule: str, filename: str, line: str, prefix: str) -> Deviation | None:
    """The deviation that covers a finding of ``rule`` in the emitted file ``filename`` on the
    source line ``line`` of the design ``prefix``, or None (the finding is a defect)."""
    for dev in DEVIATIONS:
        if dev.rule != rule or filename not in {dev.fill(f, prefix) for f in dev.files}:
            continue
        if any(dev.fill(m, prefix) in line for m in dev.marks):
            return dev
    return None


def header_text(prefix: str) -> str:
    """The deviation list as the lines of a C block comment (each starting with " * ")."""
    lines = [
        " * MISRA C:2012: this C, its header and the wiring skeleton follow every rule that cppcheck's",
        " * MISRA addon checks, except these deviations (rule, category, where: why):",
    ]
    for dev in DEVIATIONS:
        text = f"Rule {dev.rule} ({dev.category}), {dev.where}: {dev.why}"
        for i, line in enumerate(textwrap.wrap(dev.fill(text, prefix).replace("`", ""), 92)):
            lines.append((" *   - " if i == 0 else " *     ") + line)
    return "\n".join(lines)


def markdown() -> str:
    """The deviation list as a Markdown table ({p}/{P} printed as <name>/<NAME>)."""
    rows = ["| Rule | Category | Where | Why |", "| --- | --- | --- | --- |"]
    for dev in DEVIATIONS:
        where = dev.where.replace("{p}", "<name>").replace("{P}", "<NAME>")
        why = dev.why.replace("{p}", "<name>").replace("{P}", "<NAME>")
        rows.append(f"| {dev.rule} | {dev.category} | {where} | {why} |")
    return "\n".join(rows)
