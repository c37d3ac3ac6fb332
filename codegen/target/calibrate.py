"""Regenerate the planner's per-core cycle tables (edgetally/planner/costs.json) from emulated runs.

    python -m edgetally.target.calibrate [--out PATH] [--cores CORE ...]

Each probe is a spec (the bundled examples, each moved to every emulated core, crossed with every
scheme and estimator the part allows, every filter arithmetic and with or without de-emphasis):
its design is emitted, cross-compiled at -Os and run in the emulator on the start of the standard
test (edgetally.target.cycles.measure). Per core the figures are then reduced to the planner's keys
(edgetally.planner.costs): the median of the probes for each ISR body, input and grid instant, and
a least-squares fit of cycles per output sample = base (per front end) + the extra of each word form
of the base (costs.base_forms) + per-section cost (per arithmetic) x sections. Each entry keeps its
probe count and its worst relative deviation from the probes, and the file records the date and
each compiler's version.
"""

from __future__ import annotations

import argparse
import datetime
import json
import subprocess
import sys
import tomllib
from collections import defaultdict
from pathlib import Path

import numpy as np
from scipy import optimize

from ..designer.wordlength import ARITHS
from ..planner import costs
from ..spec import SpecError, parse_spec
from ..stimulus.inputs import DEFAULT_SEED, make_inputs

PROBE_SECONDS = 0.05
PROBE_CPU_HZ = 400_000_000
MAX_INPUTS = {"avr": 2000}
DEFAULT_INPUTS = 4000


def probe_specs(examples: Path, core: str) -> list[tuple[str, dict]]:
    """(label, raw spec) of every probe for ``core``."""
    out = []
    for f in sorted(examples.glob("*.toml")):
        raw = tomllib.loads(f.read_text())
        for arith in ARITHS:
            for de in (0, 50):
                r = json.loads(json.dumps(raw))
                r["target"]["core"] = core
                for k in ("hw_divide", "mul64", "isr_cycles", "irq_jitter_cycles"):
                    r["target"].pop(k, None)  # the core's own figures
                r["target"]["capture_prescalers"] = [1, 2]
                # price every variant the part can run, not only those that fit its clock: the cycles
                # per event do not depend on the clock, so the probes get a fast one
                r["target"]["cpu_hz"] = PROBE_CPU_HZ
                r["target"]["cpu_budget"] = 1.0
                r.setdefault("fixed", {})["arith"] = arith
                # the cycles do not depend on the loss either: every arithmetic is priced, not only
                # those that meet the example's limit (spec.LIMITS' largest loss limit)
                r["fixed"]["loss_limit_db"] = 40.0
                r["signal"]["deemphasis_us"] = de
                out.append((f"{f.stem}/{arith}/de{de}", r))
    return out


def probe_designs(raw: dict):
    """Every design the planner can make from ``raw``: each scheme and estimator it allows."""
    from ..designer.assemble import design
    from ..planner.choose import plan

    try:
        spec = parse_spec(raw)
    except SpecError:
        return
    for scheme in ("timestamp", "interrupt", "counter"):
        try:
            base = plan(spec, scheme)
        except SpecError:
            continue
        labels = {o.variant for o in base.options if o.scheme == scheme and o.feasible}
        for label in sorted(labels):
            try:
                yield design(spec, plan(spec, scheme, label))
            except (SpecError, ValueError):
                continue


def keys_of(design) -> dict:
    fr, f = design.front, design.filters
    order = getattr(fr, "order", "linear")
    bits = fr.timer_bits if fr.kind == "stamp" else fr.counter_bits
    return {
        "input": costs.input_key(fr.kind, order, bits),
        "grid": costs.grid_key(fr.kind, order),
        "front": fr.kind,
        # the data path of a data design runs at the output rate too: fitted as a form of its own, so
        # that it does not bias the base (the planner prices it from planner.schemes.DATA_CYCLES)
        "forms": costs.base_forms(design.scale.word, design.scale.product, design.squelch.level_bits)
        + (("data",) if design.data is not None else ()),
        # sections per cost key: the shaped arithmetic's FIR and recursive sections cost apart
        "sections": (
            {
                costs.shaped_key(True): sum(s.fir for s in f.sections),
                costs.shaped_key(False): sum(not s.fir for s in f.sections),
            }
            if f.shaped
            else {costs.arith_key(f.data_bits, f.coef_width, f.acc_bits): len(f.sections)}
        ),
    }


def measure(design, core: str) -> dict:
    from . import build, cycles

    b = build.cross_build(design, core, "-Os")
    x = make_inputs(design, PROBE_SECONDS, DEFAULT_SEED)
    c = cycles.measure(b, design, x, max_inputs=MAX_INPUTS.get(core, DEFAULT_INPUTS))
    p = design.name
    isr = {}
    for name, cyc in c.isr_cycles.items():
        kind = name[len(p) + 1 : -len("_isr")]
        isr[costs.isr_key(kind, design.front.kind)] = cyc
    return {
        "input": c.cycles_per_input,
        "grid": c.cycles_per_grid,
        "output": c.cycles_per_output,
        "isr": isr,
        "grid_per_input": c.grid_instants / c.inputs,
    }


def _entry(values: list[float]) -> dict:
    med = float(np.median(values))
    dev = max(abs(v - med) for v in values) / med if med else 0.0
    return {"cycles": round(med, 1), "probes": len(values), "max_rel_dev": round(dev, 3)}


