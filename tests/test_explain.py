"""Why a served carrier is below its target (solver.explain): one small case per limit, worked
by hand beside the assertion, and a property over random solved plans that every stated lift
really lifts the carrier to its target when the plan is evaluated again.

Thresholds and spectral efficiencies of the hand cases are ETSI EN 302 307-1 (DVB-S2) Table 13
(tests/dvbs2_table13.py), given to a profile as a data-sheet table, so the solver uses them
exactly.
"""

from __future__ import annotations

import math
from dataclasses import replace
from fractions import Fraction

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from solver import (
    Block,
    Carrier,
    Demand,
    EquipmentProfile,
    LimitedBy,
    ModcodRow,
    Modulation,
    Objective,
    Plan,
    Problem,
    Shortfall,
    Transmitter,
    equipment,
    explain_shortfalls,
    solve,
)
from solver.candidates import candidate_for
from solver.explain import fill_unused_room
from solver.verify import verify_plan
from tests.dvbs2_table13 import TABLE_13

QPSK_RATES = ("1/4", "1/3", "2/5", "1/2", "3/5", "2/3", "3/4", "4/5", "5/6", "8/9", "9/10")


def _rows(rates: tuple[str, ...]) -> tuple[ModcodRow, ...]:
    """Table 13's QPSK rows as a data sheet: its QEF Es/N0 and its spectral efficiency."""
    return tuple(
        ModcodRow(
            Modulation.QPSK,
            Fraction(rate),
            required_esn0_db=TABLE_13["QPSK", rate][1],
            spectral_efficiency=TABLE_13["QPSK", rate][0],
            label=f"QPSK {rate}",
        )
        for rate in rates
    )


def _profile(rates: tuple[str, ...] = QPSK_RATES, **kw: object) -> EquipmentProfile:
    """A linear radio, one roll-off (0.2), no error-vector floor, Table 13's QPSK rows."""
    return EquipmentProfile(
        name="t13",
        modcods=_rows(rates),
        rolloffs=(0.2,),
        **kw,  # type: ignore[arg-type]
    )


def _problem(
    demands: list[Demand], width_hz: float, profile: EquipmentProfile, **kw: object
) -> Problem:
    block = Block(start_hz=2_000e6, stop_hz=2_000e6 + width_hz, raster_hz=1e3)
    options = {"time_limit_s": 3.0, "num_workers": 1, "profiles": (profile,)} | kw
    return Problem(block=block, demands=tuple(demands), **options)  # type: ignore[arg-type]


def _one(problem: Problem) -> tuple[Plan, Carrier, Shortfall]:
    plan = solve(problem)
    (carrier,) = plan.carriers
    found = explain_shortfalls(problem, plan.carriers)
    return plan, carrier, found[carrier.demand_id]


# ----------------------------------------------------------------------------- hand cases


def test_fixed_esn0_in_a_narrow_block_is_limited_by_spectrum() -> None:
    """Es/N0 8 dB, margin 3 dB: 5 dB to spend.  Table 13: QPSK 4/5 needs 4.68 dB (closes),
    5/6 needs 5.18 dB (does not).  In the 1.2 MHz block at α = 0.2 the carrier runs 1 MBd:
    1e6 × 1.587196 = 1.587 Mbit/s < 3 Mbit/s.  The target at QPSK 4/5 needs
    B = 3e6 / 1.587196 × 1.2 = 2 268 151.9 Hz, so 1 068 151.9 Hz more than the block (the
    leakage at zero gap of this roll-off, 42.5 dB, meets the 30 dB edge limit: no guards)."""
    demand = Demand("d", 1e6, 3e6, esn0_db=8.0, margin_db=3.0, profile="t13")
    problem = _problem([demand], 1.2e6, _profile())
    _, carrier, found = _one(problem)
    assert carrier.config.allocated_bandwidth_hz == pytest.approx(1.2e6)
    assert (carrier.config.modulation, carrier.config.code_rate) == (
        Modulation.QPSK,
        Fraction(4, 5),
    )
    assert found.limited_by is LimitedBy.SPECTRUM
    assert found.also == ()
    needed_hz = 3e6 / 1.587196 * 1.2
    assert found.spectrum_to_target_hz == pytest.approx(needed_hz - 1.2e6, rel=1e-9)
    # 3 Mbit/s in 1.2 MHz needs 3 bit/symbol: no QPSK entry, at any Es/N0
    assert found.esn0_to_target_db is None
    assert found.symbol_rate_needed_baud is None


