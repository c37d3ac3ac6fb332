"""Benchmark (not a test): the FSK data path of examples/weather_station_fsk.toml.

    python benchmarks/bench_datalink.py [--quick] [--eye FILE.png]

1. Bit-error rate of the emitted C (host build) from 6 to 13 dB Eb/N0 against ideal non-coherent
   BFSK, 0.5 exp(-Eb/2N0) (Proakis, Digital Communications), with the 95 % Clopper-Pearson interval
   of each point and the Eb/N0 shift it means (edgetally.measure.ber).
2. Lock time of the bit clock: bits from the first preamble bit until the lock detector first
   reports lock (the integer model's per-bit status), over 20 seeds, at 12 and 20 dB, with the
   bit rate 0 and +-1 % off and the carrier 10 % of the deviation off.
3. Bit-rate error and carrier offset the framing survives: frames received unchanged (of 12) at
   20 dB, swept.
4. Cycles per bit of the data path on each emulated core: the chain's cycles per output sample
   with and without the data path on the same inputs, times the samples per bit.
--eye writes an eye diagram of the matched filter's output (two bits wide) at 12 dB.
"""

from __future__ import annotations

import argparse
import dataclasses
from pathlib import Path

import numpy as np

import edgetally
from edgetally.check import hostbuild, model
from edgetally.measure import ber
from edgetally.stimulus import fsk

HERE = Path(__file__).resolve().parent
EXAMPLE = HERE.parent / "examples" / "weather_station_fsk.toml"


def ber_curve(design, host, quick: bool) -> None:
    print("Eb/N0 dB | bits | errors | BER measured | ideal non-coherent | 95 % interval | shift from ideal (dB)")
    for eb in range(6, 14):
        ideal = float(ber.ideal_noncoherent(eb))
        n = int(min(400_000, max(5_000, 30 / ideal)))
        if quick:
            n = min(n, 60_000)
        pt = ber.measure(host, design, float(eb), n, seed=100 + eb)
        lo, hi = ber.clopper_pearson(pt.errors, pt.bits, 0.95)
        worst, best = pt.loss_interval_db(0.95)
        print(
            f"{eb:7d} | {pt.bits} | {pt.errors} | {pt.ber:.3g} | {ideal:.3g} | [{lo:.3g}, {hi:.3g}] "
            f"| {best:+.2f} .. {worst:+.2f}"
        )


def manchester_ber(host_for) -> None:
    """The same link with Manchester at half the bit rate (the same 2400 chips/s on the air)."""
    import copy
    import tomllib

    raw = tomllib.loads(EXAMPLE.read_text())
    raw = copy.deepcopy(raw)
    raw["data"].update(line_code="manchester", bit_rate_hz=1200)
    d = edgetally.design(edgetally.parse_spec(raw))
    host = host_for(d)
    print("Manchester, 1200 bit/s: Eb/N0 dB | bits | errors | BER | ideal non-coherent | shift from ideal (dB, 95 %)")
    for eb in (8, 10, 12):
        ideal = float(ber.ideal_noncoherent(eb))
        pt = ber.measure(host, d, float(eb), int(min(200_000, max(5_000, 30 / ideal))), seed=300 + eb)
        worst, best = pt.loss_interval_db(0.95)
        print(f"{eb:7d} | {pt.bits} | {pt.errors} | {pt.ber:.3g} | {ideal:.3g} | {best:+.2f} .. {worst:+.2f}")


def _frames(design, rng, n, ebn0, rate_error, offset):
    pays = [bytes(rng.integers(0, 256, design.data.frame_bytes, dtype=np.uint8).tolist()) for _ in range(n)]
    bits = fsk.frames_bits(design, pays)
    dev = design.full_scale_hz
    sig = fsk.FskSignal(
        design.if_hz, dev, design.data.bit_rate_hz * (1 + rate_error), bits, 0.01, offset * dev, chips=design.data.chips
    )
    return pays, sig, fsk.record(design, sig, ebn0, rng, tail_s=0.005)


