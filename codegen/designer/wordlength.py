"""Word lengths of the output-rate chain: scaling, coefficient bits, accumulators, the cost-aware
choice between a narrow and a wide arithmetic, roundoff-noise prediction, limit cycles, and the
overflow certificate of every register.

Error spectrum shaping (the "shaped" arithmetic): each recursive section feeds its last two
roundings back with small integer taps, so its rounding noise reaches the output through
(1 + k1 z^-1 + k2 z^-2) / A(z) instead of 1 / A(z) (Higgins & Munson, IEEE Trans. ASSP 30(6), 1982;
Dattorro, JAES 36(11), 1988); the taps are chosen per section to minimise the in-band noise.

Sources: per-section scaling by the L1 norm of the impulse response from the chain input to each
section output guarantees no overflow for any bounded input; L2 and Linf trade headroom for noise
(Jackson, BSTJ 49(2), 1970). Roundoff noise: each rounding is a white source of q^2/12 shaped by
the transfer function from its node to the output (Jackson, IEEE AU-18(2), 1970). Zero-input
limit cycles of a direct-form section with rounding stay within a dead band of about
0.5 / (1 - |a2|) LSB (Jackson 1969). Wrap-around can sustain overflow oscillations, so every data
node saturates (Ebert, Mazo & Taylor, BSTJ 48(9), 1969).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from ..fixedpoint import CUBIC_U_BITS, INV6, cubic_shifts, rshr, section_step, shaped_step
from ..ir import Filters, Register, Section

IMPULSE_LEN = 4096  # samples of impulse response for the norms (the filters decay far faster)


@dataclass(frozen=True)
class Arith:
    """One arithmetic the output chain can run with."""

    name: str
    data_bits: int
    coef_width: int
    acc_bits: int
    shaped: bool = False  # error feedback of each recursive section's rounding (Filters.shaped)


NARROW = Arith("narrow", 16, 16, 32)  # 16 x 16 -> 32 products, 32-bit sums: cheap on small cores
# 27-bit data with 16-bit coefficients: each 27 x 16 product taken as three 16 x 16 -> 32 products
# of the data word's top, middle and low bytes, summed in three 32-bit words (SPLIT_ACC_BITS marks
# it) and rounded exactly as the 48-bit sum would be: no 64-bit multiply on cores that lack one
SPLIT_ACC_BITS = 48
MID = Arith("mid", 27, 16, SPLIT_ACC_BITS)
WIDE = Arith("wide", 32, 32, 64)  # 32 x 32 -> 64 multiply-accumulate: DSP-capable cores
# the narrow words with error feedback in every recursive section (fixedpoint.shaped_step): one
# 32-bit multiply per product, what a Cortex-M0+ class MULS does in one instruction
SHAPED = Arith("shaped", 16, 16, 32, shaped=True)
ARITHS = {"narrow": NARROW, "shaped": SHAPED, "mid": MID, "wide": WIDE}
# the error-feedback taps tried per section: k1 in -2..2, k2 in -1..1 (a double zero at DC is
# (-2, 1); the nearest integers to a1, a2 put the noise zeros near the poles)
FEEDBACK_TAPS = [(k1, k2) for k1 in range(-2, 3) for k2 in range(-1, 2)]


def limit_of(bits: int) -> int:
    return (1 << (bits - 1)) - 1


def _impulse(sos_rows: list, n: int = IMPULSE_LEN) -> np.ndarray:
    x = np.zeros(n)
    x[0] = 1.0
    return signal.sosfilt(np.array(sos_rows), x) if sos_rows else x


def norm(h: np.ndarray, kind: str) -> float:
    if kind == "l1":
        return float(np.sum(np.abs(h)))
    if kind == "l2":
        return float(np.sqrt(np.sum(h * h)))
    if kind == "linf":
        return float(np.max(np.abs(np.fft.rfft(h, 8 * h.size))))
    raise ValueError(kind)


def section_formats(rows: list, q_in: int, in_bound_rel: float, data_bits: int, kind: str) -> list[int]:
    """Output format q of each section: the largest q with norm(cascade to here) * bound * 2**q
    inside the data limit (in_bound_rel: worst |input| in full-scale units)."""
    lim = limit_of(data_bits)
    qs = []
    for k in range(len(rows)):
        nk = norm(_impulse(rows[: k + 1]), kind)
        qs.append(math.floor(math.log2(lim / (nk * in_bound_rel))))
    return qs


def coef_bits_for(rows: list, q_in: int, qs: list[int], width: int) -> int:
    """The largest Q format in which every scaled coefficient, once rounded, fits ``width`` bits
    (two's complement: -2**(width-1) .. 2**(width-1) - 1)."""
    coefs, prev = [], q_in
    for row, q in zip(rows, qs, strict=True):
        b0, b1, b2, _, a1, a2 = row
        coefs += [c * 2.0 ** (q - prev) for c in (b0, b1, b2)] + [a1, a2]
        prev = q
    lo, hi = -(1 << (width - 1)), (1 << (width - 1)) - 1
    cb = (width - 1) - math.floor(math.log2(max(abs(c) for c in coefs)))
    while any(not lo <= round(c * 2.0**cb) <= hi for c in coefs):
        cb -= 1
    return cb


def quantised_rows(f: Filters, q_in: int) -> list:
    """The float sos rows the integer sections implement, scale changes undone."""
    rows, prev, scale = [], q_in, float(1 << f.coef_bits)
    for s in f.sections:
        g = 2.0 ** (prev - s.q_out)
        rows.append([s.b0 / scale * g, s.b1 / scale * g, s.b2 / scale * g, 1.0, s.a1 / scale, s.a2 / scale])
        prev = s.q_out
    return rows


def response_error_db(f: Filters, q_in: int, out_hz: float, band_hz: float) -> float:
    """Largest |gain difference| in dB between the quantised and the float cascade over [0, band]."""
    w = np.linspace(0.0, band_hz, 512)
    _, hq = signal.sosfreqz(np.array(quantised_rows(f, q_in)), worN=w, fs=out_hz)
    _, hf = signal.sosfreqz(np.array([list(s.float_sos) for s in f.sections]), worN=w, fs=out_hz)
    with np.errstate(divide="ignore", invalid="ignore"):  # a zero of either response: an infinite error
        err = np.abs(20 * np.log10(np.abs(hq) / np.abs(hf)))
    return float(np.max(np.nan_to_num(err, nan=np.inf)))


def roundoff_noise(f: Filters, q_in: int, out_bits: int, out_hz: float, band_lo: float, band_hz: float) -> float:
    """In-band roundoff noise at the output in full-scale^2 units (Jackson 1970): the scale
    stage's and the offset tracker's roundings through every section, each section's rounding
    through its own recursion and the sections after it, and the output word's rounding when it
    drops bits; each white, q^2 / 12."""
    rows = quantised_rows(f, q_in)
    fgrid = np.linspace(band_lo, band_hz, 512)

    def band(var, sos_rows):
        if sos_rows:
            _, h = signal.sosfreqz(np.array(sos_rows), worN=fgrid, fs=out_hz)
            g2 = np.abs(h) ** 2
        else:
            g2 = np.ones_like(fgrid)
        return var * 2.0 / out_hz * float(np.trapezoid(g2, fgrid))

    # the scale stage's rounding and the offset tracker's (its rounded DC is subtracted from the
    # filter input): two sources of the input's LSB through every section
    total = 2 * band(2.0 ** (-2 * q_in) / 12, rows)
    for k, s in enumerate(f.sections):
        # 1 / A_k(z): the rounding is inside the loop; with error feedback (1 + k1 z^-1 + k2 z^-2) / A_k(z)
        recursion = [[1.0, float(s.k1), float(s.k2)] + rows[k][3:]]
        total += band(2.0 ** (-2 * s.q_out) / 12, recursion + rows[k + 1 :])
    if f.sections[-1].q_out > out_bits - 1:  # the output word rounds only when it is coarser
        total += word_noise(out_bits, out_hz, band_lo, band_hz)
    return total


def noise_gain(rows: list, k: int, taps: tuple[int, int], out_hz: float, band_lo: float, band_hz: float) -> float:
    """In-band power gain (mean |H|^2 over [band_lo, band_hz]) from section k's rounding to the
    output: (1 + k1 z^-1 + k2 z^-2) / A_k(z) times the sections after it (Higgins & Munson 1982)."""
    fgrid = np.linspace(band_lo, band_hz, 512)
    _, h = signal.sosfreqz(
        np.array([[1.0, float(taps[0]), float(taps[1])] + rows[k][3:]] + rows[k + 1 :]), worN=fgrid, fs=out_hz
    )
    return float(np.mean(np.abs(h) ** 2))


def feedback_taps(f: Filters, q_in: int, out_hz: float, band_lo: float, band_hz: float) -> Filters:
    """``f`` with each recursive section's error-feedback taps set to the pair of FEEDBACK_TAPS with
    the least in-band noise at the output (no feedback when none beats it); FIR sections keep 0, 0."""
    rows = quantised_rows(f, q_in)
    secs = []
    for k, s in enumerate(f.sections):
        if not s.fir:
            best = min(
                FEEDBACK_TAPS, key=lambda t: (noise_gain(rows, k, t, out_hz, band_lo, band_hz), abs(t[0]) + abs(t[1]))
            )
            s = dataclasses.replace(s, k1=best[0], k2=best[1])
        secs.append(s)
    return dataclasses.replace(f, sections=tuple(secs), shaped=True)


def word_noise(out_bits: int, out_hz: float, band_lo: float, band_hz: float) -> float:
    """In-band noise of rounding to the output word (q^2 / 12, white) in full-scale^2 units: the
    floor of the output format itself, which the float reference rounded to the same word has too."""
    return 2.0 ** (-2 * (out_bits - 1)) / 12 * 2.0 / out_hz * (band_hz - band_lo)


def limit_cycle_lsb(f: Filters, steps: int = 3000, seed: int = 1) -> list[float]:
    """Per section, the largest |output| (in its LSB) left after ``steps`` zero-input steps from
    worst and random starting states: the measured dead band of zero-input limit cycles."""
    rng = np.random.default_rng(seed)
    out = []
    for s in f.sections:
        worst = 0
        starts: list[tuple[int, ...]] = [(f.limit, f.limit), (f.limit, -f.limit), (-f.limit, f.limit), (7, -7), (3, 3)]
        starts += [tuple(int(v) for v in rng.integers(-f.limit, f.limit + 1, size=2)) for _ in range(20)]
        starts += [tuple(int(v) for v in rng.integers(-64, 65, size=2)) for _ in range(40)]
        coefs = (s.b0, s.b1, s.b2, s.a1, s.a2)
        for y1, y2 in starts:
            tail = 0
            z = [0, 0, y1, y2]
            e = [0, 0]
            for n in range(steps):
                # zero input; the wide arithmetic's sum (the narrow one's final sum fits as well), or
                # the shaped one's with its error feedback (its exact sum: the worst starting states
                # are not reachable from legal inputs, which the certificate bounds)
                if f.shaped:
                    y, _ = shaped_step((*coefs, s.k1, s.k2), z, e, 0, f.coef_bits, f.limit, wrap=False)
                else:
                    y, _ = section_step(coefs, z, 0, f.coef_bits, f.limit, narrow=False)
                if n >= steps - 200:
                    tail = max(tail, abs(y))
            worst = max(worst, tail)
        out.append(float(worst))
    return out


def jackson_dead_band(s: Section, coef_bits: int) -> float:
    """Jackson (1969): the zero-input dead band of a second-order section with rounding, about
    0.5 / (1 - |a2|) LSB (a first-order section: 0.5 / (1 - |a1|))."""
    scale = float(1 << coef_bits)
    if s.a2 == 0:
        return 0.5 / (1 - abs(s.a1) / scale)
    return 0.5 / (1 - abs(s.a2) / scale)


def stamp_words(recip, delta_limit: int) -> list[tuple[str, int, int, str]]:
    """The stamp front's signed 32-bit intermediates (name, bits, worst |value|, note): the Newton
    steps of the reciprocal (their worst values over every legal interval, found exhaustively when
    the plan was made) and, for the cubic (delta_limit > 0), its correction's words from their
    bounds (``fixedpoint.cubic_shifts``). The unsigned quotient words are below 2**32 by the
    bounds in ``fixedpoint.ratio_recip``."""
    words = (
        []
        if recip is None
        else [
            ("front.recip.error", 32, recip.error_max, "2^32 - d r before a Newton step, every legal d"),
            ("front.recip.product", 32, recip.product_max, "pre-shifted Newton product, every legal d"),
        ]
    )
    if delta_limit:
        one = 1 << CUBIC_U_BITS
        sh, sq, sg, so, _ = cubic_shifts(delta_limit)
        h = 3 * delta_limit * one + 2 * delta_limit * (one - 1)
        g = (rshr(h, sh) if sh else h) * INV6
        prod = (rshr(one * one // 4, sq) if sq else one * one // 4) * (rshr(g, sg) if sg else g)
        words += [
            ("front.cubic.h", 32, h, "(2 d0 + d1) 4096 + (d1 - d0) v, second differences clamped"),
            ("front.cubic.g", 32, g, "rshr(h, sh) x INV6"),
            ("front.cubic.product", 32, prod + (1 << (so - 1)), "pre-shifted q x g plus the rounding half"),
        ]
    return words


SPLIT_MULT_BITS = 15  # fixedpoint.split_scale: mult < 2**15


def _split_low_bound(d_max: int, mult: int, shift: int) -> int:
    """Worst |split_scale| result for shift < 16 (fixedpoint.split_scale): |hi| <= |y| / 2^16 + 1
    gives |A| 2^(16-shift) <= |y| mult / 2^shift + mult 2^(16-shift), and the low half adds at most
    mult 2^(16-shift) + 1."""
    return (d_max * mult >> shift) + 2 * (mult << (16 - shift)) + 2


def scale_product(d_max: int, mult: int, shift: int) -> str:
    """How the C takes the scale product (``ir.Scale.product``): one 32-bit product ("s32") where
    |y - centre| mult plus the rounding half fits int32, else two 32-bit products of the halves of
    y - centre (``fixedpoint.split_scale``: "split" for shift >= 16, "split_low" below, where the
    result fits int32) where mult < 2^15, else a 64-bit product ("s64")."""
    if d_max * mult + (1 << (shift - 1)) <= limit_of(32):
        return "s32"
    if mult < (1 << SPLIT_MULT_BITS) and 16 <= shift <= 31:
        return "split"
    if mult < (1 << SPLIT_MULT_BITS) and 1 <= shift < 16 and _split_low_bound(d_max, mult, shift) <= limit_of(32):
        return "split_low"
    return "s64"


def scale_bound(d_max: int, mult: int, shift: int, limit: int) -> int:
    """Worst |u| after the scale stage: the largest |y - centre| scaled (plus one for the rounding),
    or the data limit where it saturates."""
    return min(limit, rshr(d_max * mult, shift) + 1)


def tracker_bound(u_b: int, dc_shift: int) -> int:
    """Worst |dc_acc| of the offset tracker dc_acc += u - rshr(dc_acc, s) for |u| <= u_b: at or
    above (u_b + 1/2) 2**s the subtracted term is at least u_b + 1 > u and the accumulator falls;
    below it, it grows by at most u_b + 1/2 - dc_acc / 2**s: never past (u_b + 1) 2**s."""
    return (u_b + 1) << dc_shift


def base_bounds(u_b: int, dc_shift: int, limit: int, lmul: int, rshift: int, mid: int) -> tuple[int, int, int]:
    """Worst values of the stage around the sections for |u| <= u_b: the offset tracker plus the
    rounding half the C adds (tracker_bound), the data word minus the offset (2 u_b + 1), and the
    output product plus its rounding half and mid-scale (before clipping)."""
    return (
        tracker_bound(u_b, dc_shift) + (1 << (dc_shift - 1)),
        2 * u_b + 1,
        limit * lmul + ((1 << (rshift - 1)) if rshift else 0) + abs(mid),
    )


def base_word(u_b: int, dc_shift: int, f: Filters, lmul: int, rshift: int, mid: int) -> int:
    """The word of the offset tracker, the data word and the output word (``ir.Scale.word``): 32
    where every bound of base_bounds fits int32, else 64; 64 always with the 64-bit accumulator
    (its section outputs are taken from 64-bit sums)."""
    if f.acc_bits == 64:
        return 64
    return 32 if max(base_bounds(u_b, dc_shift, f.limit, lmul, rshift, mid)) <= limit_of(32) else 64


def certificate(
    *,
    x_limit: int,
    in_bits: int,
    ratio: int,
    order: int,
    cic_width: int,
    centre: int,
    mult: int,
    shift: int,
    q_in: int,
    u_limit: int,
    dc_shift: int,
    f: Filters,
    product: str = "s64",
    word: int = 64,
    out: tuple[int, int, int] = (1, 0, 0),
    front_words=(),
) -> tuple[Register, ...]:
    """Every register, its width, the worst |value| any allowed input gives, and the margin;
    ``front_words`` (``stamp_words``) come first."""

    def reg(name, bits, bound, note):
        bound = max(int(bound), 1)
        return Register(name, bits, bound, round(math.log2(limit_of(bits) / bound), 2), note)

    y_max = x_limit * ratio**order
    d_max = max(centre, y_max - centre)
    u_b = scale_bound(d_max, mult, shift, u_limit)
    s_half = 1 << (shift - 1)
    regs = [reg(*w) for w in front_words] + [
        reg("front.step", in_bits, x_limit, "in [x_low, x_limit], or the centre step, whatever the edges do"),
        reg("cic.output", cic_width, y_max, "integrators wrap by design (Hogenauer 1981); the output cannot"),
    ]
    if product == "split":
        regs += [
            reg("scale.split_hi", 32, (1 << 15) * mult + (s_half >> 16) + (1 << 16), "(y >> 16) mult + carry"),
            reg("scale.split_lo", 32, 0xFFFF * mult + (s_half & 0xFFFF), "(y & 0xFFFF) mult + rounding (unsigned)"),
        ]
    elif product == "split_low":
        regs += [
            reg("scale.split_hi", 32, _split_low_bound(d_max, mult, shift), "(y >> 16) mult 2^(16-shift) + low share"),
            reg("scale.split_lo", 32, 0xFFFF * mult + s_half, "(y & 0xFFFF) mult + rounding (unsigned)"),
        ]
    else:
        regs.append(
            reg("scale.product", 32 if product == "s32" else 64, d_max * mult + s_half, "|y - centre| mult + half")
        )
    acc_b, off_b, o_b = base_bounds(u_b, dc_shift, f.limit, *out)
    regs += [
        reg("scale.out", f.data_bits, u_b, "saturated at the data limit"),
        reg("offset.acc", word, acc_b, "one-pole DC tracker + half"),
        reg("offset.out", word, off_b, "audio minus offset, before its saturation"),
    ]
    in_b = min(f.limit, 2 * u_b)
    regs.append(reg("filter.in", f.data_bits, in_b, "audio minus offset, saturated"))
    rows = quantised_rows(f, q_in)
    half = 1 << (f.coef_bits - 1)
    for k, s in enumerate(f.sections):
        # exact response to the worst input, plus every earlier rounding (<= 1/2 LSB of its own
        # section) through the rest of the cascade, in this section's LSB (Jackson 1970)
        y_b = in_b * norm(_impulse(rows[: k + 1]), "l1") * 2.0 ** (s.q_out - q_in)
        for j in range(k + 1):
            tail = [[1.0, 0.0, 0.0] + rows[j][3:]] + rows[j + 1 : k + 1]
            # with error feedback the injected error is e0 + k1 e1 + k2 e2: (1 + |k1| + |k2|) / 2 LSB
            inj = 0.5 * (1 + abs(f.sections[j].k1) + abs(f.sections[j].k2))
            y_b += inj * norm(_impulse(tail), "l1") * 2.0 ** (s.q_out - f.sections[j].q_out)
        y_b = math.ceil(y_b)
        biggest = max(abs(c) for c in (s.b0, s.b1, s.b2, s.a1, s.a2))
        if not f.shaped:  # the shaped arithmetic's products are taken modulo 2^32: only the sum must fit
            regs.append(reg(f"iir.{k}.product", f.acc_bits, biggest * f.limit, "largest coefficient x data limit"))
        if f.acc_bits == SPLIT_ACC_BITS:
            # the three 32-bit partial sums of the split products, and the rounded result before
            # its saturation (section_step's C twin in the template), for any saturated inputs
            total = sum(abs(c) for c in (s.b0, s.b1, s.b2, s.a1, s.a2))
            regs.append(reg(f"iir.{k}.split_hi", 32, total * ((f.limit >> 16) + 1), "sum of coef x (word >> 16)"))
            regs.append(
                reg(
                    f"iir.{k}.split_mid",
                    32,
                    total * 255 + (total * 255 + half) // 256 + 1,
                    "sum of coef x middle byte, plus the low sum's carry",
                )
            )
            regs.append(
                reg(f"iir.{k}.split_lo", 32, total * 255 + half, "sum of coef x low byte, plus the rounding half")
            )
            regs.append(
                reg(
                    f"iir.{k}.split_top",
                    32,
                    total * ((f.limit >> 16) + 1) << (16 - f.coef_bits),
                    "top sum x 2^(16 - coef bits)",
                )
            )
            regs.append(
                reg(
                    f"iir.{k}.split_out", 32, total * f.limit // (1 << f.coef_bits) + 2, "rounded sum before saturation"
                )
            )
        if f.shaped and not s.fir:
            regs.append(reg(f"iir.{k}.error", 16, half, "shifted-off bits of the rounding, fed back"))
        if f.acc_bits == 32:
            # the rounded sum is the output before saturation (<= y_b, feedback included) plus the
            # rounding half: the sum itself, and the sum plus the half the C adds before shifting
            acc_b = y_b * (1 << f.coef_bits) + half * (2 if f.shaped else 1)
            note = "final sum; exact 32-bit products summed modulo 2^32 (partial sums may wrap)"
            if f.shaped:
                note = "final sum plus the rounding half; 32-bit products and sums modulo 2^32 (only this must fit)"
        else:
            acc_b = sum(abs(c) for c in (s.b0, s.b1, s.b2, s.a1, s.a2)) * f.limit + half
            note = "sum of products of saturated words"
        regs.append(reg(f"iir.{k}.acc", f.acc_bits, acc_b, note))
        regs.append(
            reg(
                f"iir.{k}.out",
                f.data_bits,
                y_b,
                "L1 bound: cannot saturate"
                if f.scaling == "l1"
                else f"{f.scaling} scaling: may saturate (saturation, never wrap)",
            )
        )
    regs.append(reg("output.word", word, o_b, "data limit x lmul + rounding half + mid-scale, before clipping"))
    return tuple(regs)
