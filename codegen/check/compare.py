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
    return Comparison(int(n), int(diff.size) + extra, first, match)
