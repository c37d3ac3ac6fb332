"""Bit-exact integer model of the FSK data path (``ir.DataLink``), the same arithmetic as the
emitted C's <name>_data_step, run on the data words v the output chain feeds it.

The matched filter is a moving sum, vectorised (exact int64 cumulative sums). The bit clock runs
once per bit: between two strobes its phase only adds ``step`` per sample, so the sample of the next
wrap (bit strobe) and of the mid strobe follow from the phase at the last strobe by one ceiling
division each (the loop's jump is made at the mid strobe); the loop, the lock detector, the ring and the framing then run on
Python integers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..fixedpoint import bit_errors, rshr, sat
from ..ir import Design

ONE = 1 << 32
HALF = 1 << 31


@dataclass(frozen=True)
class DataRun:
    bits: np.ndarray  # every decided bit, in order (uint8, 0 or 1)
    strobes: np.ndarray  # the output-sample index of each bit strobe (Manchester: of each pair's last chip)
    y: np.ndarray  # the matched filter's output per output sample (the eye diagram's samples)
    locked: np.ndarray  # per bit: the lock detector after it
    integ: np.ndarray  # per bit: the loop's integrator after it (phase per symbol, 2**32 a symbol)
    frames: tuple[bytes, ...]  # every complete frame, in order
    syncs: int  # sync-word matches
    locked_end: bool
    overruns: int = 0  # the model has no ring: the C's must stay 0 when read in time


def matched(design: Design, v: np.ndarray) -> np.ndarray:
    """y per output sample: the saturated data word summed over the last ``taps`` samples, rounded."""
    dl = design.data
    assert dl is not None
    v = np.asarray(v, dtype=np.int64)
    w = rshr(v, dl.in_shift) if dl.in_shift > 0 else v
    w = sat(w, -dl.w_limit, dl.w_limit)
    c = np.concatenate(([0], np.cumsum(w)))
    k = np.arange(1, w.size + 1)
    m = c[k] - c[np.maximum(k - dl.taps, 0)]
    return rshr(m, dl.y_shift)


def run(design: Design, v: np.ndarray) -> DataRun:
    """Every bit, frame and status the C's data path makes from the data words v."""
    dl = design.data
    assert dl is not None
    y = matched(design, v)
    ys = y.tolist()
    n_samples = len(ys)
    mask = (1 << dl.sync_bits) - 1
    sr = ~dl.sync_word & mask
    ph, ymid, integ, last, ay, am, pending = 0, 0, 0, 0, 0, 0, 0
    collect, nb = False, 0
    chip_prev, y_prev, parity, pair, viol = 0, 0, 0, 1, [0, 0]  # Manchester pairing (ir.DataLink)
    last_lock = False  # the lock detector after the last symbol strobe
    frame = bytearray(dl.frame_bytes)
    bits: list[int] = []
    strobes: list[int] = []
    locked: list[bool] = []
    integs: list[int] = []
    frames: list[bytes] = []
    syncs = 0
    n = 0  # the next sample to run
    lk = dl.lock_shift
    while True:
        # after a bit strobe ph < step <= 2**30: the mid strobe comes first, then the wrap
        jm = -(-(HALF - ph) // dl.step)  # samples until ph >= 2**31, counting sample n as 1
        im = n + jm - 1
        if im >= n_samples:
            break
        ymid = sat(ys[im], -dl.mid_limit, dl.mid_limit)
        ph_mid = ph + jm * dl.step + pending  # inside (0, 2**32): the certificate's data.phase_jump
        jw = -(-(ONE - ph_mid) // dl.step)
        ib = im + jw
        if ib >= n_samples:
            break
        yk = ys[ib]
        bit = 1 if yk > 0 else 0
        e = 0
        if bit != last:
            e = 2 * ymid if bit else -2 * ymid
            am = am - (am >> lk) + abs(ymid)
        ay = ay - (ay >> lk) + abs(yk)
        integ = sat(integ + e * dl.ki, -dl.integ_limit, dl.integ_limit)
        corr = sat(e * dl.kp + integ, -dl.corr_limit, dl.corr_limit)
        pending = corr
        ph = ph_mid + jw * dl.step - ONE
        last = bit
        is_locked = last_lock = (am << 2) < ay and ay >= dl.lock_min
        if dl.chips == 2:
            a = parity
            viol[a] = viol[a] - (viol[a] >> 3) + (8 if bit == chip_prev else 0)
            if a != pair and viol[pair] > viol[a] + dl.pair_margin:
                pair = a
            emit = a == pair
            data_bit = 1 if y_prev > yk else 0  # the first chip above the second: "10", a 1
            chip_prev, y_prev, parity = bit, yk, a ^ 1
            n = ib + 1
            if not emit:
                continue
            bit = data_bit
        bits.append(bit)
        strobes.append(ib)
        locked.append(is_locked)
        integs.append(integ)
        if dl.sync_bits:
            sr = ((sr << 1) | bit) & 0xFFFFFFFF
            if collect:
                if bit:
                    frame[nb >> 3] |= 0x80 >> (nb & 7)
                nb += 1
                if nb == 8 * dl.frame_bytes:
                    frames.append(bytes(frame))
                    collect = False
            elif bit_errors(sr, dl.sync_word, mask) <= dl.sync_errors:
                frame = bytearray(dl.frame_bytes)
                collect, nb = True, 0
                syncs += 1
        n = ib + 1
    return DataRun(
        bits=np.array(bits, dtype=np.uint8),
        strobes=np.array(strobes, dtype=np.int64),
        y=np.asarray(y, dtype=np.int64),
        locked=np.array(locked, dtype=bool),
        integ=np.array(integs, dtype=np.int64),
        frames=tuple(frames),
        syncs=syncs,
        locked_end=bool(last_lock),
    )
