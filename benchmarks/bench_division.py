"""Benchmark (not a test): the stamp front's quotient on the Cortex-M0+ class (no divide instruction),
the run-time library's unsigned division (libgcc's __aeabi_uidiv, what ``(e1 << shift) / d``
compiles to) against edgetally's division-free form (edgetally.fixedpoint: one reciprocal per stamp
interval, then a multiply, a shift and a remainder correction per quotient), cross-compiled at -Os
and run in the emulator (unicorn; cycles from edgetally.target.cycles.TIMING, estimates from the
core's instruction classes).

    python benchmarks/bench_division.py

For each example's stamp design: the (e1, d) pairs of its own standard test (every grid instant's
offset and interval), run through four loops of the same shape; the empty loop's cycles are taken
off the others. Printed per quotient: the division, the reciprocal of the interval plus one
quotient (an interval with one grid instant, the worst case), and a quotient alone (each further
grid instant of the same interval), and the cubic's two divisions against its reciprocal and two
quotients.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np

import edgetally
from edgetally.check.model import unwrap
from edgetally.fixedpoint import CUBIC_T_BITS, c_definitions, recip_plan
from edgetally.stimulus.inputs import make_inputs
from edgetally.target import build as target
from edgetally.target.check import available_cores
from edgetally.target.cycles import Profiler, code_end
from edgetally.target.run import machine

HERE = Path(__file__).resolve().parent
EXAMPLES = HERE.parent / "examples"
CORE = "cortex-m0plus"
PAIRS = 1024

SOURCE = r"""
#include <stdint.h>
#include <stddef.h>
{defs}
#define NP {n}u
extern const uint32_t bench_e1[NP], bench_d[NP];
const uint32_t bench_e1[NP] = {{ {e1} }};
const uint32_t bench_d[NP] = {{ {d} }};
volatile uint32_t bench_sink;
const uint32_t harness_state_size = 4u;   /* what edgetally.target.build.describe reads */

void harness_init(void);
void harness_init(void) {{ bench_sink = 0u; }}

//@@ bench_empty
void bench_empty(void);
void bench_empty(void)
{{
    uint32_t acc = 0u, i;
    for (i = 0u; i < NP; i++) {{
        acc ^= bench_e1[i] + bench_d[i];
        bench_sink = acc;
    }}
}}

//@@ bench_div
void bench_div(void);
void bench_div(void)
{{
    uint32_t acc = 0u, i;
    for (i = 0u; i < NP; i++) {{
        acc ^= (bench_e1[i] << {shift}u) / bench_d[i];
        bench_sink = acc;
    }}
}}

//@@ bench_recip
void bench_recip(void);
void bench_recip(void)
{{
    uint32_t acc = 0u, i;
    for (i = 0u; i < NP; i++) {{
        uint32_t d = bench_d[i];
        unsigned k = bench_recip_norm(d);
        uint32_t dn = d << k;
        uint32_t r = bench_reciprocal(dn);
        acc ^= bench_ratio_recip(bench_e1[i] << k, 0u, {shift}u, dn, r, {fix_lin}u);
        bench_sink = acc;
    }}
}}

//@@ bench_quot
void bench_quot(void);
void bench_quot(void)
{{
    uint32_t acc = 0u, i;
    const uint32_t d = UINT32_C({dmax});          /* above every offset: one interval, many instants */
    const unsigned k = bench_recip_norm(d);
    const uint32_t dn = d << k;
    const uint32_t r = bench_reciprocal(dn);
    for (i = 0u; i < NP; i++) {{
        acc ^= bench_ratio_recip(bench_e1[i] << k, 0u, {shift}u, dn, r, {fix_lin}u);
        bench_sink = acc;
    }}
}}

//@@ bench_div2
void bench_div2(void);
void bench_div2(void)
{{
    uint32_t acc = 0u, i;
    for (i = 0u; i < NP; i++) {{
        uint32_t x = (bench_e1[i] << {tb}u) + 77u;
        acc ^= (bench_e1[i] << {shift}u) / bench_d[i];
        acc ^= (x << ({shift}u - {tb}u)) / bench_d[i];
        bench_sink = acc;
    }}
}}

