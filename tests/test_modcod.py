"""Constellations, capacities and the catalogue: properties that hold for any input, plus
structural facts of the textbook constellations (sources beside each value)."""

from __future__ import annotations

import math
import time
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver.model import Coding, Modulation
from solver.physics.modcod import (
    CODE_RATES,
    bicm_capacity,
    bit_error_rate,
    catalogue,
    cm_capacity,
    cm_dispersion,
    constellation,
    ebn0_from_esn0_db,
    esn0_from_ebn0_db,
    required_esn0_db,
    symbol_error_rate,
)
from solver.physics.modcod import _moments_direct as moments_direct

ALL = tuple(Modulation)
esn0_values = st.floats(min_value=-15.0, max_value=35.0, allow_nan=False)
modulations = st.sampled_from(ALL)
rates = st.sampled_from(CODE_RATES)


@pytest.mark.parametrize("modulation", ALL)
def test_constellation_shape(modulation: Modulation) -> None:
    c = constellation(modulation)
    assert np.mean(np.abs(c.points) ** 2) == pytest.approx(1.0, abs=1e-12)
    assert sorted(c.labels.tolist()) == list(range(c.order))
    assert c.order == 2**c.bits_per_symbol
    assert c.dimensions == (1 if modulation in {"BPSK", "4PAM", "8PAM"} else 2)
    if c.dimensions == 1:
        assert np.all(c.points.imag == 0)
    assert not c.points.flags.writeable


@pytest.mark.parametrize("modulation", ALL)
def test_nearest_neighbours_differ_in_one_bit(modulation: Modulation) -> None:
    # Gray labelling (common practice): points at the minimum distance differ in one bit.
    # Holds for our quasi-Gray APSK labels too (minimum-distance pairs lie on a ring).
    c = constellation(modulation)
    distance = np.abs(c.points[:, None] - c.points[None, :])
    np.fill_diagonal(distance, np.inf)
    pairs = np.argwhere(distance < distance.min() * (1 + 1e-9))
    assert all(bin(int(c.labels[i] ^ c.labels[j])).count("1") == 1 for i, j in pairs)


@pytest.mark.parametrize(
    ("modulation", "papr_db"),
    [
        # Square QAM peak/mean energy: 16QAM 18/10, 64QAM 98/42, 256QAM 450/170
        # (Proakis & Salehi 5th ed. §3.2 average energy 2(M−1)/3·d² — formula from memory).
        ("16QAM", 10 * math.log10(1.8)),
        ("64QAM", 10 * math.log10(98 / 42)),
        ("256QAM", 10 * math.log10(450 / 170)),
        ("8PSK", 0.0),
        ("4PAM", 10 * math.log10(9 / 5)),
    ],
)
def test_papr(modulation: str, papr_db: float) -> None:
    assert constellation(modulation).papr_db == pytest.approx(papr_db, abs=1e-9)


def test_apsk_ring_ratios() -> None:
    # DVB-S2 (EN 302 307-1 §5.4.3/5.4.4, from memory) rate-3/4 ring ratios: 2.85; 2.84 and 5.27.
    radii16 = np.unique(np.round(np.abs(constellation("16APSK").points), 9))
    radii32 = np.unique(np.round(np.abs(constellation("32APSK").points), 9))
    assert radii16[1] / radii16[0] == pytest.approx(2.85, abs=1e-8)
    assert radii32[1:] / radii32[0] == pytest.approx([2.84, 5.27], abs=1e-8)


