"""The independent verifier on hand-placed carriers: placements it must report rather than
crash on, and edge leakage that a carrier in between must not hide.

The leakage figures a check depends on are recomputed here from the textbook root-raised-cosine
impulse response with numpy, without the solver's pulse or emission code.
"""

from __future__ import annotations

from dataclasses import replace
from fractions import Fraction
from typing import Literal

import numpy as np
import numpy.typing as npt
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver import (
    Block,
    Carrier,
    CarrierConfig,
    Demand,
    Exclusion,
    Modulation,
    Problem,
    Transmitter,
    verify_plan,
)
from solver.candidates import candidate_for
from solver.verify import ViolationKind

ROLLOFF = 0.2
SPAN_SYMBOLS = 12
WIDE_RATE_BAUD = 5e6
NARROW_RATE_BAUD = 0.1e6
BLOCK_START_HZ, BLOCK_STOP_HZ = 100e6, 120e6
EDGE_LIMIT_DB = 50.0
LEAKAGE_LIMIT_DB = 20.0
EXCLUSION = Exclusion(109.0e6, 111.0e6, "radio astronomy")

DEMANDS = (
    Demand(id="wide", min_rate_bps=1e6, target_rate_bps=20e6, esn0_db=20.0),
    Demand(id="narrow", min_rate_bps=5e4, target_rate_bps=1e6, esn0_db=20.0),
)


def _problem(*exclusions: Exclusion) -> Problem:
    block = Block(
        start_hz=BLOCK_START_HZ,
        stop_hz=BLOCK_STOP_HZ,
        raster_hz=1e3,
        exclusions=exclusions,
        edge_leakage_limit_db=EDGE_LIMIT_DB,
    )
    transmitter = Transmitter(filter_span_symbols=SPAN_SYMBOLS, rolloffs=(ROLLOFF,))
    return Problem(
        block=block, demands=DEMANDS, transmitter=transmitter, leakage_limit_db=LEAKAGE_LIMIT_DB
    )


def _config(problem: Problem, demand_id: str, rate_baud: float) -> CarrierConfig:
    demand = next(d for d in problem.demands if d.id == demand_id)
    cand = candidate_for(problem, demand, Modulation.QPSK, Fraction(1, 2), ROLLOFF, rate_baud)
    assert cand is not None, "QPSK 1/2 closes at Es/N0 = 20 dB"
    return cand.config


# --- an independent leakage ratio -------------------------------------------------------------


def _rrc(t: npt.NDArray[np.float64], alpha: float) -> npt.NDArray[np.float64]:
    """Root-raised-cosine impulse response, t in symbol periods.

    h(t) = [sin(πt(1−α)) + 4αt·cos(πt(1+α))] / [πt(1 − (4αt)²)], with its limits at t = 0 and
    t = ±1/(4α): Proakis & Salehi, *Digital Communications* 5th ed. §9.2; the same closed form
    as 3GPP TS 25.104 §6.8.1 (check-values.md §6).
    """
    out = np.empty_like(t)
    at_zero = np.isclose(t, 0.0, atol=1e-12)
    at_quarter = np.isclose(np.abs(t), 1.0 / (4.0 * alpha), atol=1e-12)
    regular = ~(at_zero | at_quarter)
    tr = t[regular]
    out[regular] = (
        np.sin(np.pi * tr * (1 - alpha)) + 4 * alpha * tr * np.cos(np.pi * tr * (1 + alpha))
    ) / (np.pi * tr * (1 - (4 * alpha * tr) ** 2))
    out[at_zero] = 1 - alpha + 4 * alpha / np.pi
    quarter = np.pi / (4 * alpha)
    out[at_quarter] = (
        alpha / np.sqrt(2) * ((1 + 2 / np.pi) * np.sin(quarter) + (1 - 2 / np.pi) * np.cos(quarter))
    )
    return out


