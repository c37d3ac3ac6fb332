"""Ladder step 1: the emitted C, compiled on the host, equals the integer model on every sample."""

import numpy as np
import pytest

import edgetally
from edgetally.check import hostbuild
from edgetally.check import model
from edgetally.stimulus import signals
from edgetally.stimulus.inputs import make_inputs
from edgetally.check.verify import verify

from conftest import ALL_DESIGNS, EXAMPLE_FILES, EXAMPLES

NAMES = [p.stem for p in EXAMPLE_FILES]
IDS = sorted(ALL_DESIGNS)                      # every example x (chosen, and each feasible scheme)
STAMP_IDS = [k for k in IDS if ALL_DESIGNS[k].front.kind == "stamp"]
COUNT_IDS = [k for k in IDS if ALL_DESIGNS[k].front.kind == "count"]


@pytest.fixture(scope="module")
def hosts():
    return {k: hostbuild.build(d) for k, d in ALL_DESIGNS.items()}


def test_every_scheme_is_exercised():
    """Issue acceptance: each scheme is forced on at least one example."""
    assert {ALL_DESIGNS[k].scheme for k in IDS} == {"timestamp", "interrupt", "counter"}


@pytest.mark.parametrize("name", NAMES)
def test_verify_acceptance(designs, name):
    """One second of the standard test: bit-exact over every output sample, loss within 0.5 dB."""
    d = designs[name]
    res = verify(d, seconds=1.0)
    assert res.bit_exact and res.mismatches == 0 and res.counters_match
    assert res.samples >= d.rates.out_hz * 1.0            # at least one second of output compared
    # Issue acceptance: fixed point may cost at most 0.5 dB against the float reference.
    assert res.implementation_loss_db <= 0.5
    if name == "campus_fm":
        assert res.float_sinad_db >= 60.0
    if name == "orchard_link":
        # Issue 3: the narrowband timestamp design comes within 3 dB of its own quantisation
        # prediction, or the plan says which limit stopped the estimator that would (the cubic).
        if res.quant_gap_db > 3.0:
            from edgetally.planner.choose import plan

            rows = plan(edgetally.load_spec(EXAMPLES / "orchard_link.toml")).options
            cubic = next(o for o in rows if o.variant == "k1-cubic")
            assert "CPU load" in cubic.reason and "exceeds the budget" in cubic.reason
            assert cubic.predicted_sinad_db >= res.predicted_quant_sinad_db - 3.0


@pytest.mark.parametrize("key", IDS)
def test_every_scheme_bit_exact(hosts, key):
    """Half a second of the standard test through every design: equal on every sample."""
    d = ALL_DESIGNS[key]
    inputs = make_inputs(d, 0.5, seed=4)
    want = model.run(d, inputs)
    got, counters = hosts[key].process(inputs)
    assert got.size == want.out.size >= 0.5 * d.rates.out_hz
    np.testing.assert_array_equal(got, want.out)
    assert counters["gaps"] == want.gaps and counters["clamps"] == want.clamps


@pytest.mark.parametrize("key", IDS)
@pytest.mark.parametrize("block,cap", [(1, 1), (7, 3), (997, 64), (1 << 16, 4096)])
def test_blocking_does_not_change_output(hosts, key, block, cap):
    """Output is independent of how inputs are split into blocks and of the output capacity."""
    d = ALL_DESIGNS[key]
    inputs = make_inputs(d, 0.05, seed=11)
    want = model.run(d, inputs)
    got, counters = hosts[key].process(inputs, block=block, out_cap=cap)
    np.testing.assert_array_equal(got, want.out)
    assert counters["gaps"] == want.gaps and counters["clamps"] == want.clamps


