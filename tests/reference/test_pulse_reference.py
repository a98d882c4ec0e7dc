"""Pulse shapes against an independent library and published textbook facts.

Sources: scikit-commpy (``commpy.filters``, an independent implementation); Proakis & Salehi,
*Digital Communications*, 5th ed. (2008), §9.2; Roddy, *Satellite Communications*, 4th ed.,
Eq. (10.9)–(10.16); /work/shared/reference/check-values.md §6.
"""

from __future__ import annotations

import numpy as np
import pytest
from commpy.filters import rcosfilter, rrcosfilter
from scipy import optimize

from solver.physics.pulses import (
    raised_cosine,
    raised_cosine_spectrum,
    rectangular_pulse_spectrum,
    rrc_taps,
)

CASES = [(0.05, 12, 8), (0.2, 16, 8), (0.22, 10, 4), (0.25, 8, 8), (0.35, 6, 16), (1.0, 8, 4)]


@pytest.mark.parametrize(("rolloff", "span", "sps"), CASES)
def test_rrc_taps_match_commpy(rolloff: float, span: int, sps: int) -> None:
    # commpy.filters.rrcosfilter(N, α, Ts, Fs) samples t = (n − N/2)/Fs for n = 0 … N−1 and
    # does not normalise.  With N = span·sps + 2 its samples 1 … N−1 sit on our grid
    # t = −span/2 … +span/2; both are then scaled to unit energy.  Same closed form
    # (TS 25.104 §6.8.1), so agreement to 1e-12 (double rounding) is expected.
    _, reference = rrcosfilter(span * sps + 2, rolloff, 1.0, float(sps))
    reference = reference[1:]
    assert np.all(np.isfinite(reference))
    reference = reference / np.sqrt(np.sum(reference**2))
    np.testing.assert_allclose(rrc_taps(rolloff, span, sps), reference, atol=1e-12)


@pytest.mark.parametrize(("rolloff", "span", "sps"), CASES)
def test_raised_cosine_matches_commpy(rolloff: float, span: int, sps: int) -> None:
    # commpy.filters.rcosfilter uses the same time grid convention (see above) and peak 1.
    # Tolerance 1e-12: same closed form, double rounding only.
    times, reference = rcosfilter(span * sps + 2, rolloff, 1.0, float(sps))
    finite = np.isfinite(reference)
    np.testing.assert_allclose(raised_cosine(times[finite], rolloff), reference[finite], atol=1e-12)


@pytest.mark.parametrize("rolloff", [0.05, 0.2, 0.35, 1.0])
def test_rrc_convolved_with_itself_is_raised_cosine(rolloff: float) -> None:
    # Transmit RRC × receive RRC = RC (check-values §6 "RRC split"; Proakis & Salehi §9.2).
    # The taps have unit energy, so the discrete convolution is the continuous one sampled at
    # t = n/sps (the RRC is band-limited below sps/2).  A 64-symbol span truncates tails
    # that change the product by < 1e-4 within |t| ≤ 16 (measured 7.6e-5 for α = 0.05).
    sps, span = 8, 64
    taps = rrc_taps(rolloff, span, sps)
    product = np.convolve(taps, taps)
    t = (np.arange(product.size) - (product.size - 1) // 2) / sps
    inner = np.abs(t) <= span / 4
    np.testing.assert_allclose(product[inner], raised_cosine(t[inner], rolloff), atol=1e-4)
    # Zero ISI survives the split: the cascade is ~0 at every nonzero symbol instant.
    instants = inner & (np.abs(t - np.round(t)) < 1e-12) & (t != 0)
    assert np.max(np.abs(product[instants])) < 1e-4


@pytest.mark.parametrize("rolloff", [0.0, 0.1, 0.35, 0.5, 1.0])
def test_raised_cosine_zero_isi(rolloff: float) -> None:
    # Proakis & Salehi 5th ed. §9.2 (check-values §6 "Zero ISI"): h(nT) = 0, n ≠ 0.
    n = np.arange(-50, 51)
    values = raised_cosine(n.astype(float), rolloff)
    assert values[50] == 1.0
    assert np.max(np.abs(np.delete(values, 50))) < 1e-12


@pytest.mark.parametrize("rolloff", [0.05, 0.2, 0.35, 1.0])
def test_raised_cosine_spectrum_roddy(rolloff: float) -> None:
    # Roddy 4th ed. Eq. (10.9)–(10.12) with Rs = 1: flat to f1 = (1−ρ)/2, half amplitude at
    # ½, zero from B = (1+ρ)/2; cosine value midway through the first half of the roll-off
    # ½[1 + cos(π/4)] = 0.853553 (evaluated from the equation).  Exact formula: 1e-12.
    f1, edge = (1 - rolloff) / 2, (1 + rolloff) / 2
    quarter = f1 + (edge - f1) / 4
    values = raised_cosine_spectrum([0.0, f1, 0.5, quarter, edge, edge + 0.01], rolloff)
    expected = [1.0, 1.0, 0.5, 0.5 * (1 + np.cos(np.pi / 4)), 0.0, 0.0]
    np.testing.assert_allclose(values, expected, atol=1e-12)


def test_nrz_needs_twice_the_bit_rate_between_first_nulls() -> None:
    # Common practice (check-values §6 "NRZ pulse"): binary rectangular pulses at 10 Mb/s
    # occupy 20 MHz between the first spectral nulls in passband (nulls at fc ± 1/T).
    bit_rate_bps = 10e6
    found = optimize.minimize_scalar(
        lambda f: float(rectangular_pulse_spectrum(f)),
        bounds=(0.5, 1.5),
        method="bounded",
        options={"xatol": 1e-10},
    )
    first_null = float(found.x)
    inside = rectangular_pulse_spectrum(np.linspace(0.0, first_null - 1e-3, 1000))
    assert np.all(inside > 0)
    assert float(rectangular_pulse_spectrum(first_null)) < 1e-15
    # Tolerance 1 Hz: the minimiser locates the null to 1e-8 of the bit rate.
    assert 2 * first_null * bit_rate_bps == pytest.approx(20e6, abs=1.0)


def test_sinc_pulses_need_half_the_nrz_bandwidth() -> None:
    # Common practice; Roddy Eq. (10.15) with ρ = 0: ideal band-limited (sinc, α = 0) binary
    # pulses at 10 Mb/s need 10 MHz in passband (support |f| ≤ Rb/2 at baseband).
    bit_rate_bps = 10e6
    f = np.linspace(0, 1, 100_001)
    support_edge = float(f[np.nonzero(raised_cosine_spectrum(f, 0.0) > 0)[0][-1]])
    # Grid step 1e-5 of Rb, i.e. 100 Hz at baseband, 200 Hz in passband.
    assert 2 * support_edge * bit_rate_bps == pytest.approx(10e6, abs=200.0)


def test_rectangular_pulse_first_sidelobe() -> None:
    # check-values §6 "NRZ pulse": first sidelobe of sinc² at −13.26 dB (standard; computed).
    # Tolerance 0.005 dB: the value is given to two decimals.
    found = optimize.minimize_scalar(
        lambda f: -float(rectangular_pulse_spectrum(f)),
        bounds=(1.0, 2.0),
        method="bounded",
        options={"xatol": 1e-10},
    )
    assert 10 * np.log10(-found.fun) == pytest.approx(-13.26, abs=0.005)
