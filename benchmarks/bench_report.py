"""Benchmark (not a test): wall time of `edgetally report` for every example, as a user runs it
(a fresh process, the emitted C compiled on the first run and cached after; the emulated target
runs included when arm-none-eabi-gcc and unicorn are installed).

    python benchmarks/bench_report.py

The issue's target: campus_fm in under a minute on a 2-core machine.
"""

from __future__ import annotations

import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
EXAMPLES = HERE.parent / "examples"


def run(spec: Path, out: Path) -> float:
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-m", "edgetally", "report", str(spec), "-o", str(out), "--force"],
                         capture_output=True, text=True)
    dt = time.perf_counter() - t0
    if res.returncode != 0:
        raise SystemExit(f"{spec.name}: exit {res.returncode}\n{res.stdout}{res.stderr}")
    return dt


def main() -> None:
    import edgetally

    print(f"edgetally {edgetally.__version__}, Python {platform.python_version()}, {platform.machine()}, "
          f"first run (cold) and second run (C build cached)")
    print(f"{'example':14} {'cold s':>7} {'warm s':>7}")
    with tempfile.TemporaryDirectory(prefix="edgetally-bench-report-") as tmp:
        for spec in sorted(EXAMPLES.glob("*.toml")):
            out = Path(tmp) / spec.stem
            cold = run(spec, out)
            warm = run(spec, out)
            print(f"{spec.stem:14} {cold:7.1f} {warm:7.1f}")


if __name__ == "__main__":
    main()
