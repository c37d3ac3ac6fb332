"""IIR design (scipy.signal) and coefficient quantisation for the output-rate filters.

Sections are second-order, direct form I, one 64-bit accumulator per section, one rounding per
section output (``fixedpoint.rshr``) and saturation of every section output to the data limit.
A first-order section is a biquad with b2 = a2 = 0.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import signal

from . import cic
from ..ir import Section

# Audio low-pass: elliptic, 0.1 dB ripple, 60 dB stopband. Common practice, no source: an
# elliptic low-pass is the cheapest IIR per dB of stopband for a given order.
LPF_ORDER = 4
LPF_RIPPLE_DB = 0.1
LPF_STOP_DB = 60.0
POLE_MARGIN = 1e-4  # quantised poles must stay this far inside the unit circle
COEF_BITS = 29  # Q29 coefficients: |c| < 4 covers every normalised biquad term


def lowpass_sos(audio_hz: float, fs_hz: float) -> np.ndarray:
    """Float design of the audio low-pass with its passband edge at audio_hz, as second-order
    sections: poles paired with their nearest zeros, sections ordered with the poles nearest the
    unit circle last (scipy.signal.zpk2sos, pairing "nearest"), which keeps the high-gain sections'
    roundoff from passing through the others."""
    z, p, k = signal.ellip(LPF_ORDER, LPF_RIPPLE_DB, LPF_STOP_DB, audio_hz, btype="low", fs=fs_hz, output="zpk")
    return signal.zpk2sos(z, p, k, pairing="nearest")


def droop_fir(order: int, ratio: int, audio_hz: float, fs_hz: float) -> np.ndarray:
    """A three-tap compensator [-a, 1 + 2a, -a] (gain 1 + 2a (1 - cos w), unity at DC) with ``a``
    chosen by least squares so that it times the CIC's droop is flattest over [0, audio_hz]."""
    f = np.linspace(0.0, audio_hz, 200)
    w = 2 * np.pi * f / fs_hz
    droop = 10 ** (cic.response_db(f / fs_hz, order, ratio) / 20)
    g = 2 * (1 - np.cos(w)) * droop  # d(compensated gain) / da
    a = float(np.dot(g, 1 - droop) / np.dot(g, g))  # least squares of droop + a g = 1
    return np.array([[-a, 1 + 2 * a, -a, 1.0, 0.0, 0.0]])


def deemphasis_sos(tau_s: float, fs_hz: float) -> np.ndarray:
    """First-order de-emphasis 1/(1 + s tau) by the bilinear transform, pre-warped at the corner.

    Pre-warping puts the -3 dB point exactly at 1/(2 pi tau) (ITU-R BS.450: 50 us -> 3183.1 Hz,
    75 us -> 2122.1 Hz)."""
    k = math.tan(1.0 / (2.0 * tau_s * fs_hz))  # tan(pi fc / fs) with fc = 1 / (2 pi tau)
    b = k / (1.0 + k)
    a1 = (k - 1.0) / (1.0 + k)
    return np.array([[b, b, 0.0, 1.0, a1, 0.0]])


def output_filters(
    audio_hz: float, deemphasis_us: float, fs_hz: float, droop: tuple[int, int] | None = None
) -> list[tuple[str, np.ndarray]]:
    """The output-rate filters of a design, in order: (role, float sos); ``droop`` = (order, ratio)
    of a CIC to compensate first."""
    out = [("droop", droop_fir(droop[0], droop[1], audio_hz, fs_hz))] if droop else []
    out.append(("lowpass", lowpass_sos(audio_hz, fs_hz)))
    if deemphasis_us:
        out.append(("deemphasis", deemphasis_sos(deemphasis_us * 1e-6, fs_hz)))
    return out


def quantise_rows(rows: list, roles: list[str], q_in: int, qs: list[int], cb: int) -> tuple[Section, ...]:
    """The one coefficient quantiser: each section's b row scaled by its change of format
    2**(q_out - q_in) (per-section scaling), every coefficient rounded to Q(cb); ValueError if a
    quantised pole leaves the unit circle by less than POLE_MARGIN."""
    out, prev, scale = [], q_in, float(1 << cb)
    for row, role, q in zip(rows, roles, qs, strict=True):
        b0, b1, b2, a0, a1, a2 = row
        if abs(a0 - 1.0) > 1e-12:
            raise ValueError("sections must be normalised to a0 = 1")
        g = 2.0 ** (q - prev)
        c = [int(round(v * scale)) for v in (b0 * g, b1 * g, b2 * g, a1, a2)]
        poles = np.roots([1.0, c[3] / scale, c[4] / scale])
        if np.max(np.abs(poles)) >= 1.0 - POLE_MARGIN:
            raise ValueError(f"{role}: quantised poles {poles} leave the unit circle margin")
        out.append(Section(role, c[0], c[1], c[2], c[3], c[4], q_out=q, float_sos=tuple(float(v) for v in row)))
        prev = q
    return tuple(out)
