"""Unit and property tests of solver.physics.emission (profiles, leakage, guards, amplifier
regrowth).

Published values (occupied bandwidths, compression points, Saleh figures) are checked in
tests/reference/test_emission_reference.py.
"""

from __future__ import annotations

import itertools
import math
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver.model import Amplifier, AmplifierModel, Modulation, ProblemError, Window
from solver.physics.emission import (
    EmissionKey,
    Side,
    SpectrumProfile,
    build_profile,
    get_profile,
    guard_needed_hz,
    leakage_ratio_db_at,
    occupied_bandwidth_hz,
    simulate_amplifier_psd,
    warm_profiles,
)
from solver.physics.modcod import constellation

LINEAR_KEYS = [
    EmissionKey(rolloff, span, window)
    for rolloff in (0.0, 0.05, 0.2, 0.35)
    for span in (6, 16)
    for window in (Window.NONE, Window.HANN)
]
SIDES: st.SearchStrategy[Side] = st.sampled_from(["below", "above", "worst"])
PROPERTY = settings(max_examples=40, deadline=None)


def _amplified(backoff_db: float, modulation: Modulation = Modulation.QPSK) -> EmissionKey:
    return EmissionKey(
        0.2, 12, amplifier=Amplifier(AmplifierModel.RAPP, 2.0, backoff_db), modulation=modulation
    )


# --- EmissionKey ------------------------------------------------------------------------


def test_key_drops_modulation_without_amplifier() -> None:
    # Linear PSD of i.i.d. zero-mean symbols is |P(f)|² whatever the constellation
    # (Proakis & Salehi 5th ed. §8.1), so these keys must share one cache entry.
    a = EmissionKey(0.2, 12, modulation=Modulation.QAM64)
    b = EmissionKey(0.2, 12, modulation=Modulation.QPSK)
    assert a.modulation is None
    assert a == b and hash(a) == hash(b)
    assert get_profile(a) is get_profile(b)


def test_key_keeps_modulation_with_amplifier() -> None:
    assert _amplified(3.0, Modulation.QAM16).modulation is Modulation.QAM16
    assert _amplified(3.0, Modulation.QAM16) != _amplified(3.0, Modulation.QPSK)


@pytest.mark.parametrize(
    ("kwargs", "field_name"),
    [
        ({"rolloff": 1.2, "span_symbols": 8}, "rolloff"),
        ({"rolloff": 0.2, "span_symbols": 0}, "filter_span_symbols"),
        ({"rolloff": 0.2, "span_symbols": 8.5}, "filter_span_symbols"),
        ({"rolloff": 0.2, "span_symbols": 8, "window": "hann"}, "window"),
        ({"rolloff": 0.2, "span_symbols": 8, "amplifier": Amplifier()}, "modulation"),
        (
            {
                "rolloff": 0.2,
                "span_symbols": 8,
                "amplifier": Amplifier(output_backoff_db=-1.0),
                "modulation": Modulation.QPSK,
            },
            "amplifier.output_backoff_db",
        ),
        (
            {
                "rolloff": 0.2,
                "span_symbols": 8,
                "amplifier": Amplifier(smoothness=0.0),
                "modulation": Modulation.QPSK,
            },
            "amplifier.smoothness",
        ),
    ],
)
def test_key_rejects_bad_values_naming_the_field(
    kwargs: dict[str, object], field_name: str
) -> None:
    with pytest.raises(ProblemError) as info:
        EmissionKey(**kwargs)  # type: ignore[arg-type]
    assert info.value.field == field_name


def test_unreachable_backoff_is_reported() -> None:
    # Saleh's mean output peaks below saturation for a shaped signal: 0.01 dB is unreachable.
    key = EmissionKey(
        0.2,
        12,
        amplifier=Amplifier(AmplifierModel.SALEH, output_backoff_db=0.01),
        modulation=Modulation.QPSK,
    )
    with pytest.raises(ProblemError, match="cannot be reached"):
        build_profile(key)


# --- profile basics ---------------------------------------------------------------------