def test_ring_ratios_set_the_apsk_radii() -> None:
    # DVB-S2 16APSK 2/3: γ = 3.15; 32APSK 9/10: γ1 = 2.53, γ2 = 4.30 (EN 302 307-1 §5.4.3/5.4.4,
    # from memory).  Same rings and phases as the default, unit energy.
    radii16 = np.unique(np.round(np.abs(constellation("16APSK", (3.15,)).points), 9))
    radii32 = np.unique(np.round(np.abs(constellation("32APSK", [2.53, 4.30]).points), 9))
    assert radii16[1] / radii16[0] == pytest.approx(3.15, abs=1e-8)
    assert radii32[1:] / radii32[0] == pytest.approx([2.53, 4.30], abs=1e-8)
    for c in (constellation("16APSK", (3.15,)), constellation("32APSK", (2.53, 4.30))):
        assert np.mean(np.abs(c.points) ** 2) == pytest.approx(1.0, abs=1e-12)
        assert np.angle(c.points) == pytest.approx(np.angle(constellation(c.modulation).points))


def test_default_ring_ratios_are_the_default_constellation() -> None:
    # Given explicitly, the default geometry's ratios share its cache entry (and its tables).
    assert constellation("16APSK", (2.85,)) is constellation("16APSK")
    assert constellation("32APSK", (2.84, 5.27)) is constellation("32APSK")
    assert constellation("16APSK").ring_ratios == ()


@pytest.mark.parametrize(
    ("modulation", "ring_ratios"),
    [
        ("QPSK", (2.0,)),
        ("16APSK", (2.7, 4.0)),
        ("32APSK", (3.0,)),
        ("16APSK", (0.9,)),
        ("32APSK", (4.0, 3.0)),
        ("16APSK", (math.nan,)),
    ],
)
def test_unfit_ring_ratios_are_refused(modulation: str, ring_ratios: tuple[float, ...]) -> None:
    with pytest.raises(ValueError, match="ring_ratios"):
        constellation(modulation, ring_ratios)


def test_ring_ratio_changes_the_threshold_a_little() -> None:
    # DVB-S2 16APSK 2/3 uses γ = 3.15 instead of the default 2.85 (EN 302 307-1 §5.4.3, from
    # memory).  Moving the outer ring changes the capacity at a given Es/N0 only slightly near
    # the threshold, so the ideal threshold moves, but by well under a few tenths of a dB
    # (measured: −0.007 dB).
    ideal = Coding(block_length_bits=64_800, target_block_error_rate=1e-7, implementation_loss_db=0)
    rate = Fraction(2, 3)
    default = required_esn0_db("16APSK", rate, ideal)
    own = required_esn0_db("16APSK", rate, ideal, ring_ratios=(3.15,))
    assert own != default
    assert abs(own - default) < 0.3
    assert float(cm_capacity("16APSK", 8.0, (3.15,))) != float(cm_capacity("16APSK", 8.0))


def test_unknown_modulation_is_refused() -> None:
    with pytest.raises(ValueError, match="modulation"):
        constellation("3PSK")


@given(modulations, esn0_values, esn0_values)
@settings(max_examples=40, deadline=None)
def test_capacity_monotone_and_below_shannon(mod: Modulation, a: float, b: float) -> None:
    low, high = sorted((a, b))
    c_low, c_high = float(cm_capacity(mod, low)), float(cm_capacity(mod, high))
    assert c_low <= c_high + 2e-5  # interpolation error allowance, measured < 4e-5 spline
    # Shannon: C ≤ log2(1 + SNR) per complex symbol; a 1-D format only uses the in-phase
    # dimension: C ≤ ½·log2(1 + 2·Es/N0).
    snr = 10 ** (high / 10)
    bound = (
        math.log2(1 + snr) if constellation(mod).dimensions == 2 else 0.5 * math.log2(1 + 2 * snr)
    )
    assert c_high <= bound + 1e-6
    assert c_high <= constellation(mod).bits_per_symbol + 1e-12
    assert float(cm_dispersion(mod, high)) >= 0.0


@pytest.mark.parametrize("modulation", [Modulation.PSK8, Modulation.APSK32, Modulation.QAM64])
def test_interpolated_tables_match_direct_quadrature(modulation: Modulation) -> None:
    # Off-grid points: the cubic spline must agree with the direct quadrature (tolerances:
    # 1e-4 bits for C, 5e-4 bits² for V, from the measured spline error of < 4e-5 / 2e-4).
    for esn0_db in (-3.3, 4.5, 11.7, 18.2):
        direct = moments_direct(modulation, esn0_db)
        assert float(cm_capacity(modulation, esn0_db)) == pytest.approx(direct[0], abs=1e-4)
        assert float(cm_dispersion(modulation, esn0_db)) == pytest.approx(direct[1], abs=5e-4)


