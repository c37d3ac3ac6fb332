"""CIC decimator arithmetic checked against references outside the project.

Outside references used here:
- Hogenauer, "An economical class of digital filters for decimation and interpolation",
  IEEE Trans. ASSP-29(2):155-162, 1981 (transfer function, full width, pruning equation).
  Equation numbers are quoted from memory and were not re-checked against the printed paper.
- The check values of /work/shared/DESIGN.md section 4 (Lyons' published pruning example,
  droop and alias figures), quoted there to 3 and 2 decimals.
- scipy.signal.freqz / scipy.signal.lfilter as general-purpose reference implementations.
"""

from __future__ import annotations

import dataclasses
import math
from math import comb
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

import edgetally
from edgetally.dsp import cic
from edgetally.check import model

ROOT = Path(__file__).resolve().parents[1]
EPS = np.finfo(float).eps


@pytest.fixture(scope="module")
def orchard():
    return edgetally.design(edgetally.load_spec(ROOT / "examples" / "orchard_link.toml"))


@pytest.fixture(scope="module")
def campus():
    return edgetally.design(edgetally.load_spec(ROOT / "examples" / "campus_fm.toml"))


# --- register widths ---------------------------------------------------------------------------

def test_full_width_lyons_example():
    # Hogenauer 1981, eq. for Bmax (Bin + ceil(N log2 RM)); check value 21 bits from DESIGN.md sec. 4
    # (N=3, R=8, M=1, Bin=12: 12 + 3*3 = 21).
    assert cic.full_width(12, 3, 8, 1) == 21


@pytest.mark.parametrize("bin_bits", [1, 8, 12, 16, 22])
@pytest.mark.parametrize("n,r,m", [(1, 2, 1), (2, 3, 1), (3, 5, 1), (3, 8, 1), (4, 16, 1), (5, 7, 2),
                                   (3, 10, 1), (2, 64, 1), (6, 3, 3), (4, 25, 1), (3, 1000, 1)])
def test_full_width_from_output_range(bin_bits, n, r, m):
    # Hogenauer 1981: the output range is the input range times the DC gain G = (RM)^N, so the
    # two's-complement width is the least B with 2^(B-1) >= 2^(Bin-1) * G (the most negative input
    # gives the largest magnitude). Computed here with exact integers, no logarithms.
    g = (r * m) ** n
    need = (((1 << (bin_bits - 1)) * g) - 1).bit_length() + 1
    assert cic.full_width(bin_bits, n, r, m) == need


def test_pruned_widths_lyons_example():
    # Lyons' published pruning example (N=3, R=8, M=1, Bin=Bout=12), as quoted in DESIGN.md sec. 4
    # from memory of the published table: 21, 18, 17, 16, 15, 14 -> 12. Not re-checked against
    # the printed article.
    assert cic.pruned_widths(12, 12, 3, 8) == [21, 18, 17, 16, 15, 14, 12]


def _hogenauer_pruning(bin_bits, bout_bits, n, r, m=1):
    """Hogenauer 1981 pruning written out independently (equation numbers from memory):
    F_j^2 = sum_k h_j(k)^2, where h_j is the impulse response from the input of stage j to the
    output: (1 + z^-1 + ... + z^-(RM-1))^(N-j+1) (1 - z^-RM)^(j-1) for an integrator (j <= N),
    (1 - z^-M)^(2N+1-j) at the output rate for a comb (j > N);
    sigma_T^2 = 2^(2 B_2N+1) / 12 with B_2N+1 = Bmax - Bout;
    B_j = floor(-log2 F_j + log2 sigma_T + 0.5 log2(6 / N)); width_j = Bmax - B_j."""
    bmax = bin_bits + ((r * m) ** n - 1).bit_length()   # == Bin + ceil(log2 (RM)^N), exact for (RM)^N >= 2
    box = np.ones(r * m, dtype=object)
    comb_poly = np.zeros(r * m + 1, dtype=object)
    comb_poly[0], comb_poly[-1] = 1, -1
    widths = []
    sigma_t = math.sqrt(2.0 ** (2 * (bmax - bout_bits)) / 12.0)
    for j in range(1, 2 * n + 1):
        if j <= n:
            h = np.array([1], dtype=object)
            for _ in range(n - j + 1):
                h = np.convolve(h, box)
            for _ in range(j - 1):
                h = np.convolve(h, comb_poly)
        else:
            h = np.array([(-1) ** k * comb(2 * n + 1 - j, k) for k in range(2 * n + 2 - j)], dtype=object)
        f2 = sum(int(v) * int(v) for v in h)
        bj = math.floor(-0.5 * math.log2(f2) + math.log2(sigma_t) + 0.5 * math.log2(6.0 / n))
        widths.append(bmax - max(bj, 0))
    widths.append(bout_bits)
    return widths