//@@ bench_recip2
void bench_recip2(void);
void bench_recip2(void)
{{
    uint32_t acc = 0u, i;
    for (i = 0u; i < NP; i++) {{
        uint32_t d = bench_d[i];
        uint32_t x = (bench_e1[i] << {tb}u) + 77u;
        unsigned k = bench_recip_norm(d);
        uint32_t dn = d << k;
        uint32_t r = bench_reciprocal(dn);
        acc ^= bench_ratio_recip(bench_e1[i] << k, 0u, {shift}u, dn, r, {fix_lin}u);
        acc ^= bench_ratio_recip(x << k, {tb}u, {shift}u, dn, r, {fix_cub}u);
        bench_sink = acc;
    }}
}}
"""


def pairs(design, n: int) -> tuple[np.ndarray, np.ndarray]:
    """(e1, d) of the first n grid instants of the design's standard test (carrier present)."""
    fr = design.front
    t = unwrap(make_inputs(design, 0.2, 1), fr.timer_bits, fr.max_delta)
    g = t[0] + fr.grid_ticks * np.arange(1, (t[-1] - t[0]) // fr.grid_ticks, dtype=np.int64)
    i = np.searchsorted(t, g, side="right")
    d = t[i] - t[i - 1]
    e1 = g - t[i - 1]
    keep = (d <= fr.gap_ticks) & (d > 0) & (((e1 << CUBIC_T_BITS) + 77) < (d << CUBIC_T_BITS))
    return e1[keep][:n], d[keep][:n]


def measure(design, wd: Path) -> dict[str, float]:
    # the design's own plan (M0+ class designs), or the one it would have (the M4-class example)
    plan = recip_plan(design.front.gap_ticks.bit_length(), design.front.phase_shift)
    e1, d = pairs(design, PAIRS)
    src = SOURCE.format(defs=c_definitions("bench", ["wrap_s32", "reciprocal"], plan), n=e1.size,
                        e1=", ".join(f"{v}u" for v in e1), d=", ".join(f"{v}u" for v in d), shift=plan.shift,
                        fix_lin=plan.fix_linear, fix_cub=plan.fix_cubic, tb=CUBIC_T_BITS,
                        dmax=min(int(d.max()) + 1, plan.d_hi))
    t = target.TARGETS[CORE]
    flags = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-Os", *t.flags, "-gdwarf-4"]
    head, *bodies = src.split("//@@ ")
    out = {}
    for body in bodies:
        # each loop in a program of its own: the compiler inlines (or not) as it does in the
        # emitted C, where each operation has one call site (two for the cubic's quotient)
        name, body = body.split("\n", 1)
        wd_n = wd / name
        wd_n.mkdir(parents=True, exist_ok=True)
        text = head + body
        if "bench_recip" not in body and "bench_ratio" not in body:
            text = text.replace(c_definitions("bench", ["wrap_s32", "reciprocal"], plan), "")
        log = target.compile_and_link(CORE, {"bench.c": text}, flags, wd_n, "bench.elf")
        b = target.describe(design, CORE, "-Os", wd_n / "bench.elf", wd_n, log)
        m = machine(b)
        prof = Profiler(m, b, [("all", [(target.FLASH_BASE, code_end(b))])], {})
        m.call("harness_init")
        prof.start()
        m.call(name)
        out[name] = sum(prof.result().cycles.values()) / e1.size
    return {k: v - out["bench_empty"] for k, v in out.items() if k != "bench_empty"}


def main() -> None:
    if CORE not in available_cores():
        print(f"{CORE}: cross compiler or emulator not installed")
        return
    hdr = (f"{'example':14} {'d range':>11} {'udiv':>6} {'recip+q':>8} {'q alone':>8} "
           f"{'2 udiv':>7} {'recip+2q':>9}   (cycles per grid instant, {CORE}, -Os)")
    print(hdr)
    print("-" * len(hdr))
    with tempfile.TemporaryDirectory(prefix="edgetally-bench-div-") as root:
        for path in sorted(EXAMPLES.glob("*.toml")):
            d = edgetally.design(edgetally.load_spec(path))
            if not d.stamps:
                continue
            r = measure(d, Path(root) / path.stem)
            p = recip_plan(d.front.gap_ticks.bit_length(), d.front.phase_shift)
            print(f"{path.stem:14} {f'{p.d_lo}..{p.d_hi}':>11} {r['bench_div']:6.1f} {r['bench_recip']:8.1f} "
                  f"{r['bench_quot']:8.1f} {r['bench_div2']:7.1f} {r['bench_recip2']:9.1f}")


if __name__ == "__main__":
    main()
