"""Benchmark (not a test): how long verify takes for one second of signal, and how many edges per
second the cffi-compiled C and the integer model each process, for every bundled example.

    python benchmarks/bench_verify.py [--repeat 3] [--seconds 1]

Prints a table; the figures from a run are kept in benchmarks/RESULTS.md by hand.
"""

from __future__ import annotations

import argparse
import platform
import time
from pathlib import Path

import edgetally
from edgetally.check import hostbuild
from edgetally.check import model
from edgetally.stimulus.inputs import make_inputs
from edgetally.check.verify import verify

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def best_of(n, fn):
    times = []
    for _ in range(n):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3, help="runs per figure; the best is kept")
    ap.add_argument("--seconds", type=float, default=1.0, help="signal length")
    args = ap.parse_args()
    print(f"edgetally {edgetally.__version__}, Python {platform.python_version()}, {platform.machine()}, "
          f"best of {args.repeat}")
    print(f"{'example':<14} {'scheme':<10} {'inputs':>8} {'verify s':>9} {'C inputs/s':>12} {'model inputs/s':>15} "
          f"{'C/model':>8}")
    for path in sorted(EXAMPLES.glob("*.toml")):
        d = edgetally.design(edgetally.load_spec(path))
        hostbuild.build(d)                       # compile once; verify's own figure reuses the cache
        stamps = make_inputs(d, args.seconds, seed=1)
        host = hostbuild.build(d)
        t_verify = best_of(args.repeat, lambda: verify(d, seconds=args.seconds))
        t_c = best_of(args.repeat, lambda: host.process(stamps))
        t_m = best_of(args.repeat, lambda: model.run(d, stamps))
        print(f"{path.stem:<14} {d.scheme:<10} {stamps.size:>8} {t_verify:>9.3f} {stamps.size / t_c:>12.3g} "
              f"{stamps.size / t_m:>15.3g} {t_m / t_c:>8.1f}")


if __name__ == "__main__":
    main()