@pytest.mark.parametrize("key", LINEAR_KEYS[:4])
def test_profile_is_normalised_and_symmetric(key: EmissionKey) -> None:
    profile = get_profile(key)
    step = float(profile.freq[1] - profile.freq[0])
    assert float(np.sum(profile.psd) * step) == pytest.approx(1.0, rel=1e-12)
    assert profile.cumulative[0] == 0.0 and profile.cumulative[-1] == pytest.approx(1.0)
    # Real taps: |P(f)|² is even, so both sides leak alike.
    np.testing.assert_allclose(profile.psd, profile.psd[::-1], rtol=1e-9, atol=1e-18)
    gaps = np.linspace(0.0, 3.0, 31)
    np.testing.assert_allclose(
        profile.leakage_ratio_db(gaps, "below"), profile.leakage_ratio_db(gaps, "above"), atol=1e-6
    )
    assert profile.freq[-1] >= 8.0 and profile.freq[0] <= -8.0  # design: grid reaches ±8 Rs
    assert profile.nominal_bandwidth == pytest.approx(1.0 + key.rolloff)


def test_scalar_and_array_queries_agree() -> None:
    profile = get_profile(EmissionKey(0.2, 16))
    gaps = [0.0, 0.3, 1.7]
    as_array = profile.leakage_ratio_db(gaps)
    assert isinstance(as_array, np.ndarray)
    for g, value in zip(gaps, as_array, strict=True):
        assert isinstance(profile.leakage_ratio_db(g), float)
        assert profile.leakage_ratio_db(g) == pytest.approx(float(value), abs=1e-12)
    assert profile.power_in(-0.6, 0.6) > profile.power_in(-0.5, 0.5) > 0.5
    assert float(profile.psd_at(0.0)) == pytest.approx(
        float(np.interp(0, profile.freq, profile.psd))
    )
    assert float(profile.psd_at(1e3)) == 0.0


def test_bad_queries_are_named() -> None:
    profile = get_profile(EmissionKey(0.2, 16))
    with pytest.raises(ValueError, match="gap"):
        profile.leakage_ratio_db(-0.1)
    with pytest.raises(ValueError, match="gap"):
        profile.leakage_ratio_db(profile.max_gap + 1)
    with pytest.raises(ValueError, match="side"):
        profile.leakage_ratio_db(0.1, "left")  # type: ignore[call-overload]
    with pytest.raises(ValueError, match="fraction"):
        profile.occupied_bandwidth(1.0)
    with pytest.raises(ValueError, match="limit_db"):
        profile.guard_needed(math.nan)
    with pytest.raises(ValueError, match="symbol_rate_baud"):
        occupied_bandwidth_hz(EmissionKey(0.2, 16), 0.0)


def test_hz_helpers_scale_the_normalised_profile() -> None:
    # A carrier at Rs is the normalised profile with frequencies × Rs (DESIGN.md, Physics).
    key, rate = EmissionKey(0.35, 10), 2.5e6
    profile = get_profile(key)
    assert occupied_bandwidth_hz(key, rate) == pytest.approx(profile.occupied_bandwidth() * rate)
    assert guard_needed_hz(key, rate, 55.0) == pytest.approx(profile.guard_needed(55.0) * rate)
    assert leakage_ratio_db_at(key, rate, 0.4 * rate, "above") == pytest.approx(
        profile.leakage_ratio_db(0.4, "above")
    )


# --- leakage, envelope and guard --------------------------------------------------------


@PROPERTY
@given(
    key=st.sampled_from(LINEAR_KEYS),
    gaps=st.lists(st.floats(0.0, 6.0), min_size=2, max_size=20),
    side=SIDES,
)
def test_envelope_never_decreases_and_bounds_the_ratio(
    key: EmissionKey, gaps: list[float], side: Side
) -> None:
    profile = get_profile(key)
    ordered = np.sort(np.array(gaps))
    envelope = profile.leakage_envelope_db(ordered, side)
    assert np.all(np.diff(envelope) >= 0)
    assert np.all(envelope <= profile.leakage_ratio_db(ordered, side) + 1e-12)


@PROPERTY
@given(
    key=st.sampled_from(LINEAR_KEYS),
    limits=st.lists(st.floats(10.0, 90.0), min_size=2, max_size=6),
    side=SIDES,
)
def test_guard_is_monotone_and_sufficient(
    key: EmissionKey, limits: list[float], side: Side
) -> None:
    profile = get_profile(key)
    ordered = sorted(limits)
    guards = [profile.guard_needed(limit, side) for limit in ordered]
    assert all(a <= b for a, b in itertools.pairwise(guards))
    for limit, guard in zip(ordered, guards, strict=True):
        if math.isinf(guard):
            continue
        beyond = np.linspace(guard, profile.max_gap, 400)
        # Exact by construction (linear interpolation inside a linear piece): the slack
        # covers only floating-point rounding of 10·log10 near the crossing.
        assert np.min(profile.leakage_ratio_db(beyond, side)) >= limit - 1e-6
        if guard > 0:  # and just before the guard the limit is broken somewhere
            before = profile.leakage_envelope_db(max(guard - 1e-3, 0.0), side)
            assert before < limit