def independent_leakage_ratio_db(gap_rs: float) -> float:
    """Own-band over adjacent-band power (dB) of the truncated RRC carrier, the adjacent band
    of the carrier's nominal width (1 + α)·Rs starting ``gap_rs`` symbol rates beyond its
    nominal edge.

    Ratio as defined for ACLR by 3GPP TS 38.104 §6.6.3 (check-values.md §4).  Taps span
    ±SPAN_SYMBOLS/2 symbols at 32 samples per symbol (the transmitter model's sampling); the
    power spectrum is |FFT|² zero-padded to 2**18 bins and summed over each band.
    """
    samples_per_symbol = 32
    half_span = SPAN_SYMBOLS * samples_per_symbol // 2
    taps = _rrc(np.arange(-half_span, half_span + 1) / samples_per_symbol, ROLLOFF)
    n_fft = 1 << 18
    power = np.abs(np.fft.fft(taps, n_fft)) ** 2
    freq_rs = np.fft.fftfreq(n_fft, 1.0 / samples_per_symbol)
    width = 1.0 + ROLLOFF
    own = power[np.abs(freq_rs) <= width / 2].sum()
    lo = width / 2 + gap_rs
    adjacent = power[(freq_rs >= lo) & (freq_rs <= lo + width)].sum()
    return float(10.0 * np.log10(own / adjacent))


# --- defect: a carrier outside the block -------------------------------------------------------


@pytest.mark.parametrize(
    "center_hz",
    [
        BLOCK_STOP_HZ - 1e6,  # upper edge 2 MHz past the block's top
        BLOCK_STOP_HZ + 10e6,  # wholly above the block
        BLOCK_START_HZ + 1e6,  # lower edge 2 MHz below the block's bottom
        BLOCK_START_HZ - 10e6,  # wholly below the block
    ],
)
def test_a_carrier_outside_the_block_is_reported_not_raised(center_hz: float) -> None:
    problem = _problem()
    carrier = Carrier(_config(problem, "wide", WIDE_RATE_BAUD), center_hz, 0.0, 0.0)
    check = verify_plan(problem, [carrier])
    assert not check.passed
    assert [v.kind for v in check.violations] == [ViolationKind.OUTSIDE_BLOCK]
    assert check.violations[0].demand_id == "wide"


def test_a_carrier_across_an_exclusion_edge_is_reported() -> None:
    problem = _problem(EXCLUSION)
    carrier = Carrier(_config(problem, "wide", WIDE_RATE_BAUD), EXCLUSION.start_hz, 0.0, 0.0)
    check = verify_plan(problem, [carrier])
    assert [v.kind for v in check.violations] == [ViolationKind.IN_EXCLUSION]
    assert EXCLUSION.note in check.violations[0].detail


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(BLOCK_START_HZ - 15e6, BLOCK_STOP_HZ + 15e6), min_size=1, max_size=4))
def test_any_placement_is_verified_without_an_exception(centers_hz: list[float]) -> None:
    """Property: whatever the placement, the verifier answers, and every carrier that leaves
    the block is reported as outside it."""
    problem = _problem(EXCLUSION)
    config = _config(problem, "wide", WIDE_RATE_BAUD)
    carriers = [Carrier(config, c, 0.0, 0.0) for c in centers_hz]  # one demand id is enough
    check = verify_plan(problem, carriers)
    outside = sum(
        c.lower_edge_hz < BLOCK_START_HZ - 1e-6 or c.upper_edge_hz > BLOCK_STOP_HZ + 1e-6
        for c in carriers
    )
    reported = sum(v.kind is ViolationKind.OUTSIDE_BLOCK for v in check.violations)
    assert reported == outside


# --- defect: a carrier in between hides another's edge leakage ---------------------------------

Where = Literal["upper edge", "lower edge", "exclusion from below", "exclusion from above"]
PLACES: dict[Where, tuple[float, Literal["below", "above"], str]] = {
    # boundary frequency, the side of the wide carrier it lies on, its name in the detail
    "upper edge": (BLOCK_STOP_HZ, "above", "upper block edge"),
    "lower edge": (BLOCK_START_HZ, "below", "lower block edge"),
    "exclusion from below": (EXCLUSION.start_hz, "above", "exclusion (radio astronomy)"),
    "exclusion from above": (EXCLUSION.stop_hz, "below", "exclusion (radio astronomy)"),
}


