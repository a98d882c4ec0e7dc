"""In-band distortion floor: the analytic Bussgang decomposition against sampling, closed forms
for the limiting amplifiers, published compression points and NR EVM limits (sources beside
each value), and properties that hold for any amplifier."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, optimize, special

from solver.model import Amplifier, AmplifierModel, Coding, Modulation, ProblemError
from solver.physics.amplifier import amplify, solve_drive
from solver.physics.distortion import (
    bussgang,
    combined_evm_pct,
    effective_esn0_db,
    output_p1db_db,
    thermal_esn0_needed_db,
)
from solver.physics.modcod import required_esn0_db

RAPP = AmplifierModel.RAPP
SALEH = AmplifierModel.SALEH
CLIPPER_P = 1e6  # Rapp p this large is the ideal envelope clipper to ~1e-7 in amplitude
SAMPLES = 1 << 20
# Seed-to-seed spread of the sampled SDR at 2**20 samples, measured over 8 seeds while writing
# this test: at most 0.050 dB rms (Rapp p = 3 at 8 dB, where the distortion comes from rare
# envelope peaks), 0.015 dB for Saleh.  0.15 dB is three times the worst spread.
MONTE_CARLO_TOLERANCE_DB = 0.15
SALEH_SMALLEST_BACKOFF_DB = 1.07  # computed in test_saleh_smallest_backoff (1.063 dB)


def sampled_distortion(amplifier: Amplifier, seed: int) -> tuple[float, complex, float]:
    """SDR (dB), Bussgang gain and input back-off (dB) from complex Gaussian samples, driven
    by solve_drive and passed through amplify (the emission code's path, not the quadrature)."""
    rng = np.random.default_rng(seed)
    pair = rng.standard_normal((2, SAMPLES)) / math.sqrt(2.0)
    unit = np.asarray(pair[0] + 1j * pair[1], dtype=np.complex128)
    x = np.asarray(unit * solve_drive(np.abs(unit) ** 2, amplifier), dtype=np.complex128)
    y = amplify(x, amplifier)
    input_power = float(np.mean(np.abs(x) ** 2))
    gain = complex(np.vdot(x, y) / np.vdot(x, x))
    distortion = float(np.mean(np.abs(y - gain * x) ** 2))
    saturation_input = 1.0 / 1.1517 if amplifier.model is SALEH else 1.0  # Saleh 1981: 1/β_a
    sdr_db = 10 * math.log10(abs(gain) ** 2 * input_power / distortion)
    return sdr_db, gain, 10 * math.log10(saturation_input / input_power)


@pytest.mark.slow
@pytest.mark.parametrize("backoff_db", [2.0, 4.0, 6.0, 8.0])
@pytest.mark.parametrize(("model", "p"), [(RAPP, 1.0), (RAPP, 2.0), (RAPP, 3.0), (SALEH, 2.0)])
def test_matches_monte_carlo(model: AmplifierModel, p: float, backoff_db: float) -> None:
    amplifier = Amplifier(model=model, smoothness=p, output_backoff_db=backoff_db)
    analytic = bussgang(amplifier)
    sdr_db, gain, input_backoff_db = sampled_distortion(amplifier, seed=2024)
    assert analytic.signal_to_distortion_db == pytest.approx(sdr_db, abs=MONTE_CARLO_TOLERANCE_DB)
    assert analytic.evm_pct == pytest.approx(100 * 10 ** (-sdr_db / 20), rel=0.02)
    # The sampled drive and gain follow the sample's mean power, whose standard error at 2**20
    # samples is 1e-3 relative (0.0042 dB): both tolerances are about five standard errors.
    assert abs(analytic.gain / gain - 1) < 5e-3
    assert analytic.input_backoff_db == pytest.approx(input_backoff_db, abs=0.02)


def clipper(backoff_db: float) -> tuple[float, float, float]:
    """Ideal envelope clipper (A(r) = min(r, 1)) with a circular Gaussian input, closed form.

    With clipping ratio γ = A_sat/σ, integrating over the Rayleigh envelope gives
    mean output power σ²·(1 − e^(−γ²)) and Bussgang gain α = 1 − e^(−γ²) + (√π/2)·γ·erfc(γ)
    (derived here; the same expressions appear in H. Ochiai and H. Imai, IEEE Trans. Commun.
    50(1), 2002, and D. Dardari, V. Tralli, A. Vaccari, IEEE Trans. Commun. 48(10), 2000 —
    from memory).  Returns (α, SDR dB, input back-off dB = 10·log10 γ²).
    """
    target = 10 ** (-backoff_db / 10)  # mean output power over A_sat² = (1 − e^(−γ²))/γ²
    g2 = optimize.brentq(lambda g2: -math.expm1(-g2) / g2 - target, 1e-12, 1e4, xtol=1e-15)
    g = math.sqrt(g2)
    alpha = -math.expm1(-g2) + math.sqrt(math.pi) / 2 * g * special.erfc(g)
    distortion = -math.expm1(-g2) - alpha**2  # over σ²
    return alpha, 10 * math.log10(alpha**2 / distortion), 10 * math.log10(g2)


@pytest.mark.parametrize("backoff_db", [0.5, 1.0, 2.0, 3.0, 5.0, 8.0])
def test_clipper_closed_form(backoff_db: float) -> None:
    alpha, sdr_db, input_backoff_db = clipper(backoff_db)
    floor = bussgang(Amplifier(smoothness=CLIPPER_P, output_backoff_db=backoff_db))
    # Rapp p = 1e6 departs from the clipper by at most ln 2/(2p) ≈ 3.5e-7 in amplitude.
    assert floor.gain.real == pytest.approx(alpha, rel=1e-6)
    assert floor.gain.imag == 0.0
    assert floor.signal_to_distortion_db == pytest.approx(sdr_db, abs=1e-4)
    assert floor.input_backoff_db == pytest.approx(input_backoff_db, abs=1e-4)


def test_hard_limiter_limit() -> None:
    # Driven far into saturation the clipper is a hard (envelope) limiter y = A·x/|x|.  With
    # Bussgang's gain (J. J. Bussgang, MIT RLE Tech. Rep. 216, 1952; the limiter result is the
    # usual textbook one, from memory, and is derived here):
    # α = E[y·x*]/E|x|² = A·E|x|/σ², and E|x| = (√π/2)·σ for a
    # Rayleigh envelope, so α = (√π/2)·A/σ; the output power is A², hence
    # SDR = (π/4)/(1 − π/4) = π/(4 − π) = 5.64 dB (derived here from the Rayleigh mean).
    # At 1e-4 dB output back-off γ = A/σ ≈ 0.0068: the clipper's α·σ/A differs from √π/2 by a
    # relative O(γ³) (series of clipper()'s closed form) and its output power from A² by a
    # relative γ²/2, which moves the SDR by about 4.343·γ²/(2·(1 − π/4)) ≈ 5e-4 dB.
    floor = bussgang(Amplifier(smoothness=CLIPPER_P, output_backoff_db=1e-4))
    sigma = 10 ** (-floor.input_backoff_db / 20)  # A_sat = 1
    assert floor.gain.real * sigma == pytest.approx(math.sqrt(math.pi) / 2, rel=1e-5)
    assert floor.signal_to_distortion_db == pytest.approx(
        10 * math.log10(math.pi / (4 - math.pi)), abs=1e-3
    )


@pytest.mark.parametrize(
    ("p", "expected_db"),
    # check-values §7 (computed there; p = 2 also matches an independent code comment, 2.16 dB)
    # from Rapp's A(v) = v/(1 + v^(2p))^(1/(2p)) (Rapp 1991, ESA SP-332); given to 3 decimals.
    [(1.0, -6.868), (2.0, -2.165), (3.0, -1.007), (5.0, -0.330), (10.0, -0.046)],
)
def test_rapp_output_p1db(p: float, expected_db: float) -> None:
    assert output_p1db_db(Amplifier(smoothness=p)) == pytest.approx(expected_db, abs=6e-4)


def test_saleh_output_p1db() -> None:
    # Saleh 1981 AM/AM A(r) = α_a·r/(1 + β_a·r²): the gain is 1 dB below α_a where
    # 1 + β_a·r² = 10^(1/20); saturated power α_a²/(4·β_a) (check-values §7).  Derived here.
    alpha_a, beta_a = 2.1587, 1.1517
    r2 = (10 ** (1 / 20) - 1) / beta_a
    expected = 10 * math.log10(alpha_a**2 * r2 * 10 ** (-1 / 10) / (alpha_a**2 / (4 * beta_a)))
    assert output_p1db_db(Amplifier(model=SALEH)) == pytest.approx(expected, abs=1e-6)


def test_saleh_smallest_backoff() -> None:
    # Mean output power of Saleh's AM/AM for E|x|² = σ², c = β_a·σ², u ~ Exp(1):
    # E[A²] = (α_a²/β_a)·E[c·u/(1 + c·u)²]; over the saturated α_a²/(4β_a) that is
    # 4·E[c·u/(1 + c·u)²], largest at some c (computed here by quad and a bounded search).
    def ratio(log_c: float) -> float:
        c = math.exp(log_c)
        value, _ = integrate.quad(lambda u: c * u / (1 + c * u) ** 2 * math.exp(-u), 0, np.inf)
        return 4.0 * float(value)

    best = optimize.minimize_scalar(lambda t: -ratio(t), bounds=(-5, 5), method="bounded")
    smallest_db = -10 * math.log10(-best.fun)
    assert smallest_db == pytest.approx(1.063, abs=1e-3)  # the figure SALEH_SMALLEST_BACKOFF_DB
    bussgang(Amplifier(model=SALEH, output_backoff_db=smallest_db + 1e-3))
    with pytest.raises(ProblemError) as caught:
        bussgang(Amplifier(model=SALEH, output_backoff_db=smallest_db - 1e-3))
    assert caught.value.field == "amplifier.output_backoff_db"


@pytest.mark.parametrize("backoff_db", [math.nan, math.inf, -math.inf, 0.0, -3.0])
def test_backoff_validated(backoff_db: float) -> None:
    with pytest.raises(ProblemError) as caught:
        bussgang(Amplifier(output_backoff_db=backoff_db))
    assert caught.value.field == "amplifier.output_backoff_db"


@pytest.mark.parametrize("p", [math.nan, math.inf, 0.0, -1.0])
def test_smoothness_validated(p: float) -> None:
    with pytest.raises(ProblemError) as caught:
        bussgang(Amplifier(smoothness=p))
    assert caught.value.field == "amplifier.smoothness"
    bussgang(Amplifier(model=SALEH, smoothness=p))  # Saleh ignores the smoothness


backoffs = st.floats(min_value=0.5, max_value=20.0)
saleh_backoffs = st.floats(min_value=SALEH_SMALLEST_BACKOFF_DB, max_value=20.0)


@settings(max_examples=40, deadline=None)
@given(st.floats(min_value=1.0, max_value=10.0), backoffs, backoffs)
def test_rapp_more_backoff_never_raises_evm(p: float, first: float, second: float) -> None:
    low, high = sorted((first, second))
    at_low = bussgang(Amplifier(smoothness=p, output_backoff_db=low))
    at_high = bussgang(Amplifier(smoothness=p, output_backoff_db=high))
    assert at_high.evm_pct <= at_low.evm_pct * (1 + 1e-9)  # 1e-9: quadrature rounding
    assert at_high.input_backoff_db >= at_low.input_backoff_db - 1e-9
    assert at_low.gain.imag == 0.0 and 0.0 < at_low.gain.real <= 1.0  # AM/AM only, compressive


@settings(max_examples=30, deadline=None)
@given(saleh_backoffs, saleh_backoffs)
def test_saleh_more_backoff_never_raises_evm(first: float, second: float) -> None:
    low, high = sorted((first, second))
    at_low = bussgang(Amplifier(model=SALEH, output_backoff_db=low))
    at_high = bussgang(Amplifier(model=SALEH, output_backoff_db=high))
    assert at_high.evm_pct <= at_low.evm_pct * (1 + 1e-9)
    # AM/PM rotates by 0 … α_φ/β_φ = 0.4397 rad (check-values §7); the mean rotation lies inside.
    assert 0.0 < np.angle(at_low.gain) < 4.0033 / 9.1040


esn0s = st.floats(min_value=-10.0, max_value=60.0)
evms = st.floats(min_value=0.01, max_value=100.0)


@given(esn0s, evms)
def test_effective_esn0_bounds(esn0_db: float, evm_pct: float) -> None:
    # Two noise powers add: the sum is at least the larger and at most twice it (10·log10 2).
    floor_db = -20 * math.log10(evm_pct / 100)
    smaller = min(esn0_db, floor_db)
    effective = effective_esn0_db(esn0_db, evm_pct)
    assert smaller - 10 * math.log10(2) - 1e-9 <= effective <= smaller + 1e-9


@given(esn0s, st.floats(min_value=0.0, max_value=30.0))
def test_thermal_needed_inverts_effective(esn0_db: float, evm_pct: float) -> None:
    effective = effective_esn0_db(esn0_db, evm_pct)
    assert thermal_esn0_needed_db(effective, evm_pct) == pytest.approx(esn0_db, abs=1e-6)


@given(esn0s, evms)
def test_thermal_needed_infinite_beyond_floor(required_db: float, evm_pct: float) -> None:
    needed = thermal_esn0_needed_db(required_db, evm_pct)
    floor_db = -20 * math.log10(evm_pct / 100)
    if required_db >= floor_db + 1e-9:
        assert needed == math.inf
    elif required_db < floor_db - 1e-9:
        assert effective_esn0_db(needed, evm_pct) == pytest.approx(required_db, abs=1e-6)


def test_effective_esn0_special_values() -> None:
    assert effective_esn0_db(12.5, 0.0) == 12.5  # no floor: unchanged
    assert effective_esn0_db(math.inf, 1.0) == pytest.approx(40.0, abs=1e-12)  # −20·log10 0.01
    assert effective_esn0_db(20.0, 10.0) == pytest.approx(20 - 10 * math.log10(2), abs=1e-12)
    esn0 = np.array([[0.0, 10.0, np.inf], [30.0, 40.0, 50.0]])
    evm = np.array([0.0, 1.0, 5.0])
    vector = effective_esn0_db(esn0, evm)
    assert vector.shape == (2, 3)
    for index in np.ndindex(vector.shape):
        assert vector[index] == effective_esn0_db(float(esn0[index]), float(evm[index[1]]))
    with pytest.raises(ValueError, match="evm_pct"):
        effective_esn0_db(10.0, -1.0)


def test_combined_evm() -> None:
    assert combined_evm_pct(3.0, 4.0) == 5.0  # 3-4-5 right triangle
    assert combined_evm_pct(2.0, 2.0, 2.0, 2.0) == 4.0  # √(4·4)
    assert combined_evm_pct(7.5) == 7.5
    assert combined_evm_pct() == 0.0
    with pytest.raises(ValueError, match="floor"):
        combined_evm_pct(1.0, math.nan)


# 3GPP TS 38.104 Table 6.5.2.2-1 (BS EVM limits, from memory) and the highest code rate of
# each modulation in TS 38.214 Table 5.1.3.1-2 (256QAM MCS table, from memory).
NR_EVM_LIMITS = [
    (Modulation.QPSK, 17.5, 602),
    (Modulation.QAM16, 12.5, 658),
    (Modulation.QAM64, 8.0, 873),
    (Modulation.QAM256, 3.5, 948),
]
THERMAL_ESN0_DB = 40.0


@pytest.mark.parametrize(("modulation", "evm_pct", "rate_x1024"), NR_EVM_LIMITS)
def test_nr_evm_limit_leaves_highest_rate_usable(
    modulation: Modulation, evm_pct: float, rate_x1024: int
) -> None:
    threshold_db = required_esn0_db(modulation, Fraction(rate_x1024, 1024), Coding())
    effective = effective_esn0_db(THERMAL_ESN0_DB, evm_pct)
    assert effective > threshold_db, f"margin {effective - threshold_db:.2f} dB"
    assert thermal_esn0_needed_db(threshold_db, evm_pct) < THERMAL_ESN0_DB
