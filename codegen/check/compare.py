"""The one comparison of the emitted C's run with the integer model's: every sample in full, and the
status counters. verify, the sweeps and the hostile scenarios all judge bit-exactness here."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

COUNTERS = ("gaps", "clamps", "saturations", "clips")


@dataclass(frozen=True)
class Comparison:
    samples: int  # samples both produced
    mismatches: int  # samples that differ, plus any surplus on either side
    first_mismatch: int | None
    counters_match: bool  # every counter in COUNTERS equal

    @property
    def bit_exact(self) -> bool:
        return self.mismatches == 0 and self.counters_match


def compare(got: np.ndarray, counters: dict, want) -> Comparison:
    """``got`` and ``counters`` from the C (edgetally.check.hostbuild), ``want`` a model run
    (edgetally.check.model.ModelRun)."""
    n = min(got.size, want.out.size)
    diff = np.flatnonzero(got[:n] != want.out[:n])
    extra = abs(got.size - want.out.size)
    first = int(diff[0]) if diff.size else (n if extra else None)
    match = all(counters[k] == getattr(want, k) for k in COUNTERS)
    if want.data is not None:
        match = match and data_match(counters.get("data"), want.data)
    return Comparison(int(n), int(diff.size) + extra, first, match)


def data_match(got: dict | None, want) -> bool:
    """The C's data path against the model's (``check.datamodel.DataRun``): every bit in full, the
    bit, sync and frame counts, no ring overrun, every frame the C handed out equal to the model's
    frame of the same number, and the lock status at the end."""
    if got is None:
        return False
    bits_equal = got["bits"].size == want.bits.size and bool(np.array_equal(got["bits"], want.bits))
    ok = bits_equal and got["bit_count"] == want.bits.size and got["bit_overruns"] == 0
    ok = ok and got["locked"] == want.locked_end
    if "frames" in got:
        ok = ok and got["frames"] == len(want.frames) and got["syncs"] == want.syncs
        ok = ok and all(0 < k <= len(want.frames) and want.frames[k - 1] == f for k, f in got["frames_read"])
    return bool(ok)