def test_off_grid_values_are_computed_directly() -> None:
    assert float(cm_capacity("QPSK", 60.0)) == pytest.approx(2.0, abs=1e-12)
    assert float(cm_capacity("QPSK", -40.0)) == pytest.approx(
        10 ** (-4.0) / math.log(2), rel=1e-3
    )  # low-SNR slope of any zero-mean constellation: C ≈ SNR·log2 e (Shannon, first order)


@pytest.mark.parametrize("modulation", [Modulation.PSK8, Modulation.QAM16, Modulation.APSK16])
def test_bicm_at_most_cm(modulation: Modulation) -> None:
    # Caire, Taricco & Biglieri 1998: BICM capacity ≤ CM capacity; with Gray labels it is close
    # (within 0.1 bit at 6 and 12 dB — common practice; at 0 dB our quasi-Gray 16APSK loses
    # 0.11 bit, so the closeness check starts at 6 dB).
    x = np.array([0.0, 6.0, 12.0])
    bicm, cm = bicm_capacity(modulation, x), cm_capacity(modulation, x)
    assert np.all(bicm <= cm + 1e-4)
    assert np.all(cm[1:] - bicm[1:] < 0.1)


def test_bpsk_bicm_equals_cm() -> None:
    # One bit per symbol: BICM and CM are the same quantity.
    x = np.array([-4.0, 1.0, 6.0])
    np.testing.assert_allclose(bicm_capacity("BPSK", x), cm_capacity("BPSK", x), atol=1e-4)


@given(modulations, st.integers(0, len(CODE_RATES) - 2))
@settings(max_examples=30, deadline=None)
def test_threshold_rises_with_code_rate(mod: Modulation, index: int) -> None:
    low, high = CODE_RATES[index], CODE_RATES[index + 1]
    assert required_esn0_db(mod, low) < required_esn0_db(mod, high)


@given(rates)
@settings(max_examples=11, deadline=None)
def test_threshold_rises_with_constellation_size(rate: Fraction) -> None:
    families = (
        ("QPSK", "8PSK"),
        ("16QAM", "64QAM", "256QAM"),
        ("16APSK", "32APSK"),
        ("4PAM", "8PAM"),
    )
    for family in families:
        values = [required_esn0_db(m, rate) for m in family]
        assert values == sorted(values) and len(set(values)) == len(values), family


@given(rates)
@settings(max_examples=11, deadline=None)
def test_qpsk_is_bpsk_plus_3_db(rate: Fraction) -> None:
    # QPSK = two BPSK channels at half energy (Proakis & Salehi §4.3), so at equal code rate
    # the thresholds differ by 10·log10 2 = 3.0103 dB.  The normal approximation's ½·log2 n
    # term differs by ½ bit between n and n/2 uses (the only deviation), worth < 0.01 dB
    # at 16 200 bits.
    gap = required_esn0_db("QPSK", rate) - required_esn0_db("BPSK", rate)
    assert gap == pytest.approx(10 * math.log10(2), abs=0.01)


@given(modulations, rates, st.floats(0.0, 3.0), st.integers(1000, 100_000))
@settings(max_examples=25, deadline=None)
def test_loss_adds_and_longer_blocks_help(
    mod: Modulation, rate: Fraction, loss_db: float, block: int
) -> None:
    base = Coding(block_length_bits=block, implementation_loss_db=0.0)
    lossy = Coding(block_length_bits=block, implementation_loss_db=loss_db)
    longer = Coding(block_length_bits=4 * block, implementation_loss_db=0.0)
    assert required_esn0_db(mod, rate, lossy) == pytest.approx(
        required_esn0_db(mod, rate, base) + loss_db, abs=1e-9
    )
    assert required_esn0_db(mod, rate, longer) < required_esn0_db(mod, rate, base)