def _wide_narrow_and_boundary(where: Where, gap_rs: float) -> tuple[Problem, Carrier, Carrier, str]:
    """The wide carrier ``gap_rs`` symbol rates from the boundary, the narrow one centred in
    that gap."""
    problem = _problem(EXCLUSION)
    boundary_hz, side, name = PLACES[where]
    wide_cfg = _config(problem, "wide", WIDE_RATE_BAUD)
    narrow_cfg = _config(problem, "narrow", NARROW_RATE_BAUD)
    gap_hz = gap_rs * WIDE_RATE_BAUD
    sign = -1.0 if side == "above" else 1.0
    wide_center = boundary_hz + sign * (gap_hz + wide_cfg.allocated_bandwidth_hz / 2)
    wide = Carrier(wide_cfg, wide_center, 0.0, 0.0)
    narrow = Carrier(narrow_cfg, boundary_hz + sign * gap_hz / 2, 0.0, 0.0)
    return problem, wide, narrow, name


@pytest.mark.parametrize("where", list(PLACES))
def test_a_narrow_carrier_in_between_does_not_hide_edge_leakage(where: Where) -> None:
    gap_rs = 0.1
    # Independent figure: 49.19 dB at 0.1 Rs (numpy, above), below the 50 dB edge limit.
    ratio_db = independent_leakage_ratio_db(gap_rs)
    assert ratio_db < EDGE_LIMIT_DB - 0.5
    problem, wide, narrow, name = _wide_narrow_and_boundary(where, gap_rs)
    # The narrow carrier really lies between the wide one and the boundary.
    assert abs(narrow.center_hz - PLACES[where][0]) < abs(wide.center_hz - PLACES[where][0])

    check = verify_plan(problem, [wide, narrow])

    edge = [v for v in check.violations if v.kind is ViolationKind.EDGE_LEAKAGE]
    assert [v.demand_id for v in edge] == ["wide"]
    assert name in edge[0].detail
    assert f"{ratio_db:.1f} dB" in edge[0].detail  # the verifier's figure, to its 0.1 dB
    assert edge[0].needed_db == EDGE_LIMIT_DB
    # Nothing else is wrong with the plan: the narrow carrier is protected and protects.
    assert {v.kind for v in check.violations} == {ViolationKind.EDGE_LEAKAGE}


@pytest.mark.parametrize("where", list(PLACES))
def test_edge_leakage_within_the_limit_passes_with_a_carrier_in_between(where: Where) -> None:
    gap_rs = 0.2
    # Independent figure: 51.97 dB at 0.2 Rs, above the 50 dB edge limit.
    assert independent_leakage_ratio_db(gap_rs) > EDGE_LIMIT_DB + 0.5
    problem, wide, narrow, _ = _wide_narrow_and_boundary(where, gap_rs)
    assert verify_plan(problem, [wide, narrow]).passed


def test_the_ratio_filled_in_faces_the_nearest_neighbour() -> None:
    problem, wide, narrow, _ = _wide_narrow_and_boundary("upper edge", 0.2)
    by_id = {c.demand_id: c for c in verify_plan(problem, [wide, narrow]).carriers}
    # The wide carrier's upper side faces the narrow one: half the 0.2 Rs gap less half the
    # narrow carrier's width (120 kHz = 0.024 Rs), 0.088 Rs.  Tolerance 0.05 dB: the two
    # computations sum the same |FFT|² differently (interpolated cumulative sums there).
    toward_narrow_rs = (narrow.lower_edge_hz - wide.upper_edge_hz) / WIDE_RATE_BAUD
    assert by_id["wide"].leakage_ratio_above_db == pytest.approx(
        independent_leakage_ratio_db(toward_narrow_rs), abs=0.05
    )


