"""TOML spec -> validated, frozen Spec.

Every refusal is a ``SpecError`` naming the field, the value found and what is allowed; the CLI
prints it on one line and exits with status 2. Soft problems (legal but unusual choices) are
collected as warnings on the Spec.
"""

from __future__ import annotations

import dataclasses
import math
import re
import reprlib
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from .cores import CORES, HW_DIV32_CYCLES, HW_MAC64_CYCLES

C_KEYWORDS = frozenset(
    """auto break case char const continue default do double else enum extern float for goto if
    inline int long register restrict return short signed sizeof static struct switch typedef union
    unsigned void volatile while _Bool _Complex _Imaginary _Alignas _Alignof _Atomic _Generic
    _Noreturn _Static_assert _Thread_local bool true false NULL""".split()
)
MAX_NAME = 24
SHOW_CHARS = 60  # an error line echoes at most this much of the bad value (or field name)

_REPR = reprlib.Repr()
_REPR.maxlevel, _REPR.maxlist, _REPR.maxdict, _REPR.maxtuple = 2, 4, 3, 4
_REPR.maxstring, _REPR.maxother, _REPR.maxlong = SHOW_CHARS, SHOW_CHARS, SHOW_CHARS


PATH_CHARS = 300  # a file path is shown whole up to this length (its end names the file)


def cut(text: str, limit: int = SHOW_CHARS) -> str:
    """``text`` cut to about ``limit`` characters."""
    return text if len(text) <= limit else text[: limit - 3] + "..."


def cut_path(path) -> str:
    """A path as an error line shows it: whole up to PATH_CHARS, else its end."""
    text = str(path)
    return text if len(text) <= PATH_CHARS else "..." + text[-(PATH_CHARS - 3) :]


def show(value) -> str:
    """``value`` as an error line shows it: its repr, cut to about SHOW_CHARS characters, nested
    lists and tables shown two levels deep, a huge integer by its length (its digits are never
    formed: Python refuses to print integers of more than a few thousand digits)."""
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 128:
        return f"<an integer of about {int(value.bit_length() * math.log10(2)) + 1} digits>"
    return cut(_REPR.repr(value))


class SpecError(ValueError):
    """A spec field (or, when ``field`` starts with "-", a command-line option) that cannot be
    accepted: which field, what was there, what is allowed. Its message is one line: the field and
    the value are cut to a readable length."""

    def __init__(self, field_name: str, value, allowed: str):
        self.field = field_name
        self.value = value
        self.allowed = allowed
        shown = repr(cut_path(value)) if field_name in ("(file)", "(toml)") else show(value)
        name = "".join(c if c.isprintable() else repr(c)[1:-1] for c in cut(field_name))
        super().__init__(f"{name} = {shown}: {' '.join(allowed.split())}")

    @property
    def is_argument(self) -> bool:
        """True when the bad value came from the command line, not from the spec file."""
        return self.field.startswith("-")


SQUELCH_CNR_DB = 8.0  # a little below the FM threshold near 10 dB CNR (DESIGN.md, Haykin)
SQUELCH_CNR_RANGE = (0.0, 40.0)  # dB: from deep below threshold to far above it


# A flat band by default: the CIC droop is compensated when it exceeds this at the band edge (a spec
# opts out with fixed.droop_limit_db = 0). Common practice, no source: 1 dB is a usual flatness target
# for a voice or audio band.
DROOP_LIMIT_DB = 1.0


@dataclass(frozen=True)
class Signal:
    if_hz: float
    deviation_hz: float
    audio_hz: float
    deemphasis_us: float = 0.0
    squelch_cnr_db: float = 8.0  # the noise squelch opens at and above this IF CNR in the Carson band


@dataclass(frozen=True)
class Output:
    rate_hz: int
    format: str = "s16"
    full_scale_hz: float = 0.0  # left out of the file: the peak deviation


