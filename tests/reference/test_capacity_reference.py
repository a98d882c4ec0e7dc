"""Capacity, Shannon limits and the finite-length normal approximation against check-values §2.

"check-values" is /work/shared/reference/check-values.md.  Its capacity table was computed
there independently (Gauss–Hermite, with 8PSK/16QAM confirmed by Monte-Carlo to ±0.003); the
Shannon limits are exact consequences of C = B·log2(1 + S/N) (Shannon 1948/1949).
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from scipy import optimize

from solver.model import Coding
from solver.physics.modcod import (
    cm_capacity,
    ebn0_from_esn0_db,
    gaussian_capacity_dispersion,
    normal_approximation_bits,
    required_esn0_db,
)

ESN0_GRID_DB = (-5.0, 0.0, 5.0, 10.0, 15.0, 20.0)
# check-values §2, constellation-constrained capacity, bits per complex symbol (computed).
CAPACITY_TABLE = {
    "BPSK": (0.3495, 0.7215, 0.9762, 1.0000, 1.0000, 1.0000),
    "QPSK": (0.3955, 0.9719, 1.7184, 1.9935, 2.0000, 2.0000),
    "8PSK": (0.3957, 0.9809, 1.8621, 2.6774, 2.9904, 3.0000),
    "16QAM": (0.3960, 0.9897, 1.9732, 3.1639, 3.9285, 3.9999),
    "64QAM": (0.3961, 0.9918, 1.9926, 3.2686, 4.6814, 5.8015),
}
# Tolerance 2e-4 bits: the table's 4 decimals (±5e-5) plus our quadrature (32×32 nodes for
# 2-D formats: ~2e-5 measured against 64×64) and spline interpolation (< 4e-5 measured).
CAPACITY_ATOL = 2e-4


@pytest.mark.parametrize("modulation", sorted(CAPACITY_TABLE))
def test_cm_capacity_table(modulation: str) -> None:
    got = cm_capacity(modulation, np.array(ESN0_GRID_DB))
    np.testing.assert_allclose(got, CAPACITY_TABLE[modulation], atol=CAPACITY_ATOL)


def test_shannon_column_of_the_table() -> None:
    # check-values §2 first column: log2(1 + SNR) — a check of our Gaussian-channel helper.
    expected = (0.3964, 1.0000, 2.0574, 3.4594, 5.0278, 6.6582)
    got = [gaussian_capacity_dispersion(x, dimensions=2)[0] for x in ESN0_GRID_DB]
    np.testing.assert_allclose(got, expected, atol=6e-5)


@pytest.mark.parametrize("esn0_db", [-8.0, -2.5, 0.0, 3.3, 7.0, 12.0])
def test_qpsk_is_two_bpsk_at_half_energy(esn0_db: float) -> None:
    # Identity from check-values §2: QPSK(Es/N0) = 2 × BPSK(Es/N0 − 3.01 dB) (I and Q are two
    # independent BPSK channels, each with half the energy).  Our QPSK goes through the PAM
    # axis path and BPSK through the 1-D path, so this compares two code paths; 1e-6 bits.
    shifted = esn0_db - 10 * math.log10(2)
    assert cm_capacity("QPSK", esn0_db) == pytest.approx(2 * cm_capacity("BPSK", shifted), abs=1e-6)


def test_ultimate_shannon_limit() -> None:
    # Shannon: Eb/N0 → ln 2 = −1.5917 dB as the spectral efficiency η → 0 (check-values §2).
    eta = 1e-6
    snr = 2**eta - 1  # complex AWGN at η bits per symbol
    ebn0_db = float(ebn0_from_esn0_db(10 * math.log10(snr), eta))
    assert ebn0_db == pytest.approx(10 * math.log10(math.log(2)), abs=1e-4)
    assert ebn0_db == pytest.approx(-1.5917, abs=1e-4)


@pytest.mark.parametrize(
    ("eta", "expected_db"), [(0.5, -0.818), (1, 0.000), (2, 1.761), (4, 5.740)]
)
def test_minimum_ebn0_at_spectral_efficiency(eta: float, expected_db: float) -> None:
    # check-values §2: (2^η − 1)/η; found here by inverting our capacity helper (3 decimals).
    esn0_db = optimize.brentq(
        lambda x: gaussian_capacity_dispersion(x, dimensions=2)[0] - eta, -30.0, 30.0, xtol=1e-10
    )
    assert float(ebn0_from_esn0_db(esn0_db, eta)) == pytest.approx(expected_db, abs=1e-3)


@pytest.mark.parametrize(
    ("rate", "ebn0_db"),
    [(0.5, 0.187), (0.25, -0.794), (1 / 3, -0.495), (2 / 3, 1.059), (0.75, 1.626), (0.9, 3.198)],
)
def test_bi_awgn_limits(rate: float, ebn0_db: float) -> None:
    # BPSK-input (BI-AWGN) capacity limit: rate 1/2 at Eb/N0 = 0.187 dB (Richardson & Urbanke,
    # Modern Coding Theory, σ* ≈ 0.9787 — from memory; reproduced in check-values §2, which
    # also lists the other rates, computed).  Tolerance 2e-3 dB (3 decimals + quadrature).
    esn0_db = optimize.brentq(lambda x: float(cm_capacity("BPSK", x)) - rate, -15.0, 10.0)
    assert float(ebn0_from_esn0_db(esn0_db, rate)) == pytest.approx(ebn0_db, abs=2e-3)


def test_complex_awgn_dispersion_at_0_db() -> None:
    # check-values §2: complex AWGN V = SNR(SNR + 2)/(SNR + 1)² (log2 e)² = 1.5610 at 0 dB;
    # real AWGN V = 0.78051 at P = 1 (SPECTRE normapx_awgn.m, read there).
    assert gaussian_capacity_dispersion(0.0, 2)[1] == pytest.approx(1.5610, abs=1e-4)
    assert gaussian_capacity_dispersion(0.0, 1)[1] == pytest.approx(0.78051, abs=1e-5)


@pytest.mark.parametrize(
    ("snr_db", "epsilon", "uses", "expected_bits"),
    [
        (0.0, 1e-3, 100, 26.021),
        (0.0, 1e-3, 500, 193.436),
        (0.0, 1e-3, 1000, 418.649),
        (0.0, 1e-5, 200, 50.536),
        (10.0, 1e-5, 1000, 1597.685),
        (20.0, 1e-3, 2000, 6522.719),
    ],
)
def test_normal_approximation_real_awgn(
    snr_db: float, epsilon: float, uses: int, expected_bits: float
) -> None:
    # check-values §2 spot values (Polyanskiy–Poor–Verdú 2010 normal approximation with the
    # ½·log2 n term, real AWGN; computed there).  3 decimals → 1.5e-3 bits.
    capacity, dispersion = gaussian_capacity_dispersion(snr_db, dimensions=1)
    got = normal_approximation_bits(uses, capacity, dispersion, epsilon)
    assert got == pytest.approx(expected_bits, abs=1.5e-3)


def test_real_awgn_capacity_and_dispersion_at_10_db() -> None:
    # check-values §2: SNR 10 dB → C = 1.729716, V = 1.032084 (computed there).
    capacity, dispersion = gaussian_capacity_dispersion(10.0, dimensions=1)
    assert capacity == pytest.approx(1.729716, abs=1e-6)
    assert dispersion == pytest.approx(1.032084, abs=1e-6)


def test_bpsk_threshold_approaches_bi_awgn_limit_for_long_blocks() -> None:
    # As n → ∞ the normal approximation tends to capacity: with a very long block the
    # rate-1/2 BPSK threshold must approach the 0.187 dB BI-AWGN limit (Eb/N0) from above;
    # at n = 10⁷ bits the √(V/n) back-off is about 0.01 dB, so we allow 0.05 dB.
    coding = Coding(block_length_bits=10_000_000, implementation_loss_db=0.0)
    esn0_db = required_esn0_db("BPSK", Fraction(1, 2), coding)
    ebn0_db = float(ebn0_from_esn0_db(esn0_db, 0.5))
    assert 0.187 < ebn0_db < 0.187 + 0.05
