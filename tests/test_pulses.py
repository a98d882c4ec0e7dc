"""Unit and property tests of solver.physics.pulses (the raised-cosine family).

Published values and third-party cross-checks are in tests/reference/test_pulse_reference.py;
this file checks the analytic properties every input must satisfy.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver.model import Window
from solver.physics.pulses import (
    raised_cosine,
    raised_cosine_spectrum,
    rectangular_pulse_spectrum,
    root_raised_cosine,
    rrc_taps,
)

ROLLOFFS = st.floats(min_value=0.0, max_value=1.0, allow_nan=False)
NONZERO_ROLLOFFS = st.floats(min_value=0.01, max_value=1.0, allow_nan=False)
FAST = settings(max_examples=60, deadline=None)


@FAST
@given(rolloff=ROLLOFFS, n=st.integers(min_value=1, max_value=40))
def test_raised_cosine_is_zero_at_nonzero_symbol_instants(rolloff: float, n: int) -> None:
    # Nyquist criterion (Proakis & Salehi 5th ed. §9.2): h(nT) = 0 for n ≠ 0, h(0) = 1.
    # Tolerance 1e-12: sin(πn) evaluates to ~1e-15·n, not exactly 0.
    values = raised_cosine(np.array([0.0, n, -n]), rolloff)
    assert values[0] == pytest.approx(1.0, abs=1e-15)
    assert np.all(np.abs(values[1:]) < 1e-12)


@FAST
@given(rolloff=NONZERO_ROLLOFFS)
def test_singular_points_are_continuous(rolloff: float) -> None:
    # The limits used at t = 1/(2α) (RC) and t = 1/(4α) (RRC) must match the closed form
    # just beside them; the functions are smooth, so a step of 1e-6 changes them by < 1e-5.
    step = 1e-6
    for func, t0 in ((raised_cosine, 1 / (2 * rolloff)), (root_raised_cosine, 1 / (4 * rolloff))):
        around = func(np.array([t0 - step, t0, t0 + step]), rolloff)
        assert np.all(np.isfinite(around))
        assert around[1] == pytest.approx(0.5 * (around[0] + around[2]), abs=1e-5)
    at_zero = root_raised_cosine(np.array([-step, 0.0, step]), rolloff)
    assert at_zero[1] == pytest.approx(at_zero[0], abs=1e-5)


def test_zero_rolloff_is_the_sinc_pulse() -> None:
    # α = 0: both RC and RRC reduce to sinc(t) (Proakis & Salehi 5th ed. §9.2).
    t = np.linspace(-5.3, 5.3, 101)
    np.testing.assert_allclose(raised_cosine(t, 0.0), np.sinc(t), atol=1e-15)
    np.testing.assert_allclose(root_raised_cosine(t, 0.0), np.sinc(t), atol=1e-15)


@FAST
@given(
    rolloff=ROLLOFFS,
    span=st.integers(min_value=1, max_value=40),
    sps=st.integers(min_value=2, max_value=16),
    window=st.sampled_from(list(Window)),
)
def test_taps_are_symmetric_unit_energy_and_sized(
    rolloff: float, span: int, sps: int, window: Window
) -> None:
    taps = rrc_taps(rolloff, span, sps, window)
    assert taps.shape == (span * sps + 1,)
    assert float(np.sum(taps**2)) == pytest.approx(1.0, rel=1e-12)
    np.testing.assert_allclose(taps, taps[::-1], atol=1e-15)
    assert np.all(np.isfinite(taps))


@FAST
@given(rolloff=ROLLOFFS, f=st.floats(min_value=-3, max_value=3, allow_nan=False))
def test_raised_cosine_spectrum_is_bounded_and_even(rolloff: float, f: float) -> None:
    value = raised_cosine_spectrum(f, rolloff)
    assert 0.0 <= float(value) <= 1.0
    assert float(raised_cosine_spectrum(-f, rolloff)) == float(value)


@FAST
@given(rolloff=ROLLOFFS)
def test_raised_cosine_spectrum_is_nyquist_symmetric(rolloff: float) -> None:
    # Nyquist's vestigial symmetry (Proakis & Salehi §9.2): S(½ − x) + S(½ + x) = 1 for
    # 0 ≤ x ≤ ½, which is what makes the folded spectrum flat (zero ISI).
    x = np.linspace(0.0, 0.5, 51)
    total = raised_cosine_spectrum(0.5 - x, rolloff) + raised_cosine_spectrum(0.5 + x, rolloff)
    np.testing.assert_allclose(total[1:], 1.0, atol=1e-12)


def test_impulse_response_and_spectrum_are_a_fourier_pair() -> None:
    # The RC impulse response (peak 1, T = 1) has transform T·S(f) (Proakis & Salehi §9.2).
    # Sampled at 16/T over ±200 T, the FFT matches S(f) to 2e-3 (truncation of the 1/t³ tail).
    sps, half_span = 16, 200
    t = np.arange(-half_span * sps, half_span * sps + 1) / sps
    for rolloff in (0.1, 0.35, 1.0):
        h = raised_cosine(t, rolloff)
        spectrum = np.abs(np.fft.fft(np.fft.ifftshift(h))) / sps
        f = np.fft.fftfreq(h.size, d=1 / sps)
        keep = np.abs(f) < 1.0
        np.testing.assert_allclose(
            spectrum[keep], raised_cosine_spectrum(f[keep], rolloff), atol=2e-3
        )


def test_rectangular_spectrum_integrates_to_one() -> None:
    # ∫ sinc²(f) df = 1 (Parseval for a unit rectangular pulse; Proakis & Salehi §3.4).
    f = np.linspace(-2000, 2000, 400_001)
    total = np.trapezoid(rectangular_pulse_spectrum(f), f)
    # The truncated tail beyond ±2000 holds 2/(2π²·2000) ≈ 5e-5 of the power.
    assert total == pytest.approx(1.0, abs=1e-4)


@pytest.mark.parametrize(
    ("kwargs", "name"),
    [
        ({"rolloff": -0.1, "span_symbols": 8, "samples_per_symbol": 4}, "rolloff"),
        ({"rolloff": 1.5, "span_symbols": 8, "samples_per_symbol": 4}, "rolloff"),
        ({"rolloff": 0.2, "span_symbols": 0, "samples_per_symbol": 4}, "span_symbols"),
        ({"rolloff": 0.2, "span_symbols": 8.0, "samples_per_symbol": 4}, "span_symbols"),
        ({"rolloff": 0.2, "span_symbols": 8, "samples_per_symbol": 1}, "samples_per_symbol"),
        (
            {"rolloff": 0.2, "span_symbols": 8, "samples_per_symbol": 4, "window": "hann"},
            "window",
        ),
    ],
)
def test_bad_arguments_are_named(kwargs: dict[str, object], name: str) -> None:
    with pytest.raises(ValueError, match=name):
        rrc_taps(**kwargs)  # type: ignore[arg-type]


def test_window_changes_taps_but_not_energy() -> None:
    plain = rrc_taps(0.25, 8, 8)
    for window in (Window.HANN, Window.HAMMING, Window.BLACKMAN, Window.KAISER):
        shaped = rrc_taps(0.25, 8, 8, window)
        assert not np.allclose(shaped, plain)
        # Windows taper the ends: the outermost taps shrink relative to the centre tap.
        assert abs(shaped[1] / shaped[32]) < abs(plain[1] / plain[32])