@dataclass(frozen=True)
class Target:
    """The MCU. Fields left out of the file take the core profile's value (edgetally.cores)."""

    core: str
    cpu_hz: float
    timer_hz: int
    timer_bits: int = 32
    counter_bits: int = 16  # width of the IF-clocked counter (counter scheme)
    has_capture: bool = True
    has_edge_irq: bool = True
    has_counter: bool = True
    capture_prescalers: tuple[int, ...] = (1,)
    capture_dma: bool = False
    counter_dma: bool = False  # DMA can copy the counter at every grid tick
    hw_divide: bool = False
    mul64: bool = False
    isr_cycles: int = 0
    irq_jitter_cycles: int = 0  # peak-to-peak spread of the edge-interrupt latency
    cpu_budget: float = 0.5

    @property
    def div32_cycles(self) -> int:
        return HW_DIV32_CYCLES if self.hw_divide else CORES[self.core].soft_div32_cycles

    @property
    def mac64_cycles(self) -> int:
        return HW_MAC64_CYCLES if self.mul64 else CORES[self.core].soft_mac64_cycles

    @property
    def op_cycles(self) -> int:
        return CORES[self.core].op_cycles


@dataclass(frozen=True)
class Fixed:
    """Word-length targets of the output chain."""

    loss_limit_db: float = 0.5  # largest implementation loss (float SINAD minus fixed SINAD)
    response_tol_db: float = 0.05  # largest gain error of the quantised filters over the band
    scaling: str = "l1"  # "l1" (no overflow for any input), "l2" or "linf" (wide only)
    # "auto" (cheapest that meets the loss), "narrow", "shaped" (narrow with error feedback), "mid"
    # (split 27 x 16) or "wide"
    arith: str = "auto"
    droop_limit_db: float = DROOP_LIMIT_DB  # compensate the CIC droop when it exceeds this in the band (0: never)


@dataclass(frozen=True)
class Data:
    """A binary FSK data link after the front end (the [data] table): NRZ bits, a higher frequency
    for a 1. ``sync_bits`` 0 means no framing (bits only)."""

    bit_rate_hz: float
    sync_word: int = 0
    sync_bits: int = 0
    sync_errors: int = 0  # bit errors the sync-word correlator still accepts
    frame_bytes: int = 0  # bytes after the sync word that make one frame
    line_code: str = "nrz"
    loop_bandwidth: float = 0.02  # bit-clock loop noise bandwidth times the bit period (BnT)
    rate_tolerance: float = 0.02  # largest bit-rate error the loop's integrator can follow (fraction)


@dataclass(frozen=True)
class Spec:
    name: str
    signal: Signal
    output: Output
    target: Target
    fixed: Fixed = Fixed()
    warnings: tuple[str, ...] = field(default=(), compare=False)
    data: Data | None = None

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d.pop("warnings")
        if d["data"] is None:
            d.pop("data")  # specs without a [data] table keep their hash
        return d


# --- field readers -----------------------------------------------------------------------------

_SECTIONS = {
    "signal": {"if_hz", "deviation_hz", "audio_hz", "deemphasis_us", "squelch_cnr_db"},
    "output": {"rate_hz", "format", "full_scale_hz"},
    "fixed": {"loss_limit_db", "response_tol_db", "scaling", "arith", "droop_limit_db"},
    "data": {
        "bit_rate_hz",
        "sync_word",
        "sync_bits",
        "sync_errors",
        "frame_bytes",
        "line_code",
        "loop_bandwidth",
        "rate_tolerance",
    },
    "target": {
        "core",
        "cpu_hz",
        "timer_hz",
        "timer_bits",
        "counter_bits",
        "has_capture",
        "has_edge_irq",
        "has_counter",
        "capture_prescalers",
        "capture_dma",
        "counter_dma",
        "hw_divide",
        "mul64",
        "isr_cycles",
        "irq_jitter_cycles",
        "cpu_budget",
    },
}
_TOP = {"name"} | set(_SECTIONS)


UINT32_MAX = (1 << 32) - 1
# The narrowest audio band the standard test (edgetally.standard) fits a tone and a measured span
# into, and the narrowest the tests verify (tests/test_standard_test.py).
MIN_AUDIO_HZ = 5.0
FULL_SCALE_SPAN = 4096  # the IF is at most this many full scales (see _physics)