def test_power_limited_demand_at_its_link_limit_is_limited_by_link() -> None:
    """C/N0 70 dBHz, margin 3 dB, target 8 Mbit/s: Eb/N0 = 70 − 3 − 10·log10(8e6) = −2.03 dB,
    below the Shannon limit of −1.59 dB (ln 2; any textbook), so no MODCOD at any width carries
    the target.  Table 13 at the link limit Rs = 10^((70 − 3 − Es/N0)/10): QPSK 1/3 carries
    10^(6.824) × 0.656448 = 4.38 Mbit/s, the most of any row.  In the carrier's own width the
    target needs η ≥ 8e6 / Rs; the cheapest Table 13 row that gives it sets the Es/N0 needed:
    its threshold + 3 dB."""
    eb_n0_db = 70.0 - 3.0 - 10 * math.log10(8e6)
    assert eb_n0_db < 10 * math.log10(math.log(2))  # −1.59 dB
    demand = Demand("d", 1e6, 8e6, cn0_dbhz=70.0, margin_db=3.0, profile="t13")
    problem = _problem([demand], 20e6, _profile())
    _, carrier, found = _one(problem)
    best = max(
        10 ** ((67.0 - TABLE_13["QPSK", r][1]) / 10) * TABLE_13["QPSK", r][0] for r in QPSK_RATES
    )
    assert best == pytest.approx(4.38e6, rel=1e-3)
    assert carrier.config.throughput_bps <= best * (1 + 1e-9)
    assert found.limited_by is LimitedBy.LINK
    assert found.spectrum_to_target_hz is None
    rate = carrier.config.allocated_bandwidth_hz / 1.2
    thresholds = [
        TABLE_13["QPSK", r][1] for r in QPSK_RATES if TABLE_13["QPSK", r][0] * rate >= 8e6
    ]
    assert found.esn0_to_target_db == pytest.approx(min(thresholds) + 3.0, abs=1e-9)


def test_symbol_rate_maximum_is_an_equipment_limit() -> None:
    """Es/N0 8 dB, margin 3: QPSK 4/5 is the best row that closes (4.68 + 3 ≤ 8 < 5.18 + 3).
    Its profile stops at 1 MBd (1 kBd steps): 1.587 Mbit/s.  The 3 Mbit/s target needs
    3e6 / 1.587196 = 1 890 125.7 Bd, 1 891 000 Bd on the grid; the 10 MHz block has room."""
    demand = Demand("d", 1e6, 3e6, esn0_db=8.0, margin_db=3.0, profile="t13")
    radio = _profile(symbol_rate_max_baud=1e6, symbol_rate_step_baud=1e3)
    _, carrier, found = _one(_problem([demand], 10e6, radio))
    assert carrier.config.symbol_rate_baud == pytest.approx(1e6)
    assert found.limited_by is LimitedBy.EQUIPMENT
    assert found.symbol_rate_needed_baud == pytest.approx(math.ceil(3e6 / 1.587196 / 1e3) * 1e3)
    assert found.spectrum_to_target_hz is None
    assert found.also == ()


def test_short_table_with_link_to_spare_is_limited_by_modcod_table() -> None:
    """Es/N0 20 dB, margin 3, but the table holds only QPSK 1/2 (Table 13: 1.0 dB,
    η 0.988858): in the 1.2 MHz block (1 MBd) it carries 0.989 Mbit/s.  3 Mbit/s in that width
    needs 3 bit/symbol, which 16QAM 4/5 (4 × 0.8 × 0.98 = 3.14 bit/symbol) gives at well under
    the 17 dB left; more spectrum at QPSK 1/2 would also do: 3e6 / 0.988858 × 1.2 − 1.2e6."""
    demand = Demand("d", 0.5e6, 3e6, esn0_db=20.0, margin_db=3.0, profile="t13")
    problem = _problem([demand], 1.2e6, _profile(rates=("1/2",)))
    _, _, found = _one(problem)
    assert found.limited_by is LimitedBy.MODCOD_TABLE
    assert found.also == (LimitedBy.SPECTRUM,)
    assert found.spectrum_to_target_hz == pytest.approx(3e6 / 0.988858 * 1.2 - 1.2e6, rel=1e-9)


