"""Uncoded AWGN error rates against published values and an independent simulator.

Sources are written beside each value; "check-values" is /work/shared/reference/check-values.md,
whose §1 values were computed there from the published closed forms (Proakis & Salehi 5th ed.
§4.3; Cho & Yoon 2002; Lee 1986; Craig 1991) and anchored by Roddy's worked examples.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from commpy.modulation import PSKModem, QAMModem
from scipy import optimize

from solver.physics.modcod import bit_error_rate, esn0_from_ebn0_db, symbol_error_rate

# Exact Gray BER at a given Eb/N0 — check-values §1c (computed from the exact forms).
# Tolerance: 5e-4 relative; the table prints 5 significant figures (half-unit = 5e-5 relative
# at worst 1.0114e-3 → 5e-5/1.0114 ≈ 5e-5), so 5e-4 leaves room for our quadrature only.
SPOT_EBN0_DB = (0.0, 4.0, 8.0, 10.0, 12.0, 16.0)
SPOT_BER = {
    "QPSK": (7.8650e-2, 1.2501e-2, 1.9091e-4, 3.8721e-6, 9.0060e-9, 2.2674e-19),
    "BPSK": (7.8650e-2, 1.2501e-2, 1.9091e-4, 3.8721e-6, 9.0060e-9, 2.2674e-19),
    "8PSK": (1.2269e-1, 4.5895e-2, 6.1811e-3, 1.0114e-3, 6.3379e-5, 1.1099e-9),
    "16QAM": (1.4098e-1, 5.8624e-2, 9.2472e-3, 1.7542e-3, 1.3866e-4, 6.2502e-9),
    "4PAM": (1.4098e-1, 5.8624e-2, 9.2472e-3, 1.7542e-3, 1.3866e-4, 6.2502e-9),
    "64QAM": (1.9984e-1, 1.1852e-1, 5.2334e-2, 2.6533e-2, 9.7240e-3, 2.1717e-4),
    "256QAM": (2.5461e-1, 1.7832e-1, 1.0789e-1, 7.8596e-2, 5.2076e-2, 1.2400e-2),
}
SPOT_RTOL = 5e-4

BITS = {"BPSK": 1, "QPSK": 2, "8PSK": 3, "16QAM": 4, "4PAM": 2, "64QAM": 6, "256QAM": 8}


@pytest.mark.parametrize("modulation", sorted(SPOT_BER))
def test_gray_ber_spot_values_check_values_1c(modulation: str) -> None:
    esn0_db = esn0_from_ebn0_db(np.array(SPOT_EBN0_DB), BITS[modulation])
    got = bit_error_rate(modulation, esn0_db)
    np.testing.assert_allclose(got, SPOT_BER[modulation], rtol=SPOT_RTOL)


def test_roddy_bpsk_worked_example() -> None:
    # Roddy, Satellite Communications 4th ed., p. 305 (worked example after Fig. 10.17):
    # BPSK at Eb/N0 = 10 dB gives BER 3.9e-6 (printed to 2 figures → ±0.05e-6).
    assert bit_error_rate("BPSK", 10.0) == pytest.approx(3.9e-6, abs=0.05e-6)


def test_roddy_problems_10_15_and_10_16() -> None:
    # Roddy 4th ed., problems 10.15 (QPSK, Eb/N0 = 8 dB) and 10.16 (BPSK, 16 dB), p. 313;
    # answers as computed in check-values §1c: 1.909e-4 and 2.27e-19 (3 figures → 0.3 %).
    assert bit_error_rate("QPSK", float(esn0_from_ebn0_db(8.0, 2))) == pytest.approx(
        1.909e-4, rel=3e-3
    )
    assert bit_error_rate("BPSK", 16.0) == pytest.approx(2.27e-19, rel=3e-3)


# Es/N0 spot SERs — check-values §1c "Other spot values" (computed from the exact forms).
@pytest.mark.parametrize(
    ("modulation", "esn0_db", "expected"),
    [
        ("QPSK", 10.0, 1.5648e-3),
        ("8PSK", 15.0, 2.3395e-3),
        ("16QAM", 15.0, 1.7782e-2),
        ("4PAM", 15.0, 2.8181e-4),
    ],
)
def test_ser_spot_values(modulation: str, esn0_db: float, expected: float) -> None:
    # 5 significant figures in the source → 1e-4 relative.
    assert symbol_error_rate(modulation, esn0_db) == pytest.approx(expected, rel=1e-4)


def _ebn0_for_ber(modulation: str, target: float) -> float:
    bits = BITS[modulation]
    return float(
        optimize.brentq(
            lambda eb: (
                math.log(
                    max(float(bit_error_rate(modulation, esn0_from_ebn0_db(eb, bits))), 1e-300)
                )
                - math.log(target)
            ),
            -5.0,
            40.0,
            xtol=1e-8,
        )
    )


# Eb/N0 (dB) for a target Gray BER — check-values §1b (computed); BPSK/QPSK row also matches
# the textbook "9.6 dB at 1e-5, 10.5 dB at 1e-6" (Sklar; Proakis & Salehi — from memory).
# Tolerance 1e-3 dB: the table prints 3 decimals.
EBN0_TABLE = {
    "QPSK": (6.790, 9.588, 10.530),
    "4PAM": (10.522, 13.435, 14.402),
    "8PSK": (10.010, 12.972, 13.950),
    "16QAM": (10.522, 13.435, 14.402),
    "64QAM": (14.767, 17.787, 18.777),
}


@pytest.mark.parametrize("modulation", sorted(EBN0_TABLE))
def test_ebn0_for_target_ber_check_values_1b(modulation: str) -> None:
    for target, expected in zip((1e-3, 1e-5, 1e-6), EBN0_TABLE[modulation], strict=True):
        assert _ebn0_for_ber(modulation, target) == pytest.approx(expected, abs=1.1e-3)


# Es/N0 (dB) for a target SER — check-values §1b second table (computed; 3 decimals).
ESN0_SER_TABLE = {
    "QPSK": (10.345, 12.903, 13.789),
    "8PSK": (15.678, 18.236, 19.122),
    "16QAM": (17.627, 20.062, 20.918),
    "64QAM": (23.965, 26.357, 27.203),
    "4PAM": (14.106, 16.758, 17.667),
}


@pytest.mark.parametrize("modulation", sorted(ESN0_SER_TABLE))
def test_esn0_for_target_ser_check_values_1b(modulation: str) -> None:
    for target, expected in zip((1e-3, 1e-5, 1e-6), ESN0_SER_TABLE[modulation], strict=True):
        found = optimize.brentq(
            lambda x, t=target: (
                math.log(max(float(symbol_error_rate(modulation, x)), 1e-300)) - math.log(t)
            ),
            0.0,
            40.0,
        )
        assert found == pytest.approx(expected, abs=1.1e-3)


def test_nearest_neighbour_approximation_agrees_at_high_snr() -> None:
    # Proakis & Salehi 5th ed. §4.3-2: Ps ≈ 2Q(√(2Es/N0)·sin(π/M)) for M-PSK; check-values §1c
    # notes Craig's exact form and the approximation agree to 1e-15 at 8PSK, 15 dB.  We allow
    # 1e-6 relative (the approximation drops a term of order Q² ≈ 1e-12 here).
    esn0 = 10**1.5
    approx = math.erfc(math.sqrt(2 * esn0) * math.sin(math.pi / 8) / math.sqrt(2))
    assert symbol_error_rate("8PSK", 15.0) == pytest.approx(approx, rel=1e-6)


def _simulate(
    modem: PSKModem | QAMModem, esn0_db: float, symbols: int, seed: int
) -> tuple[int, int, int, int]:
    """Error counts of scikit-commpy's Gray modem through our own seeded AWGN channel."""
    rng = np.random.default_rng(seed)
    bits_per_symbol = int(modem.num_bits_symbol)
    bits = rng.integers(0, 2, symbols * bits_per_symbol)
    sent = modem.modulate(bits)
    energy = float(np.mean(np.abs(modem.constellation) ** 2))  # commpy QAM is not unit energy
    noise_var = energy / 10 ** (esn0_db / 10)
    noise = rng.normal(size=sent.size) + 1j * rng.normal(size=sent.size)
    received = sent + noise * math.sqrt(noise_var / 2)
    decided = modem.demodulate(received, "hard")
    bit_errors = int(np.count_nonzero(decided != bits))
    symbol_errors = int(
        np.count_nonzero(np.any((decided != bits).reshape(-1, bits_per_symbol), axis=1))
    )
    return bit_errors, bits.size, symbol_errors, symbols


