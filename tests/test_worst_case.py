"""Worst-case inputs against the overflow certificate: streams built to drive every register to
its bound never saturate an internal node (the certificate says they cannot under L1 scaling),
in the integer model and the emitted C alike, and the two stay equal sample for sample."""

import numpy as np
import pytest

from edgetally.check import hostbuild
from edgetally.check import model
from edgetally.stimulus.inputs import make_inputs

from conftest import ALL_DESIGNS

IDS = sorted(ALL_DESIGNS)


def _stamp_stream(d, rng):
    """Runs at the two frequency extremes the front end accepts (the shortest legal step: edges at
    the step limit; the longest: intervals just inside the gap limit), with run lengths random
    around the filters' time scales, plus glitch bursts (edges one tick apart) and gaps."""
    fr = d.front
    hi_interval = max(1, fr.grid_ticks * (1 << fr.phase_shift) // fr.x_limit)     # at the step limit
    lo_interval = fr.gap_ticks                                                    # slowest still legal
    parts = [make_inputs(d, 0.02, seed=3).astype(np.int64)]
    t = int(parts[0][-1])
    for _ in range(40):
        kind = rng.integers(0, 4)
        n = int(rng.integers(20, 3000))
        if kind == 0:
            steps = np.full(n, hi_interval)
        elif kind == 1:
            steps = np.full(max(4, n // 20), lo_interval)
        elif kind == 2:
            steps = rng.integers(1, 3, size=n)                                      # glitch burst
        else:
            steps = np.full(3, 2 * lo_interval)                                      # a gap
        t_new = t + np.cumsum(steps)
        parts.append(t_new)
        t = int(t_new[-1])
    return np.concatenate(parts) & ((1 << fr.timer_bits) - 1)


def _count_stream(d, rng):
    """Counter reads alternating between no edges (up to the gap limit), the most edges the step
    limit allows, and bursts above it (clamped)."""
    fr = d.front
    parts = [make_inputs(d, 0.02, seed=3).astype(np.int64)]
    c = int(parts[0][-1])
    for _ in range(60):
        kind = rng.integers(0, 3)
        n = int(rng.integers(20, 3000))
        if kind == 0:
            steps = np.zeros(min(n, fr.gap_run))
        elif kind == 1:
            steps = np.full(n, fr.diff_limit)
        else:
            steps = rng.integers(fr.diff_limit, 4 * fr.diff_limit + 2, size=n)
        c_new = c + np.cumsum(steps)
        parts.append(c_new)
        c = int(c_new[-1])
    return np.concatenate(parts).astype(np.int64) & ((1 << fr.counter_bits) - 1)


@pytest.mark.parametrize("key", IDS)
def test_worst_case_streams_never_saturate_inside(key):
    d = ALL_DESIGNS[key]
    assert all(r.margin_bits >= 0 for r in d.certificate)
    host = hostbuild.build(d)
    rng = np.random.default_rng(17)
    for _ in range(2):
        stream = _stamp_stream(d, rng) if d.front.kind == "stamp" else _count_stream(d, rng)
        want = model.run(d, stream)
        got, counters = host.process(stream, block=1000, out_cap=512)
        np.testing.assert_array_equal(got, want.out)
        # the certificate: under L1 scaling no internal node can saturate, whatever the edges do
        assert want.saturations == 0 and counters["saturations"] == 0
        assert counters["clips"] == want.clips            # the output may clip: that is by design
        # and the extremes really were reached: the output swung to (or past) full scale
        assert int(np.max(np.abs(want.out.astype(np.int64) - d.output.mid))) >= (d.output.hi - d.output.mid) // 2