@pytest.mark.parametrize("key", [EmissionKey(0.05, 8), EmissionKey(0.35, 24, Window.HAMMING)])
@pytest.mark.parametrize("limit_db", [35.0, 50.0, 62.0])
def test_guard_agrees_with_a_brute_force_scan(key: EmissionKey, limit_db: float) -> None:
    # Peer: evaluate the ratio on a 1e-4 Rs grid and take the first gap after the last
    # violation.  Both use the same band powers, so they agree to one scan step.
    profile = get_profile(key)
    step = 1e-4
    gaps = np.arange(0.0, profile.max_gap, step)
    ratio = profile.leakage_ratio_db(gaps)
    bad = np.nonzero(ratio < limit_db)[0]
    scanned = 0.0 if bad.size == 0 else float(gaps[bad[-1]] + step)
    assert profile.guard_needed(limit_db) == pytest.approx(scanned, abs=step)


def test_guard_edge_cases() -> None:
    profile = get_profile(EmissionKey(0.2, 16))
    assert profile.guard_needed(5.0) == 0.0  # gap 0 already meets a lax limit
    assert math.isinf(profile.guard_needed(400.0))  # never met on the ±16 Rs grid
    assert profile.guard_needed(60.0) is profile.guard_needed(60.0)  # served from the cache


def test_truncation_makes_leakage_finite_and_longer_spans_leak_less() -> None:
    # DESIGN.md Physics: truncation is what makes leakage finite.  Common practice: a longer
    # RRC span lowers the side lobes, so span 6 leaks more than span 16 at every gap shown
    # and needs a wider guard for the same limit.
    short, long = get_profile(EmissionKey(0.2, 6)), get_profile(EmissionKey(0.2, 16))
    gaps = np.array([0.0, 0.1, 0.25, 0.5, 1.0, 2.0])
    assert np.all(long.leakage_ratio_db(gaps) > short.leakage_ratio_db(gaps) + 5.0)
    assert short.guard_needed(45.0) > long.guard_needed(45.0)
    assert np.all(np.isfinite(short.leakage_ratio_db(gaps)))


def test_window_trades_close_in_for_far_out_leakage() -> None:
    # Common practice (window design; Oppenheim & Schafer §7.5): a Blackman window on a short
    # filter lowers the far side lobes (gap ≥ 0.5 Rs) but widens the transition (gap 0).
    plain, windowed = (
        get_profile(EmissionKey(0.2, 6)),
        get_profile(EmissionKey(0.2, 6, Window.BLACKMAN)),
    )
    assert windowed.leakage_ratio_db(1.0) > plain.leakage_ratio_db(1.0) + 20.0
    assert windowed.leakage_ratio_db(0.0) < plain.leakage_ratio_db(0.0)


def test_profiles_from_many_threads_are_consistent() -> None:
    keys = [EmissionKey(r, s) for r in (0.1, 0.15, 0.25) for s in (7, 9, 11)]
    serial = [build_profile(k).guard_needed(50.0) for k in keys]
    with ThreadPoolExecutor(max_workers=6) as pool:
        threaded = list(pool.map(lambda k: get_profile(k).guard_needed(50.0), keys * 3))
    assert threaded == serial * 3


# --- amplifier --------------------------------------------------------------------------


def test_mean_output_power_sits_at_the_backoff() -> None:
    # With Welch's density scaling ∫ psd df is the mean power (scipy.signal.welch), and the
    # Rapp model saturates at output amplitude 1, so ∫ psd df = 10^(−OBO/10).  1 %
    # tolerance: the estimator loses the bins beyond the ±8 Rs grid and window edges only.
    key = _amplified(4.0)
    freq, psd = simulate_amplifier_psd(
        constellation(Modulation.QPSK).points, key, np.random.default_rng(7)
    )
    power = float(np.sum(psd) * (freq[1] - freq[0]))
    assert power == pytest.approx(10 ** (-4.0 / 10), rel=0.01)


def test_amplifier_profile_is_deterministic_and_seed_noise_is_small() -> None:
    key = _amplified(3.0)
    a, b = build_profile(key, seed=11), build_profile(key, seed=11)
    np.testing.assert_array_equal(a.psd, b.psd)
    other = build_profile(key, seed=12)
    gaps = np.array([0.0, 0.2, 0.5, 1.0, 2.0])
    # Welch noise: different symbols change band ratios by well under 0.5 dB (measured < 0.1).
    np.testing.assert_allclose(a.leakage_ratio_db(gaps), other.leakage_ratio_db(gaps), atol=0.5)