def _fit(rows: list[tuple[dict[str, float], float]]) -> tuple[dict[str, float], float]:
    """Least squares in relative terms: ``rows`` are ({key: count per event}, measured cycles per
    event); returns the cycles of each key and the worst relative deviation of the fit."""
    keys = sorted({k for r, _ in rows for k in r})
    a = np.array([[r.get(k, 0.0) / y for k in keys] for r, y in rows])
    # non-negative least squares (scipy.optimize.nnls): no cost can be negative, and where the
    # probes barely tell a base from a section count (the same number of sections in most probes)
    # an unconstrained fit can trade one against the other into negative figures
    coef, _ = optimize.nnls(a, np.ones(len(rows)))
    return dict(zip(keys, (float(c) for c in coef), strict=True)), float(np.max(np.abs(a @ coef - 1.0)))


def reduce(rows: list[tuple[dict, dict]]) -> dict:
    """The table of one core from its (keys, measured) rows.

    ISR bodies: the median of the probes. Inputs and grid instants: one fit of the front end's work
    per input = input cost + grid cost x grid instants per input (a stamp front interpolates at every
    grid instant inside the stamp's interval, inside its per-input code; a count front has one grid
    instant per input, so only the sum is fixed and the fit splits it). Output samples: base per front
    end + per-section cost per arithmetic x sections."""
    isr: dict[str, list[float]] = defaultdict(list)
    for _, m in rows:
        for ik, v in m["isr"].items():
            isr[ik].append(v)
    table: dict = {"isr": {key: _entry(v) for key, v in sorted(isr.items())}}
    front, dev_front = _fit(
        [
            (
                {"input:" + k["input"]: 1.0, "grid:" + k["grid"]: m["grid_per_input"]},
                m["input"] + m["grid"] * m["grid_per_input"],
            )
            for k, m in rows
        ]
    )
    n: dict[str, int] = defaultdict(int)
    for k, _ in rows:
        n["input:" + k["input"]] += 1
        n["grid:" + k["grid"]] += 1
    for role in ("input", "grid"):
        table[role] = {
            key.split(":", 1)[1]: {"cycles": round(v, 1), "probes": n[key]}
            for key, v in front.items()
            if key.startswith(role + ":")
        }
    table["front_fit_max_rel_dev"] = round(dev_front, 3)
    out, dev_out = _fit(
        [
            (
                {
                    "base:" + k["front"]: 1.0,
                    **{"form:" + f: 1.0 for f in k["forms"]},
                    **{"section:" + a: float(n) for a, n in k["sections"].items()},
                },
                m["output"],
            )
            for k, m in rows
        ]
    )
    table["output"] = {
        "base": {k.split(":", 1)[1]: round(v, 1) for k, v in out.items() if k.startswith("base:")},
        "form": {k.split(":", 1)[1]: round(v, 1) for k, v in out.items() if k.startswith("form:")},
        "section": {k.split(":", 1)[1]: round(v, 1) for k, v in out.items() if k.startswith("section:")},
        "probes": len(rows),
        "max_rel_dev": round(dev_out, 3),
    }
    return table


def compiler_version(core: str) -> str:
    from .build import TARGETS, compiler

    cc = compiler(core)
    if cc is None:
        return TARGETS[core].cc + " (not installed)"
    try:
        text = subprocess.run([cc, "--version"], capture_output=True, text=True, timeout=30).stdout
    except (OSError, subprocess.SubprocessError):
        return TARGETS[core].cc + " (version unknown)"
    return text.splitlines()[0] if text else TARGETS[core].cc


def calibrate(examples: Path, cores: tuple[str, ...], say=print) -> dict:
    from concurrent.futures import ThreadPoolExecutor

    compilers: dict[str, str] = {}
    tables: dict[str, dict] = {}
    out = {"generated": datetime.date.today().isoformat(), "opt": "-Os", "compilers": compilers, "cores": tables}
    for core in cores:
        designs, seen = [], set()
        for label, raw in probe_specs(examples, core):
            for d in probe_designs(raw):
                key = (d.to_json(),)
                if key not in seen:
                    seen.add(key)
                    designs.append((label, d))
        say(f"{core}: {len(designs)} probe designs")
        if not designs:
            raise RuntimeError(f"{core}: the probe specs give no design")
        with ThreadPoolExecutor(max_workers=2) as pool:
            measured = list(pool.map(measure, [d for _, d in designs], [core] * len(designs)))
        tables[core] = reduce([(keys_of(d), m) for (_, d), m in zip(designs, measured, strict=True)])
        compilers[core] = compiler_version(core)
        say(f"{core}: output fit worst {tables[core]['output']['max_rel_dev']:.1%}")
    return out


def main(argv: list[str] | None = None) -> int:
    from .build import TARGETS, available

    ap = argparse.ArgumentParser(prog="python -m edgetally.target.calibrate", description=__doc__.split("\n\n")[0])
    ap.add_argument("--examples", type=Path, default=Path("examples"), help="folder of probe specs (default: examples)")
    ap.add_argument("--out", type=Path, default=Path(__file__).resolve().parent.parent / "planner" / costs.TABLE_FILE)
    ap.add_argument("--cores", nargs="*", default=list(TARGETS), help="emulated cores (default: all)")
    args = ap.parse_args(argv)
    missing = [c for c in args.cores if c not in TARGETS or not available(c)]
    if missing:
        print(
            f"calibrate: cannot run {', '.join(missing)} here (not an emulated core, or its compiler or "
            "emulator is missing)",
            file=sys.stderr,
        )
        return 2
    table = calibrate(args.examples, tuple(args.cores))
    tmp = args.out.with_suffix(".tmp")
    tmp.write_text(json.dumps(table, indent=1, sort_keys=True) + "\n")
    tmp.replace(args.out)
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