# The finite range of every number, from what the design code and the emitted C can hold. A value
# outside is refused here, before any design code runs; cross-field rules follow in _physics.
LIMITS: dict[str, tuple[float, float, str]] = {
    # the timer must run at four ticks per IF cycle or more (below) and fits a UINT32_C constant
    "signal.if_hz": (1.0, UINT32_MAX / 8, "Hz: a timer at 4 ticks per cycle of twice the IF must fit 32 bits"),
    "signal.deviation_hz": (1e-3, UINT32_MAX / 8, "Hz"),
    "signal.audio_hz": (1e-3, UINT32_MAX / 8, "Hz"),
    "signal.deemphasis_us": (0.0, 1e6, "microseconds (0: none)"),
    "signal.squelch_cnr_db": (SQUELCH_CNR_RANGE[0], SQUELCH_CNR_RANGE[1], "dB of IF carrier-to-noise ratio"),
    # a rate is a UINT32_C constant of the header; above 1 MHz the output filters' poles and the
    # per-sample budget leave no sensible design on an MCU (common practice, no source)
    "output.rate_hz": (1, 1_000_000, "samples per second"),
    "output.full_scale_hz": (1e-3, UINT32_MAX / 8, "Hz"),
    # 32.768 kHz (a watch crystal) is about the slowest clock an MCU runs on; 5 GHz is above any
    # MCU (common practice, no source)
    "target.cpu_hz": (32768.0, 5e9, "Hz (32.768 kHz to 5 GHz)"),
    "target.timer_hz": (1, UINT32_MAX, "Hz: the header's UINT32_C timer constant holds at most 2**32 - 1"),
    "target.isr_cycles": (0, 100_000, "cycles"),
    "target.irq_jitter_cycles": (0, 100_000, "cycles"),
    "target.cpu_budget": (1e-6, 1.0, "a fraction of the CPU in (0, 1]"),
    # below 0.05 dB the measured loss of a short simulation is within its own scatter
    "fixed.loss_limit_db": (0.05, 40.0, "dB"),
    "fixed.response_tol_db": (1e-3, 6.0, "dB"),
    "fixed.droop_limit_db": (0.0, 20.0, "dB (0: never compensate)"),
    # the bit clock's step is a 32-bit phase increment of at most 2**30 (four samples per bit)
    "data.bit_rate_hz": (1.0, 250_000, "bits per second (at most a quarter of the 1 MHz output-rate limit)"),
    "data.sync_bits": (0, 32, "bits (0: no framing; the correlator holds at most 32)"),
    "data.sync_word": (0, UINT32_MAX, "a whole number below 2**sync_bits"),
    "data.sync_errors": (0, 8, "bit errors"),
    "data.frame_bytes": (0, 256, "bytes (0: no framing)"),
    # the loop's normalised noise bandwidth: below 0.002 it acquires in thousands of bits, above 0.05
    # its proportional step (Rice's gains, designer.datalink) leaves the 32-bit product's headroom
    "data.loop_bandwidth": (0.002, 0.05, "times the bit rate"),
    "data.rate_tolerance": (0.001, 0.05, "a fraction of the bit rate"),
}


def _range(fname: str, v) -> None:
    lo, hi, unit = LIMITS[fname]
    if not lo <= v <= hi:  # exact for integers of any size (no conversion to float)
        raise SpecError(fname, v, f"must be from {lo:g} to {hi:g} {unit}")