def test_room_left_by_the_objective_is_unused_room() -> None:
    """min_bandwidth serves the minimum rate and leaves the rest of the 10 MHz block free: the
    target's QPSK 4/5 carrier (2.27 MHz, hand as above) fits beside it, so nothing but the
    objective holds it back: no extra spectrum is needed."""
    demand = Demand("d", 1e6, 3e6, esn0_db=8.0, margin_db=3.0, profile="t13")
    problem = _problem([demand], 10e6, _profile(), objective=Objective.MIN_BANDWIDTH)
    _, carrier, found = _one(problem)
    assert carrier.config.throughput_bps < 3e6
    assert found.limited_by is LimitedBy.UNUSED_ROOM
    assert found.spectrum_to_target_hz == 0.0
    assert found.widened is not None
    assert found.widened.config.allocated_bandwidth_hz == pytest.approx(3e6 / 1.587196 * 1.2)


def test_a_carrier_with_unused_room_is_moved_to_its_target() -> None:
    """The min_bandwidth plan above, handed to the max_throughput polish: the carrier takes
    the target's QPSK 4/5 configuration in the room it has, and the plan still verifies; a
    demand the caller keeps does not move."""
    demand = Demand("d", 1e6, 3e6, esn0_db=8.0, margin_db=3.0, profile="t13")
    narrow = _problem([demand], 10e6, _profile(), objective=Objective.MIN_BANDWIDTH)
    plan = solve(narrow)
    wide = replace(narrow, objective=Objective.MAX_THROUGHPUT)
    (filled,) = fill_unused_room(wide, plan.carriers, (), math.inf)
    assert filled.config.throughput_bps == pytest.approx(3e6, rel=1e-3)
    assert (filled.config.modulation, filled.config.code_rate) == (Modulation.QPSK, Fraction(4, 5))
    assert verify_plan(wide, [filled]).passed
    assert fill_unused_room(wide, plan.carriers, {"d"}, math.inf) == plan.carriers


def test_loud_pinned_neighbour_is_a_neighbour_limit() -> None:
    """A carrier 40 dB louder (relative level; QPSK 4/5 at 1 MBd, 1.2 MHz wide), pinned so that
    2.30 MHz lie free below it: the
    target's QPSK 4/5 carrier, 3e6 / 1.587196 × 1.2 = 2 268 151.9 Hz wide, fits there by its own
    leakage limit (42.5 dB at zero gap for α = 0.2 meets 30 dB: no guard), but placed there the
    loud neighbour's skirt breaks its interference allowance, so the plan keeps it narrower."""
    start = 2_000e6
    low = Demand("low", 0.2e6, 3e6, esn0_db=8.0, margin_db=3.0, profile="t13")
    loud = Demand(
        "loud", 1.587196e6, 1.587196e6, esn0_db=8.0, margin_db=3.0, profile="t13",
        relative_level_db=40.0, pinned_center_hz=start + 2.30e6 + 0.6e6,
    )  # fmt: skip
    problem = _problem([low, loud], 4e6, _profile())
    plan = solve(problem)
    found = explain_shortfalls(problem, plan.carriers)
    carrier = next(c for c in plan.carriers if c.demand_id == "low")
    pinned = next(c for c in plan.carriers if c.demand_id == "loud")
    assert pinned.lower_edge_hz - start == pytest.approx(2.30e6)
    assert 3e6 / 1.587196 * 1.2 < 2.30e6
    assert carrier.config.throughput_bps < 3e6
    assert found["low"].limited_by is LimitedBy.NEIGHBOUR
    assert found["low"].spectrum_to_target_hz is not None
    assert found["low"].spectrum_to_target_hz > 0
    assert "interference" in found["low"].detail


