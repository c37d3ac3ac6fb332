"""The designed magnitude response of a Design's output chain (CIC, scaling, IIR sections), as
built with its integer coefficients and as designed in floating point."""

from __future__ import annotations

import math

import numpy as np

from ..dsp import cic
from ..designer import wordlength
from ..ir import Design

FLOOR_DB = -160.0  # dB values are clipped here (zeros of the response)


def floor_db(x) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.maximum(20 * np.log10(np.abs(x)), FLOOR_DB)


def chain_response(design: Design, f_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Magnitude (dB, 0 dB = unit gain from deviation to output) of the CIC + scale + IIR chain at
    f_hz: (with the integer coefficients and the scale multiplier as rounded, with the float
    design). The CIC is integer in both (its taps are exact). The offset tracker is left out: its
    corner lies far below the audio band."""
    from scipy import signal

    out_hz, c, sc = design.rates.out_hz, design.cic, design.scale
    f = np.asarray(f_hz, dtype=float)
    cic_db = cic.response_db(f / out_hz, c.order, c.ratio)
    _, hq = signal.sosfreqz(np.array(wordlength.quantised_rows(design.filters, sc.q)), worN=f, fs=out_hz)
    _, hf = signal.sosfreqz(np.array([list(s.float_sos) for s in design.filters.sections]), worN=f, fs=out_hz)
    exact_gain = design.hz_per_cic_lsb / design.full_scale_hz * 2.0**sc.q
    scale_db = 20 * math.log10(sc.mult / 2.0**sc.shift / exact_gain)
    return cic_db + floor_db(hq) + scale_db, cic_db + floor_db(hf)
