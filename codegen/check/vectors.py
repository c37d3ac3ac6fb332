"""Recorded inputs and the integer model's outputs for the emitted desktop unit test."""

from __future__ import annotations

from . import model
from ..emit import Vectors
from ..ir import Design
from ..stimulus.inputs import DEFAULT_SEED, make_inputs


def test_vectors(design: Design, seconds: float = 0.05, seed: int = DEFAULT_SEED):
    """Inputs of the standard test and the integer model's outputs, for the emitted unit test."""
    inputs = make_inputs(design, seconds, seed)
    out = model.run(design, inputs).out
    return Vectors(tuple(int(v) for v in inputs), tuple(int(v) for v in out), seconds, seed)
