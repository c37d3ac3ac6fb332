"""The noise squelch in the emitted C: mutes a receiver with no carrier, opens on a carrier at the
spec's CNR in the stated time, is bit-exact with the integer model, for every example and scheme."""

from __future__ import annotations

import math
from pathlib import Path
import shutil
import subprocess

import numpy as np
import pytest

from edgetally.check import hostbuild, model
from edgetally.designer import squelch as sqd
from edgetally.fixedpoint import c_definitions, squelch_level
from edgetally.measure import squelch
from edgetally.stimulus import ifnoise
from edgetally.stimulus.inputs import hardware_inputs, make_inputs, standard_signal

from conftest import ALL_DESIGNS, host_for

KEYS = sorted(ALL_DESIGNS)
# a counter reading 0 or 1 edge per grid instant (its grid outruns the IF) cannot tell noise from a
# carrier: its squelch is left open and says so (designer.squelch); the muting tests skip it
SEEING = [k for k in KEYS if not ALL_DESIGNS[k].squelch.blind]
BLIND = [k for k in KEYS if ALL_DESIGNS[k].squelch.blind]
RANDOM_INPUTS = 300_000  # the count of random stamps
QUIET_DBFS = -40.0  # the bound for a muted output


def _dbfs(design, out) -> np.ndarray:
    frac = np.abs(design.output.fraction(out))
    return 20 * np.log10(np.maximum(frac, 1e-12))


@pytest.mark.parametrize("key", SEEING)
def test_random_inputs_stay_muted(key, hosts):
    # what a limiter gives with no carrier, as the hardware would deliver it: random timer values
    # (stamp fronts) or random counter readings (count fronts), RANDOM_INPUTS of them
    d = ALL_DESIGNS[key]
    rng = np.random.default_rng(12)
    x = rng.integers(0, 1 << d.input_bits, size=RANDOM_INPUTS, dtype=np.int64)
    got, counters = host_for(hosts, key).process(x)
    want = model.run(d, x)
    assert np.array_equal(got, want.out) and got.size == want.out.size
    assert not counters["squelch_open"]
    closed = np.flatnonzero(~want.squelch_open)
    assert closed.size and closed[0] == 0  # closed from power-up on
    assert np.max(_dbfs(d, got[closed[0] :]), initial=-300.0) <= QUIET_DBFS


@pytest.mark.parametrize("key", SEEING)
def test_pure_noise_if_stays_muted(key, hosts):
    # a carrier 40 dB under Gaussian noise in the Carson band: the edges are the noise's zero crossings
    d = ALL_DESIGNS[key]
    rng = np.random.default_rng(5)
    sig = standard_signal(d, rng)
    dur = 0.25
    times = ifnoise.noisy_edge_times(sig, dur, -40.0, 2.0 * (d.full_scale_hz + d.audio_hz), rng, oversample=8)
    x = hardware_inputs(d, times, dur, rng)
    got, counters = host_for(hosts, key).process(x)
    want = model.run(d, x)
    assert np.array_equal(got, want.out)
    assert not want.squelch_open.any() and not counters["squelch_open"]
    assert np.max(_dbfs(d, got), initial=-300.0) <= QUIET_DBFS


@pytest.mark.parametrize("key", SEEING)
def test_noise_after_a_carrier_closes_it(key):
    d = ALL_DESIGNS[key]
    assert squelch.closes(d, squelch.PURE_NOISE_DB)


@pytest.mark.parametrize("key", SEEING)
def test_opens_at_the_spec_cnr_within_the_stated_time(key):
    d = ALL_DESIGNS[key]
    ok, first_ms = squelch.opens(d, d.squelch.cnr_db)
    assert ok and first_ms is not None and first_ms <= d.squelch.open_ms, (first_ms, d.squelch.open_ms)


@pytest.mark.parametrize("key", KEYS)
def test_standard_test_opens_it_before_the_measured_record(key):
    d = ALL_DESIGNS[key]
    m = model.run(d, make_inputs(d, 0.2, 3))
    lead = int(round(d.test.lead_s * d.rates.out_hz))
    assert m.squelch_open[lead:].all()
    assert np.flatnonzero(m.squelch_open)[0] / d.rates.out_hz * 1000 <= d.squelch.reopen_ms