@pytest.mark.parametrize("key", IDS)
def test_isr_queue_path(hosts, key):
    """The scheme's ISR functions + service give the same samples as the block function, with no
    overrun when the service keeps up (every quarter queue)."""
    d = ALL_DESIGNS[key]
    inputs = make_inputs(d, 0.02, seed=5)
    want = model.run(d, inputs).out
    got, counters = hosts[key].process_isr(inputs, service_every=max(1, d.queue_len // 4), out_cap=5)
    np.testing.assert_array_equal(got, want)
    assert counters["overruns"] == 0


@pytest.mark.parametrize("key", STAMP_IDS)
def test_hostile_streams_stay_bit_exact(hosts, key):
    """Gaps (carrier lost), glitch bursts and random stamps: the C and the model still agree on
    every sample and on the gap and clamp counts (no claim about audio quality here)."""
    d = ALL_DESIGNS[key]
    rng = np.random.default_rng(3)
    good = make_inputs(d, 0.05, seed=9).astype(np.int64)
    mask = (1 << d.front.timer_bits) - 1
    gap = good[-1] + 10 * d.front.gap_ticks + np.arange(50) * (d.rates.timer_hz // int(d.if_hz))
    burst = gap[-1] + np.cumsum(rng.integers(1, 4, size=300))
    tail = burst[-1] + np.cumsum(rng.integers(d.front.grid_ticks // 3, d.front.grid_ticks, size=400))
    noise = rng.integers(0, mask + 1, size=300)
    stream = (np.concatenate([good, gap, burst, tail, noise]) & mask).astype(np.int64)
    want = model.run(d, stream)
    got, counters = hosts[key].process(stream, block=64, out_cap=16)
    np.testing.assert_array_equal(got, want.out)
    assert counters["gaps"] == want.gaps > 0
    assert counters["clamps"] == want.clamps


@pytest.mark.parametrize("key", COUNT_IDS)
def test_hostile_counts_stay_bit_exact(hosts, key):
    """Counts that stop (carrier lost), jump (glitch bursts) or are random: C and model agree."""
    d = ALL_DESIGNS[key]
    rng = np.random.default_rng(8)
    mask = (1 << d.front.counter_bits) - 1
    good = make_inputs(d, 0.02, seed=9).astype(np.int64)
    stall = np.full(5 * d.front.gap_run, good[-1])
    jumps = stall[-1] + np.cumsum(rng.integers(0, 4 * d.front.diff_limit + 2, size=500))
    noise = rng.integers(0, mask + 1, size=500)
    stream = np.concatenate([good, stall, jumps, noise]) & mask
    want = model.run(d, stream)
    got, counters = hosts[key].process(stream, block=33, out_cap=7)
    np.testing.assert_array_equal(got, want.out)
    assert counters["gaps"] == want.gaps > 0
    assert counters["clamps"] == want.clamps > 0


@pytest.mark.parametrize("key", IDS)
def test_noisy_signal_bit_exact(hosts, key):
    """Edge jitter from IF noise at 20 dB CNR: still equal sample for sample."""
    d = ALL_DESIGNS[key]
    inputs = make_inputs(d, 0.05, seed=2, cnr_db=20.0)
    want = model.run(d, inputs)
    got, _ = hosts[key].process(inputs)
    np.testing.assert_array_equal(got, want.out)


def test_16bit_wrap_alignment(designs, hosts):
    """The same edges captured with every 16-bit counter start value class give the same audio
    (the unwrap removes the wrap wherever it falls)."""
    d = designs["orchard_link"]
    rng = np.random.default_rng(1)
    sig = signals.test_tone(d.if_hz, d.full_scale_hz, 0.7, 1000.0, rng)
    t = signals.edge_times(sig, 0.1)
    ref = model.run(d, signals.capture(t, d.rates.timer_hz, 16, 0)).out
    for off in (1, 4095, 32767, 65535 - 3000, 65535):
        stamps = signals.capture(t, d.rates.timer_hz, 16, off)
        got, _ = hosts["orchard_link:auto"].process(stamps)
        np.testing.assert_array_equal(got, ref)


def _drop(inputs: np.ndarray, rng, holes: int, longest: int) -> tuple[np.ndarray, list[int]]:
    """Remove ``holes`` runs of 1..longest inputs at random places; returns the kept inputs and the
    indices (in the kept stream) of the inputs that follow each hole."""
    starts = np.sort(rng.choice(np.arange(50, inputs.size - 50), size=holes, replace=False))
    keep = np.ones(inputs.size, dtype=bool)
    for s0 in starts:
        keep[s0:s0 + int(rng.integers(1, longest + 1))] = False
    kept_index = np.cumsum(keep) - 1
    after = sorted({int(kept_index[s0]) + 1 for s0 in starts if kept_index[s0] + 1 < keep.sum()})
    return inputs[keep], after


@pytest.mark.parametrize("key", IDS)
def test_lost_inputs_bit_exact(hosts, key):
    """Inputs dropped at random places (as by a DMA overrun) and reported through inputs_lost: the
    C equals the model on every sample, counts the losses, and mutes across each one (no step out
    of range is fed, nothing saturates)."""
    d = ALL_DESIGNS[key]
    rng = np.random.default_rng(17)
    inputs, lost = _drop(make_inputs(d, 0.3, seed=5), rng, holes=12, longest=40)
    want = model.run(d, inputs, lost=lost)
    got, counters = hosts[key].process(inputs, block=997, lost=lost)
    np.testing.assert_array_equal(got, want.out)
    assert counters["gaps"] == want.gaps > 0 and counters["clamps"] == want.clamps
    assert counters["overruns"] == len(lost)
    assert want.saturations == counters["saturations"] == 0


@pytest.mark.parametrize("key", [k for k in IDS if not ALL_DESIGNS[k].budget.dma])
def test_queue_overflow_marks_the_loss(hosts, key):
    """The ISR path with a service loop that runs too seldom: the queue fills, inputs are dropped,
    and the C marks where. Its output equals the model's on the inputs that were queued, with a
    loss before the first input queued after each overflow."""
    d = ALL_DESIGNS[key]
    inputs = make_inputs(d, 0.2, seed=6)
    every = d.queue_len + d.queue_len // 2                  # service after 1.5 queues' worth of inputs
    got, counters = hosts[key].process_isr(inputs, service_every=every)
    # the service runs after inputs every-1, 2 every-1, ... (0-based): in each such block of
    # inputs the queue takes the first queue_len and drops the rest
    keep = np.arange(inputs.size) % every < d.queue_len
    np.testing.assert_array_equal(keep, model.queue_kept(inputs.size, every, d.queue_len))
    want = model.run(d, inputs[keep], lost=model.lost_after(keep))
    np.testing.assert_array_equal(got, want.out)
    assert counters["overruns"] == int(np.count_nonzero(~keep)) > 0
    assert counters["gaps"] == want.gaps
