"""Recorded inputs and the integer model's outputs for the emitted desktop unit test."""

from __future__ import annotations

from . import model
from ..emit import Vectors
from ..ir import Design
from ..stimulus import fsk
from ..stimulus.inputs import DEFAULT_SEED, make_inputs


def test_vectors(design: Design, seconds: float = 0.05, seed: int = DEFAULT_SEED):
    """Inputs of the standard test and the integer model's outputs, for the emitted unit test; for
    a data design, inputs of the data test (stimulus.fsk.data_test: noisy frames, at least two) and
    also the model's bits and frames."""
    if design.data is None:
        inputs = make_inputs(design, seconds, seed)
        out = model.run(design, inputs).out
        return Vectors(tuple(int(v) for v in inputs), tuple(int(v) for v in out), seconds, seed)
    rec, _ = fsk.data_test(design, seconds, seed)
    m = model.run(design, rec.inputs)
    assert m.data is not None
    return Vectors(
        tuple(int(v) for v in rec.inputs),
        tuple(int(v) for v in m.out),
        round(rec.signal.end_s, 3),
        seed,
        bits=tuple(int(b) for b in m.data.bits),
        frames=tuple(m.data.frames),
    )