# ----------------------------------------------------------------------------- property

CAPPED = EquipmentProfile(
    "capped", symbol_rate_max_baud=1.5e6, symbol_rate_step_baud=1e3, rolloffs=(0.1, 0.2, 0.35)
)
"""A radio with a symbol-rate maximum, so that random plans meet the equipment limit too."""

random_demand = st.builds(
    lambda lo, ratio, link, fixed, prio, margin, capped: Demand(
        id="",
        min_rate_bps=lo,
        target_rate_bps=lo * ratio,
        priority=prio,
        cn0_dbhz=None if fixed else link + 55.0,
        esn0_db=link - 5.0 if fixed else None,
        margin_db=margin,
        profile="capped" if capped else "",
    ),
    st.floats(200e3, 3e6),
    st.floats(1.0, 5.0),
    st.floats(5.0, 25.0),
    st.booleans(),
    st.integers(1, 3),
    st.floats(0.0, 4.0),
    st.booleans(),
)


def _random_problem(demands: list[Demand], objective: Objective) -> Problem:
    block = Block(start_hz=1_000e6, stop_hz=1_008e6, raster_hz=10e3)
    return Problem(
        block=block,
        demands=tuple(replace(d, id=f"d{i}") for i, d in enumerate(demands)),
        transmitter=Transmitter(filter_span_symbols=12, rolloffs=(0.05, 0.1, 0.2, 0.35)),
        objective=objective,
        time_limit_s=2.0,
        num_workers=1,
        profiles=(CAPPED,),
    )


def _with_spectrum_above(
    problem: Problem, carriers: tuple[Carrier, ...], below: Carrier, extra_hz: float
) -> tuple[Problem, list[Carrier]]:
    """``extra_hz`` of spectrum inserted at ``below``'s upper edge: the block's upper edge and
    every carrier and exclusion above it move up by that much; ``below`` itself is left out."""
    cut = below.upper_edge_hz
    block = problem.block
    moved = tuple(
        replace(x, start_hz=x.start_hz + extra_hz, stop_hz=x.stop_hz + extra_hz)
        if x.start_hz >= cut
        else x
        for x in block.exclusions
    )
    block = replace(block, stop_hz=block.stop_hz + extra_hz, exclusions=moved)
    others = [
        replace(c, center_hz=c.center_hz + extra_hz) if c.center_hz > below.center_hz else c
        for c in carriers
        if c.demand_id != below.demand_id
    ]
    return replace(problem, block=block), others


def _check_more_spectrum(problem: Problem, plan: Plan, carrier: Carrier, found: Shortfall) -> None:
    """With the stated extra spectrum above it, the carrier at its target fits between what
    lies below it and what now lies above it, and the whole plan passes verification."""
    assert found.spectrum_to_target_hz is not None and found.widened is not None
    target = next(d for d in problem.demands if d.id == carrier.demand_id).target_rate_bps
    wider, others = _with_spectrum_above(
        problem, plan.carriers, carrier, found.spectrum_to_target_hz
    )
    widened = found.widened
    assert widened.config.throughput_bps >= target * (1 - 1e-9)
    lower_wall = max(
        [wider.block.start_hz]
        + [c.upper_edge_hz for c in others if c.center_hz < carrier.center_hz]
        + [x.stop_hz for x in wider.block.exclusions if x.stop_hz <= carrier.lower_edge_hz + 1e-6]
    )
    upper_wall = min(
        [wider.block.stop_hz]
        + [c.lower_edge_hz for c in others if c.center_hz > carrier.center_hz]
        + [x.start_hz for x in wider.block.exclusions if x.start_hz >= carrier.upper_edge_hz]
    )
    assert lower_wall - 1e-6 <= widened.lower_edge_hz
    assert widened.upper_edge_hz <= upper_wall + 1e-6
    assert verify_plan(wider, [*others, widened]).passed


