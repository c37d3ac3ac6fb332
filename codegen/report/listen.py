"""Listening material: test signals turned into what the design's hardware delivers, run through
the EMITTED C on the host (edgetally.hostbuild), and written as 16-bit PCM WAV bytes at the
design's output rate. What is heard is the firmware's output, not a model of it.

Three clips: the standard test tone (as verify uses it), a two-tone signal, and a voice-band
sweep (a linear chirp of the modulating tone). Pure functions: nothing here prints or writes
files; the CLI writes the bytes.

The chirp's FM phase: while the modulating frequency rises linearly, fm(t) = f_a + k t
(k = (f_b - f_a) / T, t from the start of the sweep), the instantaneous frequency is
f(t) = f0 + A sin(theta + 2 pi (f_a t + k t^2 / 2)), and the phase (in cycles) needs the integral
of that sine, a Fresnel integral in closed form (Abramowitz & Stegun section 7.3, from memory;
scipy.special.fresnel).
Completing the square (our derivation), with a = sqrt(2 k), u = a (s + f_a / k), u0 = a f_a / k
and c = theta - pi f_a^2 / k:
    int_0^t sin(...) ds = [cos(c) (S(u) - S(u0)) + sin(c) (C(u) - C(u0))] / a.
Before and after the sweep the modulating tone is steady and its integral elementary. The edge
times come from ``signals.edge_times`` (Newton on phase(t) = n), which needs only phase, freq,
peak_deviation, if_hz and start_phase of its signal, so a ChirpFm goes through
``verify.make_inputs`` exactly like an FmSignal.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy.io import wavfile

from ..check import hostbuild
from ..planner import schemes
from ..stimulus import signals
from ..ir import Design
from ..stimulus.inputs import DEFAULT_SEED, LEAD_S, make_inputs, standard_signal

# Two-tone: 700 Hz and 1900 Hz in a 3 kHz voice band (common practice, no source: two tones not in
# a simple ratio, well inside the band), scaled down with a narrower audio band.
TWO_TONE_HZ = (700.0, 1900.0)
VOICE_BAND_HZ = 3000.0
SWEEP_FROM_HZ = 300.0  # bottom of the telephone voice band (common practice, no source)


@dataclass(frozen=True)
class ChirpFm:
    """An FM signal at peak deviation deviation_hz whose modulating tone holds from_hz until
    start_s, sweeps linearly to to_hz over the next sweep_s seconds, and holds to_hz after that.
    Same interface as signals.FmSignal for signals.edge_times."""

    if_hz: float
    deviation_hz: float
    from_hz: float
    to_hz: float
    start_s: float
    sweep_s: float
    mod_phase_rad: float = 0.0
    start_phase: float = 0.0  # cycles, in [0, 1)

    def __post_init__(self):
        if not (0 < self.from_hz < self.to_hz and self.sweep_s > 0 and self.start_s >= 0):
            raise ValueError("a chirp needs 0 < from_hz < to_hz, sweep_s > 0 and start_s >= 0")

    @property
    def rate(self) -> float:
        """Sweep rate k of the modulating frequency, Hz per second."""
        return (self.to_hz - self.from_hz) / self.sweep_s

    def _pieces(self, t):
        """Time spent in the three pieces (hold, sweep, hold) up to t."""
        t = np.asarray(t, dtype=float)
        ta = np.minimum(t, self.start_s)
        tb = np.clip(t - self.start_s, 0.0, self.sweep_s)
        tc = np.maximum(t - self.start_s - self.sweep_s, 0.0)
        return ta, tb, tc

    def mod_phase(self, t):
        """Phase of the modulating tone in radians at times t (s)."""
        ta, tb, tc = self._pieces(t)
        cyc = self.from_hz * (ta + tb) + 0.5 * self.rate * tb * tb + self.to_hz * tc
        return self.mod_phase_rad + 2 * np.pi * cyc

    def freq(self, t):
        """Instantaneous frequency in Hz at times t (s)."""
        return self.if_hz + self.deviation_hz * np.sin(self.mod_phase(t))

    def _sine_integral(self, t):
        """int_0^t sin(mod_phase(s)) ds, piece by piece in closed form (see the module doc)."""
        ta, tb, tc = self._pieces(t)
        k, fa, fb = self.rate, self.from_hz, self.to_hz

        def steady(theta, f, dt):
            return (np.cos(theta) - np.cos(theta + 2 * np.pi * f * dt)) / (2 * np.pi * f)

        a = np.sqrt(2 * k)
        c = self.mod_phase(self.start_s) - np.pi * fa * fa / k
        s1, c1 = special.fresnel(a * (tb + fa / k))
        s0, c0 = special.fresnel(a * fa / k)
        sweep = (np.cos(c) * (s1 - s0) + np.sin(c) * (c1 - c0)) / a
        end = self.mod_phase(self.start_s + self.sweep_s)
        return steady(self.mod_phase_rad, fa, ta) + sweep + steady(end, fb, tc)

    def phase(self, t):
        """Phase in cycles at times t (s)."""
        t = np.asarray(t, dtype=float)
        return self.start_phase + self.if_hz * t + self.deviation_hz * self._sine_integral(t)

    def peak_deviation(self) -> float:
        return abs(self.deviation_hz)


@dataclass(frozen=True)
class Clip:
    """One listening clip: the emitted C's output samples (the design's output type) for a test signal."""

    name: str  # file name of its WAV
    caption: str  # what it is, in words
    samples: np.ndarray
    rate_hz: int


def band_top_hz(design: Design) -> float:
    """The top of the voice band the listening signals use: 3 kHz, or the design's audio band edge."""
    return min(VOICE_BAND_HZ, design.audio_hz)