def lock_time(design) -> None:
    print("Eb/N0 dB | bit-rate error | offset | lock time in bits: median, 90th percentile, max (20 seeds)")
    for ebn0 in (12.0, 20.0):
        for re_ in (0.0, -0.01, 0.01):
            a = np.array([ber.lock_bits(design, ebn0, seed, re_, 0.1) for seed in range(20)])
            print(f"{ebn0:8g} | {re_:+.0%} | +10 % | {np.median(a):.0f}, {np.percentile(a, 90):.0f}, {a.max():.0f}")


def tolerance(design, host) -> None:
    print("bit-rate error | offset (of the deviation) | frames unchanged of 12 at 20 dB")
    for re_ in (0.0, 0.01, 0.02, 0.025, 0.03, -0.01, -0.02, -0.025, -0.03):
        rng = np.random.default_rng(5)
        pays, _, rec = _frames(design, rng, 12, 20.0, re_, 0.1)
        got = [f for _, f in host.process(rec.inputs)[1]["data"]["frames_read"]]
        print(f"{re_:+.1%} | +10 % | {sum(f in pays for f in got)}")
    for off in (0.25, 0.5, 0.75, -0.5):
        rng = np.random.default_rng(6)
        pays, _, rec = _frames(design, rng, 12, 20.0, 0.0, off)
        got = [f for _, f in host.process(rec.inputs)[1]["data"]["frames_read"]]
        print(f"+0.0 % | {off:+.0%} | {sum(f in pays for f in got)}")


def cycles_per_bit(design) -> None:
    from edgetally.target.check import available_cores, check_core

    cores = available_cores()
    if not cores:
        print("no cross compiler or emulator here: skipped")
        return
    rec, _ = fsk.data_test(design, 0.8, 1)
    plain = dataclasses.replace(design, data=None)
    print("core | cycles per output sample with / without the data path | data path cycles per bit")
    for core in cores:
        a = check_core(design, core, rec.inputs, rec.inputs)
        b = check_core(plain, core, rec.inputs, rec.inputs)
        per_bit = (a.cycles_per_output_sample - b.cycles_per_output_sample) * design.data.samples_per_bit
        print(f"{core} | {a.cycles_per_output_sample:g} / {b.cycles_per_output_sample:g} | {per_bit:.0f}")


def eye(design, path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rng = np.random.default_rng(3)
    sig = ber.random_signal(design, 600, rng)
    rec = fsk.record(design, sig, 12.0, rng, tail_s=0.005)
    d = model.run(design, rec.inputs).data
    sps = int(round(design.data.samples_per_bit))
    fig, ax = plt.subplots(figsize=(6, 4))
    for s in d.strobes[200:-2]:
        seg = d.y[s - sps : s + sps + 1]
        ax.plot(np.arange(-sps, sps + 1) / sps, seg / design.data.amplitude, color="C0", alpha=0.15, lw=0.8)
    ax.axvline(0, color="k", lw=0.8)
    ax.set_xlabel("time from the bit strobe (bits)")
    ax.set_ylabel("matched filter output / clean amplitude")
    ax.set_title(f"{design.name}: eye at Eb/N0 12 dB (integer model)")
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    print(f"eye diagram written to {path}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="fewer bits at the high Eb/N0 points")
    ap.add_argument("--eye", type=Path, help="write an eye diagram PNG here")
    ap.add_argument("--no-target", action="store_true")
    args = ap.parse_args()
    design = edgetally.design(edgetally.load_spec(EXAMPLE))
    host = hostbuild.build(design)
    ber_curve(design, host, args.quick)
    manchester_ber(hostbuild.build)
    lock_time(design)
    tolerance(design, host)
    if not args.no_target:
        cycles_per_bit(design)
    if args.eye:
        eye(design, args.eye)


if __name__ == "__main__":
    main()
