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


def droop_of(audio_hz: float, fs_hz: float, order: int, ratio: int, limit_db: float) -> tuple[int, int, float] | None:
    """What ``output_filters`` compensates: (order, ratio, limit_db) when the CIC's droop at the band
    edge exceeds limit_db (> 0), else None (a limit of 0 opts out)."""
    if limit_db and cic.droop_db(audio_hz, fs_hz, order, ratio) > limit_db:
        return order, ratio, limit_db
    return None


DROOP_MAX_HALF_TAPS = 3  # compensators of 3, 5 or 7 taps (one to three sections)


def droop_fir(order: int, ratio: int, audio_hz: float, fs_hz: float, flat_db: float = 1.0) -> np.ndarray:
    """A linear-phase compensator with unity DC gain, 1 + sum_k c_k 2 (cos k w - 1) for k = 1..m,
    with the c_k chosen by least squares so that it times the CIC's droop is flattest over
    [0, audio_hz]; m is the smallest (1..3) whose compensated response varies by at most
    ``flat_db`` over the band (else 3). As second-order sections (scipy.signal.tf2sos of the
    2m + 1 taps: FIR sections, a1 = a2 = 0)."""
    f = np.linspace(0.0, audio_hz, 200)
    w = 2 * np.pi * f / fs_hz
    droop = 10 ** (cic.response_db(f / fs_hz, order, ratio) / 20)
    for m in range(1, DROOP_MAX_HALF_TAPS + 1):
        g = np.stack([2 * (np.cos(k * w) - 1) for k in range(1, m + 1)], axis=1) * droop[:, None]
        c = np.linalg.lstsq(g, 1 - droop, rcond=None)[0]  # least squares of droop + g c = 1
        flat = 20 * np.log10(droop + g @ c)
        if flat.max() - flat.min() <= flat_db:
            break
    taps = np.concatenate([c[::-1], [1 - 2 * c.sum()], c])
    if m == 1:
        return np.array([[taps[0], taps[1], taps[2], 1.0, 0.0, 0.0]])
    return signal.tf2sos(taps, [1.0])


def deemphasis_sos(tau_s: float, fs_hz: float) -> np.ndarray:
    """First-order de-emphasis 1/(1 + s tau) by the bilinear transform, pre-warped at the corner.

    Pre-warping puts the -3 dB point exactly at 1/(2 pi tau) (ITU-R BS.450: 50 us -> 3183.1 Hz,
    75 us -> 2122.1 Hz)."""
    k = math.tan(1.0 / (2.0 * tau_s * fs_hz))  # tan(pi fc / fs) with fc = 1 / (2 pi tau)
    b = k / (1.0 + k)
    a1 = (k - 1.0) / (1.0 + k)
    return np.array([[b, b, 0.0, 1.0, a1, 0.0]])


def output_filters(
    audio_hz: float, deemphasis_us: float, fs_hz: float, droop: tuple[int, int, float] | None = None
) -> list[tuple[str, np.ndarray]]:
    """The output-rate filters of a design, in order: (role, float sos); ``droop`` = (order, ratio,
    flatness in dB) of a CIC to compensate first."""
    out = [("droop", droop_fir(droop[0], droop[1], audio_hz, fs_hz, droop[2]))] if droop else []
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