def two_tone_signal(design: Design, rng: np.random.Generator) -> signals.FmSignal:
    """Two tones (700 and 1900 Hz, scaled down when the band ends below 3 kHz), each at half the
    standard test deviation, so the peak deviation equals the test tone's."""
    scale = band_top_hz(design) / VOICE_BAND_HZ
    dev = 0.5 * schemes.TEST_LEVEL * design.full_scale_hz
    tones = tuple(signals.Tone(f * scale, dev, float(rng.uniform(0, 2 * np.pi))) for f in TWO_TONE_HZ)
    return signals.FmSignal(design.if_hz, tones, float(rng.uniform(0, 1)))


def sweep_signal(design: Design, seconds: float, rng: np.random.Generator) -> ChirpFm:
    """A chirp of the modulating tone from 300 Hz to the voice band top over ``seconds``, starting
    after verify's settling lead (whose output run_c drops), at the standard test deviation."""
    top = band_top_hz(design)
    return ChirpFm(
        design.if_hz,
        schemes.TEST_LEVEL * design.full_scale_hz,
        min(SWEEP_FROM_HZ, top / 2),
        top,
        start_s=LEAD_S,
        sweep_s=seconds,
        mod_phase_rad=float(rng.uniform(0, 2 * np.pi)),
        start_phase=float(rng.uniform(0, 1)),
    )


def run_c(design: Design, sig, seconds: float, seed: int, host: hostbuild.HostDemod | None = None) -> np.ndarray:
    """The emitted C's output for ``seconds`` of ``sig`` after verify's settling lead (the lead's
    samples are dropped): the hardware inputs from verify.make_inputs, processed by the host build."""
    host = host or hostbuild.build(design)
    out, _ = host.process(make_inputs(design, seconds, seed, sig=sig))
    return out[int(round(LEAD_S * design.rates.out_hz)) :]


def clip_names(design: Design) -> tuple[str, str, str]:
    """The WAV files of the three listening clips: the standard tone, two tones, the sweep."""
    p = design.name
    return (f"{p}_tone.wav", f"{p}_two_tone.wav", f"{p}_sweep.wav")


def clips(
    design: Design, seconds: float = 2.0, seed: int = DEFAULT_SEED, host: hostbuild.HostDemod | None = None
) -> tuple[Clip, ...]:
    """The three listening clips of ``seconds`` each, from the emitted C."""
    host = host or hostbuild.build(design)
    rng = np.random.default_rng(seed)
    top = band_top_hz(design)
    tt = two_tone_signal(design, rng)
    tone_wav, two_tone_wav, sweep_wav = clip_names(design)
    made = [
        (
            tone_wav,
            f"standard test: {design.test.tone_hz:g} Hz tone at {schemes.TEST_LEVEL:.0%} of full-scale deviation",
            standard_signal(design, rng),
        ),
        (
            two_tone_wav,
            "two tones, "
            + " Hz and ".join(f"{t.freq_hz:.0f}" for t in tt.tones)
            + f" Hz, each at {schemes.TEST_LEVEL / 2:.0%} of full-scale deviation",
            tt,
        ),
        (
            sweep_wav,
            f"voice-band sweep, {min(SWEEP_FROM_HZ, top / 2):.0f} Hz to {top:.0f} Hz over "
            f"{seconds:g} s at {schemes.TEST_LEVEL:.0%} of full-scale deviation",
            sweep_signal(design, seconds, rng),
        ),
    ]
    out = []
    for k, (name, caption, sig) in enumerate(made):
        out.append(Clip(name, caption, run_c(design, sig, seconds, seed + k, host), design.rates.out_hz))
    return tuple(out)


def pcm16(design: Design, samples: np.ndarray) -> np.ndarray:
    """Output samples as signed 16-bit PCM: s16 as is; an unsigned N-bit code about its mid-scale,
    shifted up to 16 bits."""
    fmt = design.output.format
    if fmt == "s16":
        return np.asarray(samples, dtype=np.int16)
    bits = int(fmt[1:])
    centred = np.asarray(samples, dtype=np.int32) - design.output.mid
    return (centred << (16 - bits)).astype(np.int16)


def wav_bytes(rate_hz: int, pcm: np.ndarray) -> bytes:
    """A mono 16-bit PCM WAV file as bytes."""
    buf = io.BytesIO()
    wavfile.write(buf, int(rate_hz), np.asarray(pcm, dtype=np.int16))
    return buf.getvalue()


def wav_files(design: Design, made: tuple[Clip, ...]) -> dict[str, bytes]:
    """{file name: WAV bytes} of the clips."""
    return {c.name: wav_bytes(c.rate_hz, pcm16(design, c.samples)) for c in made}