def test_interference_counts_every_emitter_in_reach_with_its_whole_spectrum() -> None:
    """C/I of a narrow carrier between two wide ones (seven more farther off), recomputed
    here over the victim's whole matched-filter grid from each emitter's spectrum profile (no
    windowing, no neighbour search): the verifier, which integrates each interferer only where
    its profile is defined and looks only at emitters within reach, must agree to 1e-9 dB."""
    from solver.physics import emission

    wide, narrow_demand = DEMANDS
    problem = replace(
        _problem(),
        demands=(
            replace(wide, id="wide-a"),
            replace(narrow_demand, id="narrow"),
            replace(wide, id="wide-b"),
            replace(narrow_demand, id="far"),
            *(replace(narrow_demand, id=f"extra-{k}") for k in range(6)),
        ),
    )

    def carrier(demand_id: str, center_hz: float, rate_baud: float) -> Carrier:
        return Carrier(_config(problem, demand_id, rate_baud), center_hz, 0.0, 0.0)

    wide_a = carrier("wide-a", 104.0e6, WIDE_RATE_BAUD)
    narrow = carrier("narrow", 107.2e6, NARROW_RATE_BAUD)
    wide_b = carrier("wide-b", 110.5e6, WIDE_RATE_BAUD)
    far = carrier("far", 119.0e6, NARROW_RATE_BAUD)
    # More than a handful, so the verifier's search for emitters in reach is what runs.
    extras = [carrier(f"extra-{k}", 113.0e6 + k * 1e6, NARROW_RATE_BAUD) for k in range(6)]
    placed = [wide_a, narrow, wide_b, far, *extras]
    checked = {c.center_hz: c for c in verify_plan(problem, placed).carriers}

    def key(c: Carrier, linear: bool = False) -> emission.EmissionKey:
        tx = problem.transmitter
        return emission.EmissionKey.for_carrier(
            tx, c.config.modulation, c.config.rolloff, linear=linear
        )

    matched = emission.get_profile(key(narrow, linear=True))
    rs = narrow.config.symbol_rate_baud
    freq = narrow.center_hz + matched.freq * rs
    response = matched.psd / float(matched.psd_at(np.zeros(1))[0])

    def received(c: Carrier) -> float:
        density = emission.get_profile(key(c)).psd_at(
            (freq - c.center_hz) / c.config.symbol_rate_baud
        )
        return float(np.trapezoid(density * response, freq))

    signal = received(narrow)
    interference = sum(received(c) for c in placed if c is not narrow)
    expected = 10.0 * np.log10(signal / interference)
    assert checked[107.2e6].c_over_i_db == pytest.approx(expected, abs=1e-9)


# --- the remembered couplings change no figure ---------------------------------------------------


@settings(max_examples=15, deadline=None)
@given(st.floats(-1.5e6, 1.5e6), st.floats(-10.0, 10.0), st.floats(-3e6, 3e6))
def test_a_plan_verified_from_memory_matches_one_verified_afresh(
    offset_hz: float, level_db: float, shift_hz: float
) -> None:
    """Property: the power one carrier puts through another's filter is remembered by the two
    carriers' shapes, levels and offset; a plan moved as a whole, or with a neighbour at another
    level, verified with that memory warm, reports exactly what it reports with it empty."""
    import solver.verify as verify

    problem = _problem()
    wide = _config(problem, "wide", WIDE_RATE_BAUD)
    narrow = _config(problem, "narrow", NARROW_RATE_BAUD)
    centre = (BLOCK_START_HZ + BLOCK_STOP_HZ) / 2
    carriers = [
        Carrier(wide, centre, 0.0, 0.0),
        Carrier(narrow, centre + 3e6 + offset_hz, 0.0, 0.0),
    ]
    verify_plan(problem, carriers)  # warms the memory
    louder = replace(
        problem,
        demands=(DEMANDS[0], replace(DEMANDS[1], relative_level_db=level_db)),
    )
    for prob, plan in (
        (problem, [replace(c, center_hz=c.center_hz + shift_hz) for c in carriers]),
        (louder, carriers),
    ):
        warm = verify_plan(prob, plan)
        verify._COUPLING.clear()
        cold = verify_plan(prob, plan)
        assert warm.passed == cold.passed
        for a, b in zip(warm.carriers, cold.carriers, strict=True):
            assert a.c_over_i_db == pytest.approx(b.c_over_i_db, rel=1e-9, abs=1e-9)
            assert a.margin_after_interference_db == pytest.approx(
                b.margin_after_interference_db, rel=1e-9, abs=1e-9
            )