@pytest.mark.parametrize("bin_bits,bout_bits,n,r", [(12, 12, 3, 8), (16, 16, 4, 25), (10, 14, 2, 16),
                                                    (22, 16, 3, 5), (8, 10, 5, 4)])
def test_pruned_widths_match_independent_hogenauer(bin_bits, bout_bits, n, r):
    # Hogenauer 1981 pruning equation, re-implemented above from the paper's definitions (the
    # impulse responses are built by polynomial multiplication, not by the paper's closed form
    # that cic.py uses). Integers and floor(): exact agreement expected.
    assert cic.pruned_widths(bin_bits, bout_bits, n, r) == _hogenauer_pruning(bin_bits, bout_bits, n, r)


# --- taps and frequency response ---------------------------------------------------------------

@pytest.mark.parametrize("n,r,m", [(1, 4, 1), (2, 5, 1), (3, 8, 1), (4, 3, 2), (5, 16, 1)])
def test_taps_sum_is_dc_gain(n, r, m):
    # Hogenauer 1981: DC gain (RM)^N. Integer sum, exact.
    assert int(cic.taps(n, r, m).sum()) == (r * m) ** n


@pytest.mark.parametrize("n,r,m", [(1, 4, 1), (2, 5, 1), (3, 8, 1), (4, 3, 2), (5, 16, 1)])
def test_taps_equal_impulse_response_of_hogenauer_transfer_function(n, r, m):
    # Hogenauer 1981: H(z) = ((1 - z^-RM) / (1 - z^-1))^N; scipy.signal.lfilter of an impulse through
    # numerator (1 - z^-RM)^N and denominator (1 - z^-1)^N as the reference. All intermediate values
    # are integers below 2^53, so double arithmetic is exact: exact comparison.
    num = np.array([1.0])
    den = np.array([1.0])
    for _ in range(n):
        num = np.convolve(num, np.r_[1.0, np.zeros(r * m - 1), -1.0])
        den = np.convolve(den, [1.0, -1.0])
    length = n * (r * m - 1) + 1
    imp = np.zeros(length + 10)
    imp[0] = 1.0
    ref = signal.lfilter(num, den, imp)
    t = cic.taps(n, r, m)
    assert t.size == length
    np.testing.assert_array_equal(t.astype(float), ref[:length])
    np.testing.assert_array_equal(ref[length:], 0.0)  # FIR: nothing after the last tap


def test_droop_at_quarter_output_rate():
    # DESIGN.md sec. 4 check value: droop -2.694 dB at 0.25 of the output rate for N=3, R=8 (given to
    # 3 decimals, so +-0.0005 dB covers the rounding of the published figure).
    d_model = float(cic.response_db(0.25, 3, 8))
    assert d_model == pytest.approx(-2.694, abs=0.0005)
    # scipy.signal.freqz of the taps as the reference, normalised by the DC gain 8**3 = 512; with
    # fs=R the frequency axis is in units of the output rate. Agreement 1e-6 dB: both are double
    # evaluations of the same function (22 taps, Horner sum vs. closed-form sines); their rounding
    # is ~1e-14 relative, i.e. ~1e-13 dB, so 1e-6 dB leaves a wide margin yet fails on any real error.
    _, h = signal.freqz(cic.taps(3, 8).astype(float), 1, worN=[0.25], fs=8)
    d_ref = 20 * math.log10(abs(h[0]) / 512.0)
    assert d_ref == pytest.approx(-2.694, abs=0.0005)
    assert d_model == pytest.approx(d_ref, abs=1e-6)
    # Closed form |sin(pi f) / (R sin(pi f / R))|^N (Hogenauer 1981, M=1), 1e-9 dB: double rounding.
    closed = 20 * 3 * math.log10(math.sin(math.pi * 0.25) / (8 * math.sin(math.pi * 0.25 / 8)))
    assert d_model == pytest.approx(closed, abs=1e-9)
    assert cic.droop_db(2000.0, 8000.0, 3, 8) == pytest.approx(-d_model, abs=1e-12)  # sign convention: loss > 0


def test_worst_alias_at_three_quarters():
    # DESIGN.md sec. 4 check value: worst alias into a 0.25 passband is -30.99 dB at 0.75 of the output
    # rate for N=3, R=8 (2 decimals: +-0.005 dB covers the rounding of the published figure).
    a_model = float(cic.response_db(0.75, 3, 8))
    assert a_model == pytest.approx(-30.99, abs=0.005)
    _, h = signal.freqz(cic.taps(3, 8).astype(float), 1, worN=[0.75], fs=8)   # scipy.signal.freqz reference
    assert 20 * math.log10(abs(h[0]) / 512.0) == pytest.approx(-30.99, abs=0.005)
    # "Worst" (Hogenauer 1981, aliasing bands k +- fc around each multiple k of the output rate):
    # over all alias bands k - 0.25 .. k + 0.25, k = 1 .. R/2, the largest gain is at 0.75. Checked on
    # a dense grid with scipy.signal.freqz (the 1e-9 dB allowance is double rounding, as above).
    bands = np.concatenate([np.linspace(k - 0.25, min(k + 0.25, 4.0), 2001) for k in range(1, 5)])
    _, hb = signal.freqz(cic.taps(3, 8).astype(float), 1, worN=bands, fs=8)
    assert 20 * np.log10(np.max(np.abs(hb)) / 512.0) <= a_model + 1e-9