def _check_more_esn0(problem: Problem, carrier: Carrier, found: Shortfall) -> None:
    """With the demand's link raised to the stated Es/N0 (a C/N0 link to that Es/N0 at the
    carrier's symbol rate; 1e-6 dB added for round-off), some configuration of its profile
    closes and carries the target in the carrier's current allocated width."""
    assert found.esn0_to_target_db is not None
    demand = next(d for d in problem.demands if d.id == carrier.demand_id)
    raised = found.esn0_to_target_db + 1e-6
    if demand.cn0_dbhz is not None:
        now = demand.cn0_dbhz - 10 * math.log10(carrier.config.symbol_rate_baud)
        stronger = replace(
            demand, cn0_dbhz=raised + 10 * math.log10(carrier.config.symbol_rate_baud)
        )
    else:
        now = demand.esn0_db if demand.esn0_db is not None else -math.inf
        stronger = replace(demand, esn0_db=raised)
    assert found.esn0_to_target_db > now
    profile = equipment.profile_for(problem, demand)
    width = carrier.config.allocated_bandwidth_hz
    lifted = []
    for entry in equipment.modcod_table(profile, problem.coding, tuple(demand.modulations)):
        for rolloff in profile.rolloffs:
            rate = min(width / (1 + rolloff), profile.symbol_rate_max_baud)
            if profile.symbol_rate_step_baud > 0:
                rate = (
                    math.floor(rate / profile.symbol_rate_step_baud + 1e-9)
                    * profile.symbol_rate_step_baud
                )
            for option in equipment.backoff_options(profile):
                cand = candidate_for(
                    problem, stronger, entry.modulation, entry.code_rate, rolloff, rate,
                    output_backoff_db=option.output_backoff_db,
                )  # fmt: skip
                if cand is not None:
                    lifted.append(cand.throughput_bps)
    assert max(lifted, default=0.0) >= demand.target_rate_bps * (1 - 1e-9)


def _check_faster(problem: Problem, carrier: Carrier, found: Shortfall) -> None:
    """The stated symbol rate lies above the profile's maximum, and at it some entry of the
    profile closes the link and carries the target."""
    assert found.symbol_rate_needed_baud is not None
    demand = next(d for d in problem.demands if d.id == carrier.demand_id)
    profile = equipment.profile_for(problem, demand)
    assert found.symbol_rate_needed_baud > profile.symbol_rate_max_baud
    carried = [
        cand.throughput_bps
        for entry in equipment.modcod_table(profile, problem.coding, tuple(demand.modulations))
        if (
            cand := candidate_for(
                problem,
                demand,
                entry.modulation,
                entry.code_rate,
                profile.rolloffs[0],
                found.symbol_rate_needed_baud,
            )
        )
        is not None
    ]
    assert max(carried, default=0.0) >= demand.target_rate_bps * (1 - 1e-9)


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(random_demand, min_size=1, max_size=5),
    st.sampled_from([Objective.MAX_THROUGHPUT, Objective.MIN_BANDWIDTH]),
)
def test_every_carrier_below_target_has_a_reason_and_its_lifts_lift_it(
    demands: list[Demand], objective: Objective
) -> None:
    """Properties over random solved plans: exactly the carriers below target are explained,
    every unserved demand keeps its reason, and each stated lift, applied, lets the carrier
    reach its target when evaluated again (by verification, or by the candidate code)."""
    problem = _random_problem(demands, objective)
    plan = solve(problem)
    found = explain_shortfalls(problem, plan.carriers)
    targets = {d.id: d.target_rate_bps for d in problem.demands}
    below = {
        c.demand_id
        for c in plan.carriers
        if c.config.throughput_bps < targets[c.demand_id] * (1 - 1e-6)
    }
    assert set(found) == below
    assert all(u.detail for u in plan.unserved)
    for carrier in plan.carriers:
        reason = found.get(carrier.demand_id)
        if reason is None:
            continue
        assert reason.detail and reason.limited_by not in reason.also
        if reason.spectrum_to_target_hz is not None:
            _check_more_spectrum(problem, plan, carrier, reason)
        if reason.esn0_to_target_db is not None:
            _check_more_esn0(problem, carrier, reason)
        if reason.symbol_rate_needed_baud is not None:
            _check_faster(problem, carrier, reason)
