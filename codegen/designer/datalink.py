"""The binary FSK data path's integer parameters (``ir.DataLink``) and its certificate lines.

Loop design. The bit clock is a second-order loop run once per bit: a zero-crossing timing
detector (Gardner's detector with the decisions a_k = +-1 in place of the bit-end samples:
e_k = y_mid (a_k - a_{k-1}); Gardner, IEEE Trans. Commun. 34(5), 1986; the decision-directed form as
in Mengali & D'Andrea, Synchronization Techniques for Digital Receivers, 1997; from memory), a
proportional-plus-integral filter and the phase jump ph += kp e + integ. For rectangular NRZ bits
through the bit-long moving sum, a strobe late by tau bits gives y_mid = 2 tau A a_k at a transition
(the window holds 1/2 - tau of the old bit and 1/2 + tau of the new), so e = 4 A tau there and, with
transitions on half the bits of random data, the detector's mean gain is Kd = 2 A per bit of timing
error. The phase of 2**32 is one bit (K0 = 2**-32). With the loop's normalised noise bandwidth BnT
and damping zeta, theta = BnT / (zeta + 1 / (4 zeta)) and the gains of the discrete PI loop are
    K0 Kd kp = 4 zeta theta / (1 + 2 zeta theta + theta**2),
    K0 Kd ki = 4 theta**2 / (1 + 2 zeta theta + theta**2)
(Rice, Digital Communications: A Discrete-Time Approach, 2009, appendix C; from memory). The
integrator's limit is the bit-rate error it follows (``data.rate_tolerance``): a bit clock off by
a fraction eps needs integ = eps 2**32 per bit.

Slicer. The threshold is zero after the offset tracker (``ir.Scale``), whose time constant a data
design sets to DC_BITS bits: its estimate of random balanced bits wanders by about
A / sqrt(2 DC_BITS) (one-pole average of a +-A sequence, correlation one bit), 4.4 % of the eye for
256 bits; a shorter one follows a carrier drift faster at that cost.
"""

from __future__ import annotations

import math

from ..ir import DataLink, Register
from ..spec import Spec

DATA_Q = 12  # the data word w holds a full-scale deviation as 2**12: 8 full scales fit int16
DC_BITS = 256  # the offset tracker's time constant in bits for a data design (see the docstring)
DAMPING = 1 / math.sqrt(2)  # common practice, no source: the usual damping of a second-order loop
CORR_BITS = 29  # one phase jump is at most 2**29 / 2**32 = 1/8 bit (made at the mid strobe: no wrap)
LOCK_SHIFT = 4  # the lock detector averages about 16 bits (16 transitions for its mid samples)
RING_BITS = 256  # decided bits the C holds until <name>_bits_read (32 bytes)
# Manchester pairing: a violation adds 8 to a count that decays by 1/8 a pair (about 8 pairs of
# memory, at most 64); a lead of 24 (three recent violations) switches the pairing. Common practice,
# no source: hysteresis so that one noisy pair never flips it.
PAIR_MARGIN = 24


def dc_shift(spec: Spec) -> int:
    """The offset tracker's shift for a data design: a time constant of DC_BITS bits."""
    assert spec.data is not None
    return round(math.log2(DC_BITS * spec.output.rate_hz / spec.data.bit_rate_hz))


def loop_gains(bnt: float, zeta: float) -> tuple[float, float]:
    """(K0 Kd kp, K0 Kd ki) of the PI loop for noise bandwidth BnT and damping zeta (see the docstring)."""
    theta = bnt / (zeta + 1 / (4 * zeta))
    den = 1 + 2 * zeta * theta + theta**2
    return 4 * zeta * theta / den, 4 * theta**2 / den


def design_link(spec: Spec, q: int) -> DataLink:
    """The data path for ``spec`` (which has a [data] table) after an output chain whose data word
    holds a full-scale deviation as 2**q."""
    d = spec.data
    assert d is not None
    chips = 2 if d.line_code == "manchester" else 1
    sps = spec.output.rate_hz / d.bit_rate_hz
    dq = min(q, DATA_Q)
    taps = round(sps / chips)  # the matched filter and the bit clock work on channel symbols
    y_shift = int(math.floor(math.log2(taps)))
    amplitude = round(taps * 2**dq * spec.signal.deviation_hz / spec.output.full_scale_hz / 2**y_shift)
    kp_n, ki_n = loop_gains(d.loop_bandwidth, DAMPING)
    kd = 2 * amplitude
    return DataLink(
        bit_rate_hz=d.bit_rate_hz,
        samples_per_bit=sps,
        in_shift=q - dq,
        w_limit=(8 << dq) - 1,
        taps=taps,
        y_shift=y_shift,
        amplitude=amplitude,
        step=round(2**32 * chips / sps),
        mid_limit=2 * amplitude,
        kp=max(1, round(kp_n * 2**32 / kd)),
        ki=max(1, round(ki_n * 2**32 / kd)),
        integ_limit=round(d.rate_tolerance * 2**32),
        corr_limit=1 << CORR_BITS,
        lock_shift=LOCK_SHIFT,
        lock_min=(amplitude << LOCK_SHIFT) // 2,
        ring_bits=RING_BITS,
        sync_word=d.sync_word,
        sync_bits=d.sync_bits,
        sync_errors=d.sync_errors,
        frame_bytes=d.frame_bytes,
        loop_bandwidth=d.loop_bandwidth,
        damping=DAMPING,
        chips=chips,
        pair_margin=PAIR_MARGIN if chips == 2 else 0,
    )


def registers(dl: DataLink) -> tuple[Register, ...]:
    """The data path's lines of the overflow certificate: the worst |value| for any input (w is
    saturated first, so every later bound follows from w_limit)."""

    def reg(name, bits, bound, note):
        bound = max(int(bound), 1)
        return Register(name, bits, bound, round(math.log2((2 ** (bits - 1) - 1) / bound), 2), note)

    m = dl.taps * dl.w_limit
    y = (m >> dl.y_shift) + 1
    e = 2 * dl.mid_limit
    corr = e * dl.kp + dl.integ_limit
    return (
        reg("data.w", 16, dl.w_limit, "saturated (clicks beyond 8 full scales are clipped)"),
        reg("data.matched_sum", 32, m, "taps x w_limit"),
        reg("data.y", 32, y, "the sum rounded down by y_shift"),
        reg("data.ted", 32, e, "2 mid_limit: the mid sample is saturated"),
        reg("data.loop_sum", 32, corr, "kp e + integ before the jump's limit"),
        reg("data.integ_step", 32, e * dl.ki + dl.integ_limit, "integ + ki e before saturation"),
        reg("data.phase_jump", 64, 2**31 + dl.step + dl.corr_limit, "ph + corr at the mid strobe (< 2**32)"),
        reg("data.lock_y", 32, y << dl.lock_shift, "one-pole average of |y|"),
        reg("data.lock_mid", 32, dl.mid_limit << dl.lock_shift, "one-pole average of |y_mid|"),
        reg("data.lock_test", 32, (dl.mid_limit << dl.lock_shift) * 4, "4 am"),
    )
