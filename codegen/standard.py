"""The standard test of a design, chosen from its audio band in this one place.

Tone: 1 kHz when the band reaches at least PREFERRED_MIN_BAND (twice the tone), the usual test
tone of FM receiver measurements (common practice, no source); in a narrower band a tone well
inside it, a third of the band rounded down to 1, 2 or 5 times a power of ten (so a 5 Hz band gets
1 Hz, an 800 Hz band 200 Hz). Its level: 70 % of the full-scale deviation (a common choice: enough
to measure well above the noise, with headroom below full scale; land-mobile practice uses 60 % of
rated deviation, TIA-603, from memory).

The SINAD measurement counts noise and distortion over [band_lo_hz, audio band]: below band_lo is
DC (the tuning offset, followed by the offset tracker). band_lo is 20 Hz, or a twentieth of the
band when that is lower, so a sub-audio band still has a measured span. The record must hold
enough of the tone and of the lowest measured frequency for the Hann periodogram to resolve them:
at least MIN_BINS periodogram bins below band_lo (the window's main lobe is two bins wide, so the
fitted DC's leakage stays out of the band) and MIN_PERIODS periods of the tone. min_seconds is
that length; default_seconds is the record verify makes when not told (one second, or min_seconds
when longer); lead_s lets the filters and the offset tracker settle first
(LEAD_PERIODS periods of band_lo, never below 0.1 s: the offset tracker's corner is a tenth of
band_lo or less, see ``dc_corner_hz``, so its start transient, which carries only the tone's
leakage, has decayed by e^-(2 pi / 10 * LEAD_PERIODS) ~ e^-1.3, and what is left lies mostly below
band_lo).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

PREFERRED_TONE_HZ = 1000.0
PREFERRED_MIN_BAND = 2000.0  # 1 kHz when it lies at most half way up the band
LEVEL = 0.7  # fraction of full-scale deviation
BAND_LOW_HZ = 20.0  # the measured band starts here (or at band / LOW_RATIO when lower)
LOW_RATIO = 20.0
MIN_BINS = 4  # periodogram bins below band_lo
MIN_PERIODS = 20  # tone periods in the measured record
LEAD_PERIODS = 2  # periods of band_lo left to settle before measuring
MIN_LEAD_S = 0.1
MIN_SECONDS = 1.0
DC_CORNER_MAX_HZ = 2.0  # offset tracker corner: far below any audio band (common practice, no source)
DC_CORNER_RATIO = 10.0  # and at least this factor below the measured band's low edge


@dataclass(frozen=True)
class StandardTest:
    tone_hz: float
    level: float  # fraction of full-scale deviation
    band_lo_hz: float
    band_hi_hz: float
    lead_s: float  # settling time before the measured record
    min_seconds: float  # shortest measured record the SINAD figure is valid for
    default_seconds: float  # the measured record when none is asked for

    def describe(self) -> str:
        return (
            f"{self.tone_hz:g} Hz tone at {self.level:.0%} of full-scale deviation, noise counted over "
            f"{self.band_lo_hz:g}-{self.band_hi_hz:g} Hz"
        )


def tone_hz(band_hz: float) -> float:
    """The standard test tone for an audio band of band_hz."""
    if band_hz >= PREFERRED_MIN_BAND:
        return PREFERRED_TONE_HZ
    third = band_hz / 3.0
    decade = 10.0 ** math.floor(math.log10(third))
    return max(m * decade for m in (1.0, 2.0, 5.0) if m * decade <= third)


def band_lo_hz(band_hz: float) -> float:
    """Low edge of the measured band."""
    return min(BAND_LOW_HZ, band_hz / LOW_RATIO)


def dc_corner_hz(band_hz: float) -> float:
    """Corner of the offset tracker (a one-pole high-pass on the data word) for this band."""
    return min(DC_CORNER_MAX_HZ, band_lo_hz(band_hz) / DC_CORNER_RATIO)


def standard_test(band_hz: float) -> StandardTest:
    """The standard test for an audio band of band_hz (see the module docstring)."""
    tone, lo = tone_hz(band_hz), band_lo_hz(band_hz)
    seconds = max(MIN_BINS / lo, MIN_PERIODS / tone)
    lead = max(MIN_LEAD_S, LEAD_PERIODS / lo)
    return StandardTest(
        tone_hz=tone,
        level=LEVEL,
        band_lo_hz=lo,
        band_hi_hz=float(band_hz),
        lead_s=lead,
        min_seconds=seconds,
        default_seconds=max(MIN_SECONDS, seconds),
    )