@pytest.mark.parametrize("example", ["orchard_link", "campus_fm", "tiny_irq", "weather_station_fsk"])
def test_switching_cnr_near_the_design(example):
    # non floor-limited designs: the ramp's switching CNRs against the noise model's. Tolerance: the
    # model ignores clicks and the interpolation's correlation, good to about 1.5 dB
    # (designer.squelch), plus the ramp's lag of two level time constants at RAMP_DB_S.
    # weather_station_fsk's grid outruns its stamps: its levels are the design-time simulation's
    # (float stamps, one noise realisation), held to the same bound against the integer C's model
    d = ALL_DESIGNS[f"{example}:auto"]
    assert not d.squelch.floor_limited
    assert d.squelch.measured == (d.if_hz / d.front.prescale < d.rates.grid_hz)
    up, down = squelch.ramp(d)
    lag = 2 * 2**d.squelch.shift / d.rates.out_hz * squelch.RAMP_DB_S
    assert abs(up - d.squelch.open_cnr_db) <= 1.5 + lag, (up, d.squelch.open_cnr_db)
    assert abs(down - d.squelch.close_cnr_db) <= 1.5 + lag, (down, d.squelch.close_cnr_db)
    assert down < up  # the hysteresis holds


@pytest.mark.parametrize("key", BLIND)
def test_blind_counters_leave_it_open(key):
    d = ALL_DESIGNS[key]
    assert d.front.kind == "count"
    if d.front.diff_limit > 1:
        # left open because noise alone was measured not to reach the close level: check that
        # measurement with an independent run (the tests' own pure-noise IF and seed)
        rng = np.random.default_rng(5)
        times = ifnoise.noisy_edge_times(
            standard_signal(d, rng), 0.05, -40.0, 2.0 * (d.full_scale_hz + d.audio_hz), rng, oversample=8
        )
        x = np.diff(hardware_inputs(d, times, 0.05, rng).astype(np.int64) & ((1 << d.front.counter_bits) - 1))
        x = np.mod(x, 1 << d.front.counter_bits).astype(np.float64) * 2.0**d.front.step_shift
        level = float(np.mean(np.abs(x[2:] - 2 * x[1:-1] + x[:-2]))) * (d.cic.ratio << d.squelch.shift)
        # the design's level is a 2000-instant estimate over the Carson band of the deviation (this
        # run: 0.05 s, the full-scale band): within 10 % of it
        assert level < sqd.NOISE_MARGIN * 1.1 * d.squelch.close_level, (level, d.squelch.close_level)
    m = model.run(d, make_inputs(d, 0.05, 3))
    assert m.squelch_open.all()


def test_count_noise_level_against_a_clean_carrier():
    # the no-carrier level of a counter reading many edges per grid instant is far above a clean
    # carrier's count pattern (E|h| <= 2 counts: a steady carrier's counts differ by at most 1, so
    # |h| <= 2, common practice, no source); with about one edge per instant it is not
    assert sqd.count_noise_level(1.0e6, 2.0e5, 1.0e4) > 2.0
    assert sqd.count_noise_level(3.0e5, 1.8e5, 2.0e5) < sqd.COUNT_PATTERN_FLOOR * sqd.FLOOR_MARGIN


def test_phase_noise_model_against_textbook():
    # var of the phase of a unit carrier plus complex Gaussian noise of power 1 / CNR: 1 / (2 CNR)
    # rad^2 above threshold (Haykin, Communication Systems, FM noise analysis; the quadrature
    # component over the carrier), i.e. 1 / (8 pi^2 CNR) cycles^2: what noise_var uses, checked here
    # by direct simulation with numpy only, and the white limit of its mean gain (64 sin^6 over a
    # period averages 64 * 5 / 16 = 20, the third difference's 1 + 9 + 9 + 1)
    rng = np.random.default_rng(1)
    cnr = 10 ** (15 / 10)
    n = (rng.standard_normal(400_000) + 1j * rng.standard_normal(400_000)) * math.sqrt(1 / (2 * cnr))
    var = float(np.var(np.angle(1 + n) / (2 * math.pi)))
    assert abs(var / (1 / (8 * math.pi**2 * cnr)) - 1) < 0.05  # higher-order terms ~ 1/CNR = 3 %
    white = sqd.noise_var(1.0, grid_hz=1000.0, band_hz=1e9, edge_hz=1e9, weight=1.0)
    assert abs(white * 8 * math.pi**2 / 20 - 1) < 1e-3