# Monte-Carlo cross-check with an independent modem (scikit-commpy, Gray-mapped PSK and QAM).
# Tolerance: the observed count must lie within 4.5 binomial standard deviations of the
# prediction (false-alarm probability < 1e-5 per check with a fixed seed, so a real error
# of a few percent in our formulas would fail).
@pytest.mark.parametrize(
    ("modem", "modulation", "esn0_db"),
    [
        (PSKModem(4), "QPSK", 8.0),
        (PSKModem(8), "8PSK", 12.0),
        (QAMModem(16), "16QAM", 14.0),
        (QAMModem(64), "64QAM", 20.0),
    ],
    ids=["QPSK", "8PSK", "16QAM", "64QAM"],
)
def test_monte_carlo_with_commpy(
    modem: PSKModem | QAMModem, modulation: str, esn0_db: float
) -> None:
    bit_errors, bits, symbol_errors, symbols = _simulate(modem, esn0_db, 60_000, seed=20240601)
    for count, trials, p in (
        (bit_errors, bits, float(bit_error_rate(modulation, esn0_db))),
        (symbol_errors, symbols, float(symbol_error_rate(modulation, esn0_db))),
    ):
        sigma = math.sqrt(trials * p * (1 - p))
        assert abs(count - trials * p) <= 4.5 * sigma, (modulation, count, trials * p)


def test_apsk_union_bound_is_tight_and_above_simulation() -> None:
    # Proakis & Salehi §4.2: the union bound is an upper bound and becomes tight at high SNR.
    # Own seeded simulation of the 16APSK constellation (minimum-distance detection):
    # the bound must not be below the observed rate by more than 4.5 σ, and be within 25 %.
    from solver.physics.modcod import constellation

    points = constellation("16APSK").points
    rng = np.random.default_rng(7)
    esn0_db, symbols = 17.0, 200_000
    index = rng.integers(0, points.size, symbols)
    noise = (rng.normal(size=symbols) + 1j * rng.normal(size=symbols)) * math.sqrt(
        0.5 / 10 ** (esn0_db / 10)
    )
    decided = np.argmin(np.abs((points[index] + noise)[:, None] - points[None, :]), axis=1)
    errors = int(np.count_nonzero(decided != index))
    bound = float(symbol_error_rate("16APSK", esn0_db))
    sigma = math.sqrt(symbols * bound * (1 - bound))
    assert errors <= symbols * bound + 4.5 * sigma
    assert errors >= 0.75 * symbols * bound
