"""The thin command line over the edgetally API: parse, call, print, map errors to exit codes.

Exit status: 0 success; 1 a check failed or an internal error; 2 a bad spec or bad arguments.
Global options (--debug) are accepted anywhere on the line, before or after the command.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import math
import sys
import traceback
from typing import Any
from pathlib import Path

from .. import __version__, standard
from . import quality as cli_quality
from .folder import FORCE_HELP, FolderError, check_folder, write_set
from . import replay as cli_replay
from ..spec import Spec, SpecError, cut_path, load_spec

# The commands import the planner, the designer and the host build (scipy, jinja2, cffi) only
# when they run, so that a bad spec is refused without loading them.

EXIT_OK, EXIT_FAIL, EXIT_SPEC = 0, 1, 2
SCHEME_NAMES = ("timestamp", "interrupt", "counter")  # edgetally.planner.SCHEMES, without importing scipy
SWEEP_KINDS = ("cnr", "tone", "deviation", "offset")  # edgetally.sweeps.KINDS
SCENARIO_NAMES = ("signal-loss", "noise-burst", "timer-wrap", "inputs-lost", "frequency-step")  # edgetally.hostile


class UsageError(Exception):
    """A problem with the command's arguments or files (exit 2)."""


def _add_scheme_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("spec", help="the TOML spec file")
    p.add_argument(
        "--scheme",
        choices=SCHEME_NAMES,
        default=None,
        help="force how the MCU sees the edges (default: the planner's choice)",
    )


EXIT_CODES = """exit status:
  0    done (verify, widths, replay, report: every check passed)
  1    a check failed (the C differs from the model, a width does not fit, a hostile scenario
       failed) or an internal error of edgetally (please report it; --debug shows the traceback)
  2    a bad spec, argument or file: one line names the field or option, the value and what is
       allowed
  130  interrupted"""


class _Parser(argparse.ArgumentParser):
    """argparse's parser, refusing on one line like every other refusal (exit 2)."""

    def error(self, message: str):
        self.exit(EXIT_SPEC, f"edgetally: argument error: {' '.join(message.split())} (see {self.prog} --help)\n")


def _global_options(defaults: bool) -> argparse.ArgumentParser:
    """The options every command accepts anywhere on the line. Only the top level sets defaults,
    so that a subcommand's parser does not reset what was given before the command."""
    g = _Parser(add_help=False)
    g.add_argument(
        "--debug",
        action="store_true",
        default=False if defaults else argparse.SUPPRESS,
        help="show tracebacks on errors",
    )
    return g