@pytest.mark.parametrize("n,r,m", [(1, 2, 1), (2, 5, 1), (3, 8, 1), (4, 16, 1), (3, 4, 2), (5, 10, 1)])
def test_response_db_matches_freqz_dense_grid(n, r, m):
    # scipy.signal.freqz of cic.taps as the reference, from DC to the input Nyquist rate (R/2 output
    # rates), normalised by the DC gain (RM)^N. Compared as linear magnitude so that the nulls (-inf dB)
    # do not make the comparison ill-conditioned. Bound: Horner evaluation of L taps of total weight G
    # errs by <= 2 L eps G, i.e. 2 L eps after normalisation (L <= 61 here: 3e-14); the closed form
    # errs by a few eps per sine, times N. 1e-12 covers both with margin.
    f = np.linspace(0.0, r / 2.0, 4001)
    g = float((r * m) ** n)
    _, h = signal.freqz(cic.taps(n, r, m).astype(float), 1, worN=f, fs=r)
    ref = np.abs(h) / g
    got = 10.0 ** (cic.response_db(f, n, r, m) / 20.0)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
    # and in dB wherever the response is above -120 dB (relative error 1e-12/1e-6 -> < 1e-5 dB)
    ok = ref > 1e-6
    np.testing.assert_allclose(cic.response_db(f, n, r, m)[ok], 20 * np.log10(ref[ok]), rtol=0, atol=1e-5)


# --- the integer model's CIC against a direct FIR ----------------------------------------------

def _variant(design, order, ratio):
    return dataclasses.replace(design, cic=dataclasses.replace(design.cic, order=order, ratio=ratio))


def _check_model_cic(design, x):
    c = design.cic
    taps = cic.taps(c.order, c.ratio)
    # The direct FIR (Hogenauer 1981: the CIC is exactly this FIR at the input rate, decimated by R);
    # exact int64 arithmetic (|x| * G < 2^32 here, far below 2^63).
    y_full = np.convolve(x.astype(np.int64), taps)[: x.size]
    ref = y_full[c.ratio - 1::c.ratio][c.order:]
    got = model.cic_decimate(design, x)
    # Premise of the test: the true output fits the 32-bit registers (width >= Bin + ceil(N log2 R)),
    # while the integrators themselves overflow 32 bits (so wrap-around is exercised).
    assert ref.min() >= 0 and ref.max() < 2 ** 32
    integ = x.astype(float)
    for _ in range(c.order):
        integ = np.cumsum(integ)
    assert integ.max() > 2 ** 32
    # Hogenauer 1981: with registers of at least the full output width, two's-complement (here
    # modulo 2^32) wrap-around in the integrators is harmless: exact equality, modulo 2^32.
    got = np.asarray(got, dtype=np.int64)
    assert got.shape == ref.shape
    assert got.min() >= 0 and got.max() < 2 ** 32            # the contents of 32-bit registers
    np.testing.assert_array_equal(got % 2 ** 32, ref % 2 ** 32)


@pytest.mark.parametrize("seed", [1, 2])
def test_model_cic_equals_fir_orchard(orchard, seed):
    rng = np.random.default_rng(seed)
    x = rng.integers(0, orchard.front.x_limit, size=6000, endpoint=True)   # non-negative, <= x_limit
    _check_model_cic(orchard, x)


def test_model_cic_equals_fir_campus(campus):
    rng = np.random.default_rng(3)
    x = rng.integers(0, campus.front.x_limit, size=6000, endpoint=True)
    _check_model_cic(campus, x)


def test_model_cic_equals_fir_at_extreme_input(orchard, campus):
    # Largest legal step everywhere (x_limit), the case closest to the register limit.
    for d in (orchard, campus):
        _check_model_cic(d, np.full(3000, d.front.x_limit, dtype=np.int64))


@pytest.mark.parametrize("order,ratio", [(1, 7), (2, 64), (4, 16), (5, 4), (3, 25)])
def test_model_cic_equals_fir_variants(orchard, order, ratio):
    # Variants of the orchard design; inputs kept below 2^32 / (R^N) so that the full output width
    # fits the 32-bit registers (Hogenauer's condition), and below the design's x_limit.
    d = _variant(orchard, order, ratio)
    limit = min(orchard.front.x_limit, (2 ** 32 - 1) // ratio ** order)
    rng = np.random.default_rng(order * 100 + ratio)
    x = rng.integers(0, limit, size=20000, endpoint=True)
    _check_model_cic(d, x)