def _number(tbl: dict, sec: str, key: str, *, default=None) -> float:
    fname = f"{sec}.{key}"
    if key not in tbl:
        if default is None:
            raise SpecError(fname, None, "is required (a number)")
        return default
    v = tbl[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise SpecError(fname, v, "must be a number")
    if isinstance(v, float) and not math.isfinite(v):
        raise SpecError(fname, v, "must be a finite number")
    _range(fname, v)
    return float(v)


def _integer(tbl: dict, sec: str, key: str, *, default=None, choices=None) -> int:
    fname = f"{sec}.{key}"
    if key not in tbl:
        if default is None:
            raise SpecError(fname, None, "is required (a whole number)")
        return default
    v = tbl[key]
    if (
        isinstance(v, bool)
        or not isinstance(v, (int, float))
        or (isinstance(v, float) and not (math.isfinite(v) and v.is_integer()))
    ):
        raise SpecError(fname, v, "must be a whole number")
    if choices is not None:
        if v not in choices:
            raise SpecError(fname, v, "must be one of " + ", ".join(str(c) for c in choices))
    else:
        _range(fname, v)
    return int(v)


def _flag(tbl: dict, key: str, default: bool) -> bool:
    v = tbl.get(key, default)
    if not isinstance(v, bool):
        raise SpecError(f"target.{key}", v, "must be true or false")
    return v


PRESCALERS = (1, 2, 4, 8)


def _prescalers(tbl: dict, default: tuple[int, ...]) -> tuple[int, ...]:
    v = tbl.get("capture_prescalers", list(default))
    if (
        not isinstance(v, list)
        or not v
        or any(type(k) is not int or k not in PRESCALERS for k in v)
        or len(set(v)) != len(v)
    ):
        raise SpecError("target.capture_prescalers", v, "must be a list of distinct whole numbers from 1, 2, 4, 8")
    return tuple(sorted(v))


def _check_keys(tbl: dict, where: str, allowed: set[str]) -> None:
    for k in tbl:
        if k not in allowed:
            fname = f"{where}.{k}" if where else k
            raise SpecError(fname, tbl[k], "is not a known field; allowed here: " + ", ".join(sorted(allowed)))


def _section(raw: dict, sec: str) -> dict:
    tbl = raw.get(sec)
    if tbl is None:
        raise SpecError(sec, None, f"the [{sec}] table is required")
    if not isinstance(tbl, dict):
        raise SpecError(sec, tbl, f"must be a table [{sec}]")
    _check_keys(tbl, sec, _SECTIONS[sec])
    return tbl


def _name(raw: dict) -> str:
    if "name" not in raw:
        raise SpecError("name", None, "is required: the C prefix of every emitted symbol")
    v = raw["name"]
    if not isinstance(v, str) or not re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", v):
        raise SpecError("name", v, "must be a C identifier: a letter, then letters, digits or _")
    if v in C_KEYWORDS or v.lower() in C_KEYWORDS:
        raise SpecError("name", v, "is a C keyword or reserved word; choose another prefix")
    if len(v) > MAX_NAME or "__" in v:
        raise SpecError("name", v, f"must be at most {MAX_NAME} characters with no double underscore")
    return v


# --- the spec ----------------------------------------------------------------------------------


def parse_spec(raw: dict) -> Spec:
    """Validate a spec given as the dict a TOML file parses to."""
    if not isinstance(raw, dict):
        raise SpecError("(spec)", raw, "must be a TOML table")
    _check_keys(raw, "", _TOP)
    name = _name(raw)
    warnings: list[str] = []

    s = _section(raw, "signal")
    sig = Signal(
        if_hz=_number(s, "signal", "if_hz"),
        deviation_hz=_number(s, "signal", "deviation_hz"),
        audio_hz=_number(s, "signal", "audio_hz", default=_data_band(raw)),
        deemphasis_us=_number(s, "signal", "deemphasis_us", default=0.0),
        squelch_cnr_db=_number(s, "signal", "squelch_cnr_db", default=SQUELCH_CNR_DB),
    )
    if not SQUELCH_CNR_RANGE[0] <= sig.squelch_cnr_db <= SQUELCH_CNR_RANGE[1]:
        raise SpecError(
            "signal.squelch_cnr_db",
            sig.squelch_cnr_db,
            f"must lie in [{SQUELCH_CNR_RANGE[0]:g}, {SQUELCH_CNR_RANGE[1]:g}] dB",
        )
    o = _section(raw, "output")
    fmt = o.get("format", "s16")
    if not isinstance(fmt, str) or not re.fullmatch(r"s16|u([89]|1[0-6])", fmt):
        raise SpecError(
            "output.format",
            fmt,
            'must be "s16" (signed 16-bit PCM) or "u8" .. "u16" (unsigned code with mid-scale offset)',
        )
    out = Output(
        rate_hz=_integer(o, "output", "rate_hz"),
        format=fmt,
        full_scale_hz=_number(o, "output", "full_scale_hz", default=sig.deviation_hz),
    )
    t = _section(raw, "target")
    core = t.get("core")
    if not isinstance(core, str) or core not in CORES:
        raise SpecError("target.core", core, "must be one of " + ", ".join(sorted(CORES)))
    prof = CORES[core]
    tgt = Target(
        core=core,
        cpu_hz=_number(t, "target", "cpu_hz"),
        timer_hz=_integer(t, "target", "timer_hz"),
        timer_bits=_integer(t, "target", "timer_bits", default=32, choices=(16, 32)),
        counter_bits=_integer(t, "target", "counter_bits", default=16, choices=(16, 32)),
        has_capture=_flag(t, "has_capture", prof.has_capture),
        has_edge_irq=_flag(t, "has_edge_irq", prof.has_edge_irq),
        has_counter=_flag(t, "has_counter", prof.has_counter),
        capture_prescalers=_prescalers(t, prof.capture_prescalers),
        capture_dma=_flag(t, "capture_dma", False),
        counter_dma=_flag(t, "counter_dma", False),
        hw_divide=_flag(t, "hw_divide", prof.hw_divide),
        mul64=_flag(t, "mul64", prof.mul64),
        isr_cycles=_integer(t, "target", "isr_cycles", default=prof.isr_cycles),
        irq_jitter_cycles=_integer(t, "target", "irq_jitter_cycles", default=prof.irq_jitter_cycles),
        cpu_budget=_number(t, "target", "cpu_budget", default=0.5),
    )

    fx = _fixed(raw)
    _physics(sig, out, tgt, warnings)
    data = _data(raw, sig, out, warnings)
    return Spec(name=name, signal=sig, output=out, target=tgt, fixed=fx, warnings=tuple(warnings), data=data)


# Binary FSK rules (the [data] table). Common practice, no source: a limiter-discriminator with a
# bit-long integrator separates the tones from a modulation index of about 0.5 (MSK spacing) up; at
# least two IF cycles per bit at the lowest instantaneous frequency keep the count per bit
# meaningful; four samples per bit is the least the bit-clock loop's strobes (whole samples, no
# interpolation) work with, and 32 the most its matched filter's ring holds.
MIN_MOD_INDEX = 0.5
MIN_IF_CYCLES_PER_BIT = 2.0
SAMPLES_PER_BIT = (4, 32)
LINE_CODES = ("nrz", "manchester")


def _data_band(raw: dict) -> float | None:
    """signal.audio_hz of a data spec that leaves it out: the bit rate (the band of NRZ data up to
    its spectrum's first null)."""
    d = raw.get("data")
    if isinstance(d, dict) and "bit_rate_hz" in d:
        v = d["bit_rate_hz"]
        lo, hi, _ = LIMITS["data.bit_rate_hz"]
        if not isinstance(v, bool) and isinstance(v, (int, float)) and lo <= v <= hi:  # else refused later
            return float(v) * (2 if d.get("line_code") == "manchester" else 1)
    return None


def _data(raw: dict, sig: Signal, out: Output, warnings: list[str]) -> Data | None:
    """The [data] table, or None; refuses what a data link cannot do (see the rules above)."""
    if "data" not in raw:
        return None
    t = raw["data"]
    if not isinstance(t, dict):
        raise SpecError("data", t, "must be a table [data]")
    _check_keys(t, "data", _SECTIONS["data"])
    code = t.get("line_code", "nrz")
    if code not in LINE_CODES:
        raise SpecError("data.line_code", code, "must be one of " + ", ".join(f'"{c}"' for c in LINE_CODES))
    d = Data(
        bit_rate_hz=_number(t, "data", "bit_rate_hz"),
        sync_word=_integer(t, "data", "sync_word", default=0),
        sync_bits=_integer(t, "data", "sync_bits", default=0),
        sync_errors=_integer(t, "data", "sync_errors", default=0),
        frame_bytes=_integer(t, "data", "frame_bytes", default=0),
        line_code=code,
        loop_bandwidth=_number(t, "data", "loop_bandwidth", default=0.02),
        rate_tolerance=_number(t, "data", "rate_tolerance", default=0.02),
    )
    # the channel runs at the chip rate: twice the bit rate with Manchester (two chips a bit)
    rb, df = d.bit_rate_hz * (2 if d.line_code == "manchester" else 1), sig.deviation_hz
    h = 2 * df / rb
    if h < MIN_MOD_INDEX:
        raise SpecError(
            "signal.deviation_hz",
            df,
            f"gives a modulation index 2 deviation / channel rate of {h:.3g}; a discriminator needs at least "
            f"{MIN_MOD_INDEX:g} (deviation at least {MIN_MOD_INDEX * rb / 2:g} Hz at {rb:g} symbols/s)",
        )
    cycles = (sig.if_hz - df) / rb
    if cycles < MIN_IF_CYCLES_PER_BIT:
        raise SpecError(
            "data.bit_rate_hz",
            d.bit_rate_hz,
            f"is too fast for the IF: {cycles:.3g} cycles per channel symbol at the lowest frequency "
            f"if_hz - deviation_hz, need at least {MIN_IF_CYCLES_PER_BIT:g} "
            f"(at most {(sig.if_hz - df) / MIN_IF_CYCLES_PER_BIT:g} symbols/s)",
        )
    sps = out.rate_hz / rb
    lo, hi = SAMPLES_PER_BIT
    if not lo <= sps <= hi:
        raise SpecError(
            "data.bit_rate_hz",
            d.bit_rate_hz,
            f"gives {sps:.3g} samples per channel symbol at output.rate_hz {out.rate_hz}; allowed {lo} to {hi} "
            f"(symbol rates {out.rate_hz / hi:g} to {out.rate_hz / lo:g} a second; Manchester has two a bit)",
        )
    if sig.audio_hz < 0.5 * rb:
        raise SpecError(
            "signal.audio_hz",
            sig.audio_hz,
            f"must be at least half the channel symbol rate ({0.5 * rb:g} Hz) for data: leave it out to take it",
        )
    if d.sync_bits:
        if d.sync_word >> d.sync_bits:
            raise SpecError("data.sync_word", d.sync_word, f"must be below 2**sync_bits ({1 << d.sync_bits})")
        if 4 * d.sync_errors > d.sync_bits:
            # a random bit stream matches n bits with k errors or fewer with probability
            # sum_{i<=k} C(n, i) / 2**n per bit: above n / 4 false frames on noise are frequent
            raise SpecError(
                "data.sync_errors", d.sync_errors, f"must be at most a quarter of sync_bits ({d.sync_bits // 4})"
            )
        if d.frame_bytes < 1:
            raise SpecError("data.frame_bytes", d.frame_bytes, "must be 1 to 256 when a sync word is given")
    elif d.frame_bytes or d.sync_word or d.sync_errors:
        raise SpecError("data.sync_bits", 0, "must give the sync word's length (1 to 32) when framing is asked for")
    if h > 4:
        warnings.append(f"modulation index {h:.3g} is large: the link uses far more band than the bits need")
    return d


def _fixed(raw: dict) -> Fixed:
    f = raw.get("fixed", {})
    if not isinstance(f, dict):
        raise SpecError("fixed", f, "must be a table [fixed]")
    _check_keys(f, "fixed", _SECTIONS["fixed"])
    choices = {"scaling": ("l1", "l2", "linf"), "arith": ("auto", "narrow", "shaped", "mid", "wide")}
    for key, allowed in choices.items():
        if key in f and f[key] not in allowed:
            raise SpecError(f"fixed.{key}", f[key], "must be one of " + ", ".join(f'"{a}"' for a in allowed))
    fx = Fixed(
        loss_limit_db=_number(f, "fixed", "loss_limit_db", default=0.5),
        response_tol_db=_number(f, "fixed", "response_tol_db", default=0.05),
        scaling=f.get("scaling", "l1"),
        arith=f.get("arith", "auto"),
        droop_limit_db=_number(f, "fixed", "droop_limit_db", default=DROOP_LIMIT_DB),
    )
    if fx.scaling != "l1" and fx.arith in ("narrow", "shaped"):
        raise SpecError(
            "fixed.scaling", fx.scaling, f'the {fx.arith} arithmetic has 32-bit accumulators and needs "l1"'
        )
    return fx


def _physics(sig: Signal, out: Output, tgt: Target, warnings: list[str]) -> None:
    """Refuse what cannot work; warn about what is unusual."""
    f0, df = sig.if_hz, sig.deviation_hz
    if df >= f0:
        raise SpecError(
            "signal.deviation_hz",
            df,
            f"must be below signal.if_hz ({f0:g} Hz): the instantaneous frequency would reach zero",
        )
    if f0 < 2 * df:
        # Common practice, no source: an IF of two to four times the peak deviation is usual.
        warnings.append(
            f"signal.if_hz {f0:g} Hz is under twice the peak deviation ({df:g} Hz); "
            "two to four times is usual, and the lowest edge rate is small"
        )
    if sig.audio_hz < MIN_AUDIO_HZ:
        raise SpecError(
            "signal.audio_hz",
            sig.audio_hz,
            f"must be at least {MIN_AUDIO_HZ:g} Hz, the narrowest band the standard test measures",
        )
    if out.rate_hz <= 2 * sig.audio_hz:
        raise SpecError("output.rate_hz", out.rate_hz, f"must exceed twice signal.audio_hz ({2 * sig.audio_hz:g} Hz)")
    if sig.audio_hz >= f0 - df:
        raise SpecError(
            "signal.audio_hz",
            sig.audio_hz,
            f"must be below the lowest instantaneous frequency if_hz - deviation_hz ({f0 - df:g} Hz)",
        )
    if sig.deemphasis_us:
        corner = 1.0 / (2 * math.pi * sig.deemphasis_us * 1e-6)
        if corner >= out.rate_hz / 2:
            raise SpecError(
                "signal.deemphasis_us",
                sig.deemphasis_us,
                f"its corner {corner:.1f} Hz must lie below half the output rate",
            )
    if tgt.timer_hz > 4 * tgt.cpu_hz:
        raise SpecError("target.timer_hz", tgt.timer_hz, "must not exceed four times target.cpu_hz")
    # Common practice, no source: fewer than 4 timer ticks per IF cycle leaves no phase resolution.
    ticks = tgt.timer_hz / (f0 + df)
    if ticks < 4:
        raise SpecError(
            "target.timer_hz",
            tgt.timer_hz,
            f"cannot resolve the IF: {ticks:.2f} ticks per cycle at {f0 + df:g} Hz, need at least 4",
        )
    if tgt.timer_bits == 16 and tgt.has_capture and not tgt.has_counter and not tgt.has_edge_irq:
        longest = tgt.timer_hz / (f0 - df)
        if longest >= 65536:
            raise SpecError(
                "target.timer_bits",
                16,
                f"16-bit stamps would wrap more than once between two edges ({longest:.0f} ticks "
                "at the lowest frequency); use 32 or a slower timer clock",
            )
    if not (tgt.has_capture or tgt.has_edge_irq or tgt.has_counter):
        raise SpecError(
            "target.has_capture",
            False,
            "the part must see the IF somehow: set has_capture, has_edge_irq or has_counter",
        )
    if tgt.timer_hz % out.rate_hz:
        raise SpecError(
            "output.rate_hz",
            out.rate_hz,
            f"must divide target.timer_hz ({tgt.timer_hz}) exactly, so the sample grid locks to the timer",
        )
    # The output's full scale is a frequency swing about the IF: a swing of the IF or more would
    # take the frequency through zero, and one far below the IF leaves the scale stage no bits
    # for the swing from the IF down to zero (the data word holds about 2**12 full scales at the
    # least, 16-bit data with headroom for the step limit).
    if not f0 / FULL_SCALE_SPAN <= out.full_scale_hz < f0:
        raise SpecError(
            "output.full_scale_hz",
            out.full_scale_hz,
            f"must be below signal.if_hz ({f0:g} Hz) and at least 1/{FULL_SCALE_SPAN} of it "
            f"({f0 / FULL_SCALE_SPAN:.4g} Hz)",
        )
    if out.full_scale_hz < 0.5 * df:
        warnings.append(
            f"output.full_scale_hz {out.full_scale_hz:g} Hz is under half the peak deviation; "
            "loud passages will saturate"
        )


def load_spec(path: str | Path) -> Spec:
    """Read and validate a TOML spec file."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SpecError("(file)", str(p), "no such file") from None
    except (OSError, UnicodeDecodeError) as e:
        raise SpecError("(file)", str(p), f"cannot be read as UTF-8 text ({e.__class__.__name__})") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise SpecError("(toml)", str(p), f"is not valid TOML: {e}") from None
    except RecursionError:
        raise SpecError("(toml)", str(p), "nests arrays or tables too deeply to read") from None
    return parse_spec(raw)