@given(modulations)
@settings(max_examples=10, deadline=None)
def test_uncoded_threshold_meets_target(mod: Modulation) -> None:
    coding = Coding(implementation_loss_db=0.0, target_bit_error_rate=1e-6)
    threshold = required_esn0_db(mod, None, coding)
    assert float(bit_error_rate(mod, threshold)) == pytest.approx(1e-6, rel=1e-4)
    # Coding gain: any coded entry at rate ≤ 9/10 needs less than uncoded (common practice).
    assert required_esn0_db(mod, Fraction(9, 10), coding) < threshold


@given(modulations, esn0_values, esn0_values)
@settings(max_examples=30, deadline=None)
def test_error_rates_fall_with_snr(mod: Modulation, a: float, b: float) -> None:
    low, high = sorted((a, b))
    assert float(bit_error_rate(mod, high)) <= float(bit_error_rate(mod, low)) * (1 + 1e-9)
    assert float(symbol_error_rate(mod, high)) <= float(symbol_error_rate(mod, low)) * (1 + 1e-9)
    ser, ber = float(symbol_error_rate(mod, low)), float(bit_error_rate(mod, low))
    bits = constellation(mod).bits_per_symbol
    # Each symbol error costs at least one and at most log2 M bit errors (Proakis & Salehi §4.3)
    assert ser / bits <= ber * (1 + 1e-9) or mod in {"16APSK", "32APSK"}
    assert ber <= ser * (1 + 1e-9)


def test_error_rates_are_vectorised() -> None:
    grid = np.linspace(0.0, 12.0, 7).reshape(7, 1)
    for mod in ALL:
        assert bit_error_rate(mod, grid).shape == (7, 1)
        assert symbol_error_rate(mod, grid).shape == (7, 1)


@given(st.floats(-20, 30), st.floats(0.1, 12))
def test_ebn0_esn0_round_trip(ebn0_db: float, bits: float) -> None:
    assert float(ebn0_from_esn0_db(esn0_from_ebn0_db(ebn0_db, bits), bits)) == pytest.approx(
        ebn0_db, abs=1e-9
    )


def test_catalogue_structure_and_speed() -> None:
    coding = Coding(block_length_bits=12_345, implementation_loss_db=0.7)  # not cached yet
    start = time.perf_counter()
    entries = catalogue(coding)
    cold_s = time.perf_counter() - start
    start = time.perf_counter()
    again = catalogue(coding)
    warm_s = time.perf_counter() - start
    assert again is entries and warm_s < 0.01
    assert cold_s < 10.0  # generous for a loaded CI machine; measured ≈ 1.5 s cold, idle
    assert len(entries) == len(ALL) * (len(CODE_RATES) + 1)
    for entry in entries:
        r = 1.0 if entry.code_rate is None else float(entry.code_rate)
        assert entry.spectral_efficiency_bps_per_hz == pytest.approx(entry.bits_per_symbol * r)
        assert math.isfinite(entry.required_esn0_db)


def test_catalogue_restriction_and_validation() -> None:
    assert {e.modulation for e in catalogue(modulations=["QPSK", "8PSK"])} == {"QPSK", "8PSK"}
    with pytest.raises(ValueError, match="modulations"):
        catalogue(modulations=["7QAM"])
    with pytest.raises(ValueError, match="block_length_bits"):
        catalogue(Coding(block_length_bits=0))
    with pytest.raises(ValueError, match="target_block_error_rate"):
        required_esn0_db("QPSK", Fraction(1, 2), Coding(target_block_error_rate=1.5))
    with pytest.raises(ValueError, match="code_rate"):
        required_esn0_db("QPSK", Fraction(3, 2))
    with pytest.raises(ValueError, match="esn0_db"):
        bit_error_rate("QPSK", float("nan"))
