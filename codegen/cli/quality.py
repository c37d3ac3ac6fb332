"""The command-line side of the quality measurements: sweeps and hostile scenarios for
``edgetally verify``, and ``edgetally report``. Parse, call the API, print; nothing decides here."""

from __future__ import annotations

import sys
from pathlib import Path

from .folder import check_folder, write_set
from .progress import Progress


class ArgError(Exception):
    """A bad option value (the CLI maps it to exit 2)."""


def parse_points(text: str | None) -> list[float] | None:
    """'--points 1,2.5,10' -> [1.0, 2.5, 10.0]."""
    if text is None:
        return None
    try:
        pts = [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise ArgError(f"--points {text!r}: expected numbers separated by commas, e.g. 5,10,20") from None
    if not pts:
        raise ArgError(f"--points {text!r}: give at least one value")
    return pts


def check_points(design, kind: str, pts: list[float] | None) -> None:
    """The API's check of swept values, as a usage error."""
    from ..measure import sweeps

    try:
        sweeps.check_points(design, kind, pts)
    except ValueError as e:
        raise ArgError(f"--points {e}") from None


def run_sweeps(design, kinds: list[str], points: list[float] | None, seed: int, host, tty: bool) -> list:
    from ..measure import sweeps

    out = []
    for kind in kinds:
        check_points(design, kind, points)
        n = len(points if points is not None else sweeps.default_points(design, kind))
        with Progress(n, f"sweep {kind}", tty) as bar:
            out.append(sweeps.run_sweep(design, kind, points, seed=seed, host=host, progress=lambda _d, _t: bar.step()))
    return out


def run_scenarios(design, names: list[str], options, host, tty: bool) -> list:
    from ..measure import hostile

    todo = list(hostile.SCENARIOS) if "all" in names else names
    out = []
    with Progress(len(todo), "hostile scenarios", tty) as bar:
        for name in todo:
            bar.note(name)
            out.append(hostile.run_scenario(design, name, host, options))
            bar.step()
    return out


def print_sweep(s) -> None:
    print(f"  sweep {s.kind}: {s.label}; every point {'bit-exact' if s.bit_exact else 'NOT bit-exact'}")
    for n in s.notes:
        print(f"    ({n})")
    pred = any(p.predicted_db is not None for p in s.points)
    print(
        f"    {'x':>10} {'SINAD':>7} {'float':>7} {'SNR':>7} {'THD':>8} {'level':>7}"
        + (f" {'predicted':>9}" if pred else "")
        + f" {'offset Hz':>10}  flags"
    )
    for p in s.points:
        flags = ", ".join(f"{k} {v}" for k, v in p.flags.items() if v) or "-"
        thd = f"{p.thd_db:8.1f}" if p.thd_db > -300 else f"{'-':>8}"
        print(
            f"    {p.x:>10g} {p.sinad_db:>7.2f} {p.float_sinad_db:>7.2f} {p.snr_db:>7.2f} {thd} {p.level_db:>7.2f}"
            + (f" {p.predicted_db:>9.2f}" if p.predicted_db is not None else (f" {'':>9}" if pred else ""))
            + f" {p.offset_hz if p.offset_hz is not None else '-':>10}  {flags}"
            + ("" if p.bit_exact else "  NOT BIT-EXACT")
        )


def print_scenarios(results) -> None:
    print("  hostile conditions:")
    for r in results:
        print(f"    {r.name:<15} {'pass' if r.passed else 'FAIL'}: {r.description}")
        print(
            f"      C = model: {'yes' if r.bit_exact else 'NO'}; overflow: {'none' if r.overflow_free else 'YES'}; "
            f"flag {r.flag}: {'as expected' if r.flag_raised else 'NOT as expected'}; output: {r.output_note}"
        )
        print(f"      recovery {r.recovery_ms:g} ms (predicted at most {r.predicted_recovery_ms:g} ms)")


def cmd_report(args, spec, design, plan_obj) -> int:
    """Make the report (edgetally.report_make), write its files, print one summary line."""
    from ..report import make as report_make
    from ..report import page as report_page
    from ..stimulus.inputs import DEFAULT_SEED

    out = Path(args.out)
    check_folder(out, report_page.file_names(design), args.force)  # before the long computation
    seed = DEFAULT_SEED if args.seed is None else args.seed
    with Progress(report_make.steps(design), f"report '{design.name}'", sys.stderr.isatty()) as bar:
        made = report_make.make(
            spec, plan_obj, design, seconds=args.seconds, seed=seed, targets=not args.no_target, progress=bar
        )
    for o in write_set(out, made.files, args.force):
        print(f"{o.state}: {o.path}")
    res, failed = made.verify, made.failed_scenarios
    print(
        f"report '{design.name}': emitted C {'bit-exact' if res.bit_exact else 'NOT bit-exact'}, "
        f"SINAD {res.sinad_db:.2f} dB, sweeps {'bit-exact' if made.sweeps_bit_exact else 'NOT bit-exact'}, "
        f"hostile scenarios {'all passed' if not failed else 'failed: ' + ', '.join(failed)}"
    )
    return 0 if made.ok else 1


def json_extra(sweeps_done, scenarios_done) -> dict:
    extra = {}
    if sweeps_done:
        extra["sweeps"] = [s.to_dict() for s in sweeps_done]
    if scenarios_done:
        extra["scenarios"] = [r.to_dict() for r in scenarios_done]
    return extra