def test_warm_profiles_caches_exactly_what_one_after_another_builds() -> None:
    """The threaded warm-up gives bit-identical profiles (each has its own seeded symbols)."""
    keys = [_amplified(3.3, m) for m in (Modulation.QPSK, Modulation.QAM16, Modulation.PSK8)]
    warm_profiles(keys + keys[:1])
    for key in keys:
        np.testing.assert_array_equal(get_profile(key).psd, build_profile(key).psd)


def test_amplifier_shows_spectral_regrowth() -> None:
    # Common practice: a PA at 3 dB output back-off regrows the spectrum (3rd-order
    # intermodulation fills the adjacent band) — the ratio falls well below the linear one.
    linear, amplified = get_profile(EmissionKey(0.2, 12)), get_profile(_amplified(3.0))
    gaps = np.array([0.0, 0.1, 0.25, 0.5])
    assert np.all(amplified.leakage_ratio_db(gaps) < linear.leakage_ratio_db(gaps) - 5.0)
    assert amplified.occupied_bandwidth() > linear.occupied_bandwidth()


@pytest.mark.parametrize("modulation", [Modulation.APSK16, Modulation.QAM16])
def test_higher_papr_regrows_more(modulation: Modulation) -> None:
    # Common practice: multi-ring constellations have a higher peak-to-average ratio than
    # QPSK and so regrow more at the same output back-off (margin 1 dB ≫ Welch noise).
    qpsk, dense = get_profile(_amplified(3.0)), get_profile(_amplified(3.0, modulation))
    assert constellation(modulation).papr_db > constellation(Modulation.QPSK).papr_db
    gaps = np.array([0.0, 0.1, 0.25, 0.5])
    assert np.all(dense.leakage_ratio_db(gaps) < qpsk.leakage_ratio_db(gaps) - 1.0)


@settings(max_examples=12, deadline=None)
@given(
    backoffs=st.lists(
        st.sampled_from([1.0, 2.0, 3.0, 4.0, 6.0, 8.0, 12.0]), min_size=2, max_size=2, unique=True
    ),
    gap=st.floats(0.0, 1.5),
)
def test_more_backoff_never_worsens_leakage(backoffs: list[float], gap: float) -> None:
    # Within 1.5 Rs of the edge the leakage is set by regrowth, which shrinks as the drive
    # falls.  Tolerance 0.2 dB: Welch noise (same seed, so mostly common) and, near the
    # linear floor, a few tenths of a dB by which compression reshapes the truncation side
    # lobes (measured 0.35 dB at 2 Rs, which is why larger gaps are not asserted here).
    low, high = sorted(backoffs)
    worse = get_profile(_amplified(low)).leakage_envelope_db(gap)
    better = get_profile(_amplified(high)).leakage_envelope_db(gap)
    assert better >= worse - 0.2


def test_large_backoff_converges_to_the_linear_profile() -> None:
    # Estimator floor: at 40 dB back-off the amplifier is linear, so the Welch profile must
    # reproduce the FFT profile wherever the leakage is below ~64 dB (span 12).  1 dB allows
    # the Welch variance and the Blackman-Harris smoothing of the truncation ripples.
    linear, amplified = get_profile(EmissionKey(0.2, 12)), get_profile(_amplified(40.0))
    gaps = np.array([0.0, 0.05, 0.25, 0.5, 1.0, 2.0])
    assert np.max(linear.leakage_ratio_db(gaps)) < 65.0
    np.testing.assert_allclose(
        amplified.leakage_ratio_db(gaps), linear.leakage_ratio_db(gaps), atol=1.0
    )


def test_saleh_profile_regrows_too() -> None:
    key = EmissionKey(
        0.2,
        12,
        amplifier=Amplifier(AmplifierModel.SALEH, output_backoff_db=4.0),
        modulation=Modulation.QPSK,
    )
    assert (
        get_profile(key).leakage_ratio_db(0.1)
        < get_profile(EmissionKey(0.2, 12)).leakage_ratio_db(0.1) - 5
    )


def test_profile_from_density_validates() -> None:
    f = np.linspace(-4, 4, 801)
    with pytest.raises(ValueError, match="density"):
        SpectrumProfile.from_density(f, -np.ones_like(f), 1.0)
    with pytest.raises(ValueError, match="uniformly"):
        SpectrumProfile.from_density(f**3, np.ones_like(f), 1.0)