def test_squelch_level_c_matches_python(tmp_path):
    cc = shutil.which("cc") or shutil.which("gcc")
    if cc is None:
        pytest.skip("no C compiler")
    src = tmp_path / "sq.c"
    src.write_text(
        "#include <inttypes.h>\n#include <stdint.h>\n#include <stdio.h>\n"
        + c_definitions("fx", ["squelch_level"])
        + r"""
int main(void)
{
    uint64_t lvl, cap;
    uint32_t a;
    unsigned s;
    while (scanf("%" SCNu64 " %" SCNu32 " %u %" SCNu64, &lvl, &a, &s, &cap) == 4) {
        printf("%" PRIu64 "\n", fx_squelch_level(lvl, a, s, cap));
    }
    return 0;
}
""",
        encoding="utf-8",
    )
    exe = tmp_path / "sq"
    res = subprocess.run([cc, *hostbuild.STRICT_FLAGS, str(src), "-o", str(exe)], capture_output=True, text=True)
    assert res.returncode == 0 and not res.stderr.strip(), res.stderr
    rng = np.random.default_rng(3)
    cases = [(0, 0, 1, 0), ((1 << 62), 0xFFFFFFFF, 1, (1 << 62)), (5, 7, 3, 100)]
    for _ in range(2000):
        cap = int(rng.integers(1, 1 << 62))
        cases.append((int(rng.integers(0, cap + 1)), int(rng.integers(0, 1 << 32)), int(rng.integers(1, 31)), cap))
    run = subprocess.run(
        [str(exe)],
        input="".join(f"{a} {b} {c} {d}\n" for a, b, c, d in cases),
        capture_output=True,
        text=True,
        timeout=60,
    )
    got = [int(v) for v in run.stdout.split()]
    # the independent reference: the one-pole update in exact integers, then the cap
    want = [min(lv - lv // 2**s + a, cap) for lv, a, s, cap in cases]
    assert got == want == [squelch_level(*c) for c in cases]


@pytest.mark.parametrize("value", [-1.0, 40.5, "8", True])
def test_squelch_setting_is_checked(value):
    import tomllib

    from edgetally.spec import SpecError, parse_spec

    raw = tomllib.loads((Path(__file__).resolve().parent.parent / "examples" / "orchard_link.toml").read_text())
    raw["signal"]["squelch_cnr_db"] = value
    with pytest.raises(SpecError) as e:
        parse_spec(raw)
    assert e.value.field == "signal.squelch_cnr_db"
    raw["signal"]["squelch_cnr_db"] = 12
    assert parse_spec(raw).signal.squelch_cnr_db == 12.0


@pytest.mark.parametrize("example", ["orchard_link", "tiny_irq"])
def test_simulated_levels_agree_with_the_model_where_it_holds(example):
    # where the stamps outnumber the grid instants the noise model holds (test_switching_cnr_near_the_design):
    # there the design-time simulation (designer.squelch.stamp_level_curve) must agree with it from
    # 6 to 12 dB (above the FM threshold, where the model's white-noise phase error applies). Bound:
    # the model's stated accuracy, about 1.5 dB of CNR, i.e. 0.75 dB of E|h| (E|h| goes as CNR^-1/2),
    # plus three standard errors of the simulation's mean of |h| over its N grid instants (relative
    # std of a Gaussian mean-absolute estimate sqrt(pi/2 - 1) / sqrt(N), N = SIM_INSTANTS)
    from edgetally.designer.assemble import _stamp_front
    from edgetally.planner import schemes

    import edgetally
    from edgetally.designer.assemble import design as assemble_design
    from edgetally.planner.choose import plan

    # each example's chosen estimator on a 16 kHz grid (CIC ratio 2), under its stamp rate at the IF
    # (the grid orchard_link chooses, 24 kHz, equals its IF: the premise does not hold there)
    auto = ALL_DESIGNS[f"{example}:auto"]
    spec = edgetally.load_spec(Path(__file__).resolve().parents[1] / "examples" / f"{example}.toml")
    d = assemble_design(spec, plan(spec, scheme=auto.scheme, variant=auto.variant, ratio=2))
    fr, grid = d.front, d.rates.grid_hz
    assert d.if_hz / fr.prescale > grid
    band = 2.0 * (d.full_scale_hz + d.audio_hz)
    st = _stamp_front(fr, d.rates.timer_hz)
    curve = sqd.stamp_level_curve(
        d.if_hz, *st[:2], grid, band, d.test.tone_hz, d.test.level * d.full_scale_hz, *st[2:]
    )
    assert curve is not None
    n = sqd.SIM_INSTANTS
    bound = 0.75 + 3 * 20 * math.log10(1 + math.sqrt(math.pi / 2 - 1) / math.sqrt(n))
    w = schemes.CUBIC_WEIGHT if fr.order == "cubic" else schemes.LINEAR_WEIGHT
    checked = 0
    for cnr, level in zip(*curve):
        if 6.0 <= cnr <= 12.0:
            k = sqd.noise_var(10 ** (cnr / 10), grid_hz=grid, band_hz=band, edge_hz=d.if_hz / fr.prescale, weight=w)
            model_level = sqd.GAUSS_MEAN_ABS * math.sqrt(k)
            assert abs(20 * math.log10(level / model_level)) <= bound, (cnr, level, model_level, bound)
            checked += 1
    assert checked >= 3