def _parser() -> argparse.ArgumentParser:
    ap = _Parser(
        prog="edgetally",
        parents=[_global_options(True)],
        epilog=EXIT_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Plan, emit and verify integer-only C that demodulates FM by counting the edges of a limited IF.",
    )
    ap.add_argument("--version", action="version", version=f"edgetally {__version__}")
    sub = ap.add_subparsers(dest="command", required=True, metavar="COMMAND")
    common: dict[str, Any] = dict(
        parents=[_global_options(False)], epilog=EXIT_CODES, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    _add_parser = sub.add_parser  # every command (replay's too) gets the global options and the exit codes
    sub.add_parser = lambda name, **kw: _add_parser(name, **common, **kw)  # type: ignore[method-assign]

    p = sub.add_parser("plan", help="show what was chosen and why")
    _add_scheme_args(p)
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    p.add_argument(
        "--measured",
        action="store_true",
        help="cross-compile the chosen design for the spec's core and run it in the Thumb emulator; "
        "if its measured CPU load exceeds the budget, drop it and plan again (needs "
        "arm-none-eabi-gcc and unicorn)",
    )
    p.add_argument(
        "--simulate",
        action="store_true",
        help="also simulate each feasible option briefly (float reference, 0.25 s) and show its SINAD",
    )

    p = sub.add_parser("emit", help="write the C header and source (and the Design as JSON)")
    _add_scheme_args(p)
    p.add_argument("-o", "--out", required=True, metavar="DIR", help="folder to write into (created if missing)")
    p.add_argument("--force", action="store_true", help=FORCE_HELP)
    p.add_argument(
        "--no-test",
        action="store_true",
        help="leave out the desktop unit test (the <name>_test/ folder: <name>_test.c, vectors, "
        "Makefile, CMakeLists.txt)",
    )

    p = sub.add_parser("widths", help="show the word-length table and overflow margins, or check your own widths")
    _add_scheme_args(p)
    p.add_argument(
        "--set",
        action="append",
        default=[],
        metavar="filters.KEY=VALUE",
        help="override a word length: filters.arith, data_bits, coef_bits, coef_width, acc_bits, scaling (repeatable)",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    p.add_argument("--no-simulate", action="store_true", help="skip the simulation (bit-exact check and measured loss)")

    p = sub.add_parser("verify", help="compile the C, compare it bit for bit with the model, measure quality")
    _add_scheme_args(p)
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the summary")
    p.add_argument(
        "--seconds",
        type=float,
        default=None,
        help="measured length of the standard test in seconds (default 1, longer for bands under 60 Hz)",
    )
    p.add_argument("--seed", type=int, default=None, help="random seed of the test signal (default fixed)")
    p.add_argument(
        "--no-target",
        action="store_true",
        help="skip the cross-compiled runs in the Thumb emulator (done when arm-none-eabi-gcc and "
        "unicorn are installed)",
    )
    p.add_argument(
        "--no-squelch",
        action="store_true",
        help="skip measuring the noise squelch's switching CNRs on the simulated noisy IF",
    )
    p.add_argument(
        "--sweep",
        action="append",
        default=[],
        choices=SWEEP_KINDS,
        help="also sweep one quantity, every point checked bit for bit: IF carrier-to-noise ratio "
        "(cnr, dB), tone frequency (tone, Hz), peak deviation (deviation, Hz) or carrier offset "
        "from the IF (offset, Hz); repeatable",
    )
    p.add_argument(
        "--points",
        default=None,
        metavar="V1,V2,...",
        help="the swept values for --sweep (default: a range fitted to the spec)",
    )
    p.add_argument(
        "--scenario",
        action="append",
        default=[],
        choices=(*SCENARIO_NAMES, "all"),
        help="also run a hostile condition through the C and the model; repeatable, or 'all'",
    )
    p.add_argument(
        "--loss-ms", type=float, default=20.0, help="signal-loss scenario: no edges for this long (default 20)"
    )
    p.add_argument("--burst-ms", type=float, default=2.0, help="noise-burst scenario: its length (default 2)")

    p = sub.add_parser(
        "report",
        help="write one HTML page (plots inline) and WAV files: plan, chain, response, "
        "sweeps, hostile conditions, budget",
    )
    _add_scheme_args(p)
    p.add_argument("-o", "--out", required=True, metavar="DIR", help="folder to write into (created if missing)")
    p.add_argument("--force", action="store_true", help=FORCE_HELP)
    p.add_argument(
        "--seconds",
        type=float,
        default=None,
        help="length of the standard test signal (default 1, longer for bands under 60 Hz)",
    )
    p.add_argument("--seed", type=int, default=None, help="random seed of the test signals (default fixed)")
    p.add_argument("--no-target", action="store_true", help="leave out the emulated target runs")
    cli_replay.add_parser(sub)
    return ap


def warn_spec(spec: Spec) -> None:
    for w in spec.warnings:
        print(f"edgetally: warning: {w}", file=sys.stderr)


def _db(v: float) -> str:
    return "-" if v == float("inf") else f"{v:.1f}"


def _plan_table(spec: Spec, pl, sims: dict | None, d=None) -> str:
    lines = [
        f"edgetally plan for '{spec.name}': scheme {pl.scheme} ({pl.variant}), CIC order {pl.order} "
        f"ratio {pl.ratio}, grid {pl.grid_hz} Hz -> output {spec.output.rate_hz} Hz",
        "",
    ]
    sim_head = f" {'sim dB':>7}" if sims is not None else ""
    head = (
        f"{'scheme':<10} {'variant':<13} {'R':>3} {'grid Hz':>8} {'CPU':>6} {'RAM B':>6} {'SINAD dB':>8} "
        f"{'quant':>6} {'interp':>6} {'jitter':>6}{sim_head}  status"
    )
    lines += [head, "-" * len(head)]
    for o in pl.options:
        sim = ""
        if sims is not None:
            v = sims.get((o.scheme, o.variant))
            sim = f" {v:>7.1f}" if v is not None else f" {'':>7}"
        lines.append(
            f"{o.scheme:<10} {o.variant:<13} {o.ratio:>3} {o.grid_hz:>8} {o.load:>6.1%} {o.ram_bytes:>6} "
            f"{o.predicted_sinad_db:>7.1f}{'?' if o.doubtful else ' '} {_db(o.quant_sinad_db):>6} "
            f"{_db(o.curvature_sinad_db):>6} "
            f"{_db(o.jitter_sinad_db):>6}{sim}  {o.reason}"
        )
    pr, ld = pl.prediction, pl.load
    lines += [
        "",
        f"predicted SINAD {pr.sinad_db:.1f} dB ({standard.tone_hz(spec.signal.audio_hz):g} Hz tone at "
        f"{standard.LEVEL:.0%} deviation, {spec.signal.audio_hz:g} Hz band): "
        f"quantisation {_db(pr.quant_sinad_db)}, interpolation {_db(pr.curvature_sinad_db)}, "
        f"jitter {_db(pr.jitter_sinad_db)}, 16-bit output {_db(pr.output_sinad_db)}",
        f"CPU estimate on {spec.target.core} at {spec.target.cpu_hz / 1e6:g} MHz: {ld.per_edge} cycles/edge in ISRs, "
        f"{ld.per_input}/input, {ld.per_grid}/grid instant, {ld.per_output}/output sample = {ld.fraction:.1%} "
        f"(budget {spec.target.cpu_budget:.0%}); about {ld.ram_bytes} bytes of state",
    ]
    if d is not None:
        from ..check.choice import chain_summary

        lines.append(chain_summary(d, pl))
    lines += [f"note: {n}" for n in pl.notes]
    if sims:
        for (scheme, variant), v in sims.items():
            o = next(o for o in pl.options if (o.scheme, o.variant) == (scheme, variant))
            if abs(v - o.predicted_sinad_db) > 3:
                lines.append(
                    f"note: {scheme} {variant}: the simulation gives {v:.1f} dB, {v - o.predicted_sinad_db:+.1f} dB "
                    "from the white-noise prediction"
                    + (
                        " (count errors of a nearly commensurate IF and grid are tones, not white noise)"
                        if variant == "count"
                        else ""
                    )
                )
    lines.append(
        "quant/interp/jitter: predicted SINAD if that source were alone; '-': the source is absent; "
        "'?': the white-noise model may be several dB off here (see --simulate)"
    )
    return "\n".join(lines)


def _design_dict(d) -> dict:
    from ..check.choice import arith_name

    return {
        "arith": arith_name(d),
        "data_bits": d.filters.data_bits,
        "coef_bits": d.filters.coef_bits,
        "cycles_per_output": d.budget.cycles_per_output,
        "load_fraction": d.budget.load_fraction,
    }


def json_safe(obj):
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, dict):
        return {k: json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    return obj


def cmd_plan(args) -> int:
    spec = load_spec(args.spec)
    warn_spec(spec)
    from ..check.choice import design_and_plan

    # the design emit, verify and widths build (the [fixed] targets refuse here too), its arithmetic
    # confirmed by simulation
    d, pl = design_and_plan(spec, scheme=args.scheme)
    sims = None
    if args.simulate:
        from ..check.choice import simulate_options

        if sys.stderr.isatty():
            print("edgetally: simulating each feasible option ...", file=sys.stderr)
        sims = simulate_options(spec, pl)
    measured = None
    if args.measured:
        d, pl, measured = _measured_plan(spec, d, pl, args.scheme)
        measured = dict(measured)
    if args.json:
        obj = {"name": spec.name, **pl.to_dict(), "design": _design_dict(d)}
        if measured is not None:
            obj["measured"] = measured
        if sims is not None:
            obj["simulated_sinad_db"] = [{"scheme": k[0], "variant": k[1], "sinad_db": v} for k, v in sims.items()]
        print(json.dumps(json_safe(obj), indent=2))
    else:
        print(_plan_table(spec, pl, sims, d))
        if measured is not None:
            print(
                f"measured on the emulated {spec.target.core} (-Os): CPU load {measured['load_fraction']:.1%} "
                f"(estimate {d.budget.load_fraction:.1%}); cycles {measured['cycles_per_edge_isr']:g}/edge ISR, "
                f"{measured['cycles_per_input']:g}/input, {measured['cycles_per_grid']:g}/grid instant, "
                f"{measured['cycles_per_output']:g}/output; flash {measured['flash_bytes']} B"
            )
            for o in measured["dropped_after_measuring"]:
                print(
                    f"note: {o['scheme']} {o['variant']} R={o['ratio']} was dropped after measuring it: {o['reason']}"
                )
    return EXIT_OK


MEASURE_TRIES = 4  # options measured at most before giving up on --measured


def _measured_plan(spec: Spec, d, pl, scheme):
    """Measure the chosen design ``d`` (of plan ``pl``) in the emulator for the spec's core; while
    the measured load exceeds the budget, drop that option (with the measured figure as its reason),
    plan and design again. Returns the final design, its plan and its measurement."""
    from ..target import build as target
    from ..check.choice import design_and_plan
    from ..planner.choose import plan
    from ..target.check import TARGET_CORES, target_check

    core = spec.target.core
    if core not in TARGET_CORES:
        raise UsageError(f"--measured: the {core} core is not emulated ({', '.join(TARGET_CORES)} are)")
    if not target.available(core):
        t = target.TARGETS[core]
        raise RuntimeError(f"--measured needs {t.cc} (Debian {t.package}) and the {t.emulator} emulator")
    exclude: dict = {}
    for _ in range(MEASURE_TRIES):
        t = target_check(d, cores=(core,))[core]
        if t["load_fraction"] <= spec.target.cpu_budget:
            t["dropped_after_measuring"] = [
                {"scheme": k[0], "variant": k[1], "ratio": k[2], "reason": r} for k, r in exclude.items()
            ]
            return d, pl, t
        exclude[(pl.scheme, pl.variant, pl.ratio)] = (
            f"measured load {t['load_fraction']:.1%} exceeds the budget {spec.target.cpu_budget:.0%}"
        )
        d, pl = design_and_plan(spec, scheme, chosen=plan(spec, scheme=scheme, exclude=exclude, arith=pl.arith))
    raise RuntimeError(
        f"--measured: {MEASURE_TRIES} options in a row measured over the budget; raise "
        "target.cpu_budget or force a lighter scheme"
    )


def cmd_emit(args) -> int:
    spec = load_spec(args.spec)
    warn_spec(spec)
    from ..emit import file_names

    check_folder(Path(args.out), file_names(spec.name, test=not args.no_test), args.force)
    from ..check.choice import design as make_design
    from ..emit import emit

    d = make_design(spec, scheme=args.scheme)
    files = dict(emit(d))
    files[f"{d.name}_design.json"] = d.to_json() + "\n"
    if not args.no_test:
        from ..emit import unit_test
        from ..check.vectors import test_vectors

        files.update(unit_test(d, test_vectors(d)))
    for o in write_set(Path(args.out), {n: text.encode("utf-8") for n, text in files.items()}, args.force):
        print(f"{o.state}: {o.path}")
    return EXIT_OK


def _float_line(t: dict) -> str:
    """Per output sample: the integer C against the hand-written single-precision float chain,
    said plainly when float is faster."""
    kind = "hardware FPU" if t["float_fpu"] else "soft float"
    head = (
        f"per output sample: {t['cycles_per_output_sample']:g} cycles; hand-written single-precision "
        f"float ({kind}) {t['float_cycles_per_output_sample']:g}"
    )
    if t["float_ratio"] >= 1:
        verdict = f"integer {t['float_ratio']:.1f}x fewer"
    else:
        verdict = (
            f"FLOAT IS {1 / t['float_ratio']:.1f}x FASTER here (the integer C is still bit-exact and "
            f"deterministic across cores)"
        )
    return f"{head}: {verdict}; double precision {t['double_cycles_per_output_sample']:g} ({t['double_ratio']:.1f}x)"


def cmd_verify(args) -> int:
    from ..stimulus.inputs import DEFAULT_SEED
    from ..check.verify import verify

    _check_seconds(args.seconds)
    for opt, v in (("--loss-ms", args.loss_ms), ("--burst-ms", args.burst_ms)):
        if not (math.isfinite(v) and 0 < v <= 1000):
            raise SpecError(opt, v, "must be a time in (0, 1000] ms")
    points = cli_quality.parse_points(args.points)
    if points is not None and not args.sweep:
        raise UsageError("--points needs --sweep")
    spec = load_spec(args.spec)
    check_run_args(args, spec)
    warn_spec(spec)
    from ..check.choice import design as make_design

    d = make_design(spec, scheme=args.scheme)
    for kind in args.sweep:
        cli_quality.check_points(d, kind, points)
    tty = sys.stderr.isatty() and not args.json
    progress = (lambda m: print(f"edgetally: {m} ...", file=sys.stderr)) if tty else None
    seed = DEFAULT_SEED if args.seed is None else args.seed
    from ..check.verify import TooShort

    try:
        res = verify(
            d,
            seconds=args.seconds,
            seed=seed,
            progress=progress,
            targets=not args.no_target,
            squelch=not args.no_squelch,
        )
    except TooShort as e:
        raise UsageError(f"--seconds {args.seconds:g}: {e}") from None
    host = None
    if args.sweep or args.scenario:
        from ..check.hostbuild import build
        from ..measure.hostile import Options

        host = build(d)
    sw = cli_quality.run_sweeps(d, args.sweep, points, seed, host, tty)
    hs = (
        cli_quality.run_scenarios(d, args.scenario, Options(args.loss_ms, args.burst_ms, seed=seed), host, tty)
        if args.scenario
        else []
    )
    if args.json:
        print(json.dumps(json_safe({**res.to_dict(), **cli_quality.json_extra(sw, hs)}), indent=2))
    else:
        verdict = (
            "BIT-EXACT" if res.bit_exact else f"MISMATCH ({res.mismatches} samples, first at {res.first_mismatch})"
        )
        print(
            f"edgetally verify '{res.name}' ({res.scheme}, {res.variant}), {res.seconds:g} s of signal, "
            f"seed {res.seed}, {res.inputs} inputs"
        )
        print(f"  emitted C vs integer model: {verdict} over {res.samples} output samples")
        if res.data is not None:
            dd = res.data
            print(
                f"  data: {'BIT-EXACT' if dd['bit_exact'] else 'DIFFERS'} over {dd['bits']} bits of framed FSK at "
                f"Eb/N0 {dd['ebn0_db']:g} dB, bit rate {100 * dd['rate_error']:+g} %, carrier "
                f"{100 * dd['offset_of_deviation']:+g} % of the deviation; frames {dd['frames_correct']} correct of "
                f"{dd['frames_sent']} sent"
            )
        print(f"  standard test: {d.test.describe()}, after {res.lead_s:g} s settling")
        print(
            f"  SINAD: C {res.sinad_db:.2f} dB, float reference {res.float_sinad_db:.2f} dB, "
            f"predicted {res.predicted_sinad_db:.2f} dB{'?' if res.prediction_doubt else ''}"
        )
        if res.prediction_doubt:
            print(f"  the prediction may be several dB off: {res.prediction_doubt}")
        print(
            f"  implementation loss {res.implementation_loss_db:.2f} dB (against the float reference rounded to "
            f"the output word, {res.word_sinad_db:.2f} dB); prediction parts: quantisation "
            f"{_db(res.predicted_quant_sinad_db)} dB, interpolation {_db(res.predicted_curvature_sinad_db)} dB, "
            f"jitter {_db(res.predicted_jitter_sinad_db)} dB"
        )
        if res.quant_gap_db > 3:
            print(
                f"  quantisation alone would allow {res.predicted_quant_sinad_db:.1f} dB: this design falls "
                f"{res.quant_gap_db:.1f} dB short of it"
            )
        from ..measure.squelch import describe

        for line in describe(res.squelch):
            print("  " + line)
        print("  widths: " + ", ".join(f"{k} {v}" for k, v in res.widths.items()))
        print(f"  time: C {res.c_seconds:.3f} s, integer model {res.model_seconds:.3f} s")
        if res.target:
            for core, t in res.target.items():
                data_bits = f", {t['bits']} data bits" if t.get("bits") else ""
                print(
                    f"  {core} (-Os, emulated, {t['samples']} samples{data_bits}): "
                    f"{'bit-exact' if t['bit_exact'] else 'DIFFERS'}; cycles: {t['cycles_per_edge_isr']:g}/edge ISR, "
                    f"{t['cycles_per_input']:g}/input, {t['cycles_per_grid']:g}/grid instant, "
                    f"{t['cycles_per_output']:g}/output; flash {t['flash_bytes']} B, state {t['state_bytes']} B"
                )
                print("    " + _float_line(t))
                if t["isa_violations"]:
                    print(
                        f"    INSTRUCTION-SET CHECK FAILED: {len(t['isa_violations'])} instruction(s) the core lacks, "
                        f"first {t['isa_violations'][0]}"
                    )
        elif not args.no_target:
            print(
                "  target runs: skipped (needs a cross compiler, e.g. Debian's gcc-arm-none-eabi, and the emulator: "
                "the package's target extra, pip install '.[target]')"
            )
        for s in sw:
            cli_quality.print_sweep(s)
        if hs:
            cli_quality.print_scenarios(hs)
    isa_ok = all(not t.get("isa_violations") for t in (res.target or {}).values())
    ok = (
        res.ok
        and res.target_bit_exact is not False
        and isa_ok
        and all(s.bit_exact for s in sw)
        and all(h.passed for h in hs)
    )
    return EXIT_OK if ok else EXIT_FAIL


MIN_MEASURED_SAMPLES = 64  # output samples a SINAD figure is measured over, at the least
MAX_SEED = (1 << 32) - 1  # numpy's seed: a non-negative integer; kept to 32 bits for the C harness


def _check_seconds(seconds: float | None) -> None:
    if seconds is None:
        return
    if not (seconds > 0 and math.isfinite(seconds)) or seconds > 600:
        raise SpecError("--seconds", seconds, "must be a number of seconds in (0, 600]")


def check_run_args(args, spec: Spec) -> None:
    """The test-signal options of verify and report, against the spec: a seed numpy accepts, and
    a signal long enough to measure (MIN_MEASURED_SAMPLES output samples)."""
    _check_seconds(args.seconds)
    if args.seed is not None and not 0 <= args.seed <= MAX_SEED:
        raise SpecError("--seed", args.seed, f"must be a whole number from 0 to {MAX_SEED}")
    # MIN_MEASURED_SAMPLES output samples at the least (the band's own minimum record, from the
    # standard test, is checked against the design: check.verify.test_seconds)
    least = MIN_MEASURED_SAMPLES / spec.output.rate_hz
    if args.seconds is not None and args.seconds < least:
        raise SpecError(
            "--seconds",
            args.seconds,
            f"too short: at least {least:.3g} s for this spec ({MIN_MEASURED_SAMPLES} output samples)",
        )


def cmd_report(args) -> int:
    _check_seconds(args.seconds)
    spec = load_spec(args.spec)
    check_run_args(args, spec)
    warn_spec(spec)
    from ..check.choice import design_and_plan

    from ..check.verify import TooShort, test_seconds

    d, pl = design_and_plan(spec, scheme=args.scheme)
    try:
        test_seconds(d, args.seconds)
    except TooShort as e:
        raise UsageError(f"--seconds {args.seconds:g}: {e}") from None
    return cli_quality.cmd_report(args, spec, d, pl)


def cmd_widths(args) -> int:
    spec = load_spec(args.spec)
    warn_spec(spec)
    from ..check.choice import arith_name, design_and_plan
    from ..designer.widths import check_widths, parse_sets

    sets = parse_sets(args.set)
    d, pl = design_and_plan(spec, scheme=args.scheme)
    if spec.fixed.arith == "auto" and "arith" not in sets:
        # the arithmetic edgetally settled on (by simulated loss), checked as the user would get it
        spec = dataclasses.replace(spec, fixed=dataclasses.replace(spec.fixed, arith=arith_name(d)))
    rep = check_widths(spec, scheme=args.scheme, overrides=sets, simulate=not args.no_simulate, chosen=pl)
    if args.json:
        print(json.dumps(json_safe(rep.to_dict()), indent=2))
    else:
        over = ", ".join(f"{k}={v}" for k, v in rep.overrides.items()) or "none"
        print(f"edgetally widths for '{rep.name}': {rep.arith} arithmetic, overrides: {over}")
        print()
        print(f"{'register':<16} {'bits':>4} {'worst |value|':>22} {'margin':>7}  note")
        for r in rep.registers:
            flag = "  <-- FAILS" if r["margin_bits"] < 0 else ""
            print(f"{r['name']:<16} {r['bits']:>4} {r['bound']:>22} {r['margin_bits']:>7.2f}  {r['note']}{flag}")
        print()
        ci = rep.cic
        print(
            f"CIC: order {ci['order']} ratio {ci['ratio']}, {ci['in_bits']}-bit input, full width {ci['full_width']} "
            f"bits in {ci['register_bits']}-bit registers; droop at the band edge {ci['droop_db_at_band_edge']:.2f} dB"
            f"{' (compensated)' if ci['compensated'] else ''}; worst alias into the band {ci['worst_alias_db']:.1f} dB; "
            f"pruning {ci['pruning']}"
        )
        print(
            f"predicted implementation loss {rep.predicted_loss_db:.3f} dB; response error {rep.response_error_db:.4f} dB "
            f"(coefficients need {rep.coef_bits_needed} fraction bits for the tolerance)"
        )
        for c in rep.limit_cycles:
            print(
                f"zero-input limit cycle, {c['section']}: {c['dead_band_lsb']:g} LSB (Jackson's estimate "
                f"{c['jackson_lsb']:g} LSB), "
                + (
                    "no idle tone"
                    if c["dead_band_lsb"] == 0
                    else f"idle tone {c['below_noise_db']:g} dB below the noise floor"
                )
            )
        if rep.simulated_loss_db is not None:
            print(
                f"simulated: implementation loss {rep.simulated_loss_db:.2f} dB, emitted C "
                f"{'bit-exact' if rep.bit_exact else 'DIFFERS from the model'}"
            )
        print("OK: safe and within the targets" if rep.ok else "FAIL:\n  " + "\n  ".join(rep.failures))
    return EXIT_OK if rep.ok else EXIT_FAIL


def main(argv: list[str] | None = None) -> int:
    ap = _parser()
    args = ap.parse_args(argv)
    handler = {
        "plan": cmd_plan,
        "emit": cmd_emit,
        "verify": cmd_verify,
        "widths": cmd_widths,
        "report": cmd_report,
        "replay": cli_replay.run,
    }[args.command]
    try:
        return handler(args)
    except SpecError as e:
        if args.debug:
            traceback.print_exc()
        where = "argument error" if e.is_argument else f"spec error in {cut_path(getattr(args, 'spec', '?'))}"
        print(f"edgetally: {where}: {e}", file=sys.stderr)
        return EXIT_SPEC
    except (UsageError, cli_quality.ArgError, FolderError) as e:
        if args.debug:
            traceback.print_exc()
        print(f"edgetally: error: {' '.join(str(e).split())}", file=sys.stderr)
        return EXIT_SPEC
    except KeyboardInterrupt:
        print("edgetally: interrupted", file=sys.stderr)
        return 130
    except Exception as e:
        return _internal(e, args.debug)


def _internal(e: Exception, debug: bool) -> int:
    """A failure that is not the user's spec: exit 1, one line unless --debug (a BuildError
    carries the compiler's messages, which are printed in full)."""
    from ..check.hostbuild import BuildError

    if debug:
        traceback.print_exc()
    if isinstance(e, BuildError):
        print(f"edgetally: the emitted C did not compile cleanly:\n{e}", file=sys.stderr)
    else:
        print(
            f"edgetally: internal error: {e.__class__.__name__}: {e} (run with --debug for the traceback)",
            file=sys.stderr,
        )
    return EXIT_FAIL


if __name__ == "__main__":
    sys.exit(main())
