"""Candidate families: every member closes its link and meets its minimum rate; pruning is sound."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver import Block, Demand, Modulation, Objective, Problem, Transmitter, equipment
from solver.candidates import _family_front, build_candidates, candidate_for
from solver.physics import modcod
from solver.physics.link import esn0_from_cn0_db

TX = Transmitter(filter_span_symbols=12, rolloffs=(0.05, 0.2, 0.35))
BLOCK = Block(start_hz=2_000e6, stop_hz=2_050e6, raster_hz=25e3)


def _problem(demand: Demand, objective: Objective = Objective.MAX_THROUGHPUT) -> Problem:
    return Problem(block=BLOCK, demands=(demand,), transmitter=TX, objective=objective)


demands = st.builds(
    lambda lo, ratio, fixed, link, margin: Demand(
        id="d",
        min_rate_bps=lo,
        target_rate_bps=lo * ratio,
        cn0_dbhz=None if fixed else link + 55.0,
        esn0_db=link - 5.0 if fixed else None,
        margin_db=margin,
    ),
    st.floats(100e3, 5e6),
    st.floats(1.0, 5.0),
    st.booleans(),
    st.floats(0.0, 30.0),
    st.floats(0.0, 5.0),
)


@settings(max_examples=40, deadline=None)
@given(demands, st.sampled_from(list(Objective)))
def test_every_member_closes_its_link_and_meets_the_minimum(
    demand: Demand, objective: Objective
) -> None:
    problem = _problem(demand, objective)
    options = build_candidates(problem, demand)
    if not options.candidates:
        assert options.best_link_detail
    for fam in options.candidates:
        for half in {fam.lo_half, (fam.lo_half + fam.hi_half) // 2, fam.hi_half}:
            c = fam.at(half).config
            assert c.throughput_bps >= demand.min_rate_bps * (1 - 1e-9)
            assert c.throughput_bps <= demand.target_rate_bps * (1 + 1e-9)
            if demand.cn0_dbhz is not None:
                # Es/N0 = C/N0 − 10·log10(Rs) (DESIGN.md, Link)
                assert math.isclose(
                    c.esn0_db, esn0_from_cn0_db(demand.cn0_dbhz, c.symbol_rate_baud)
                )
            assert c.esn0_db - c.required_esn0_db >= demand.margin_db - 1e-9
            # The allocated width never exceeds the raster slot it is given.
            assert c.allocated_bandwidth_hz <= 2 * half * BLOCK.raster_hz * (1 + 1e-9)


@settings(max_examples=30, deadline=None)
@given(demands)
def test_width_grid_loses_under_one_percent(demand: Demand) -> None:
    """A carrier loses less than one even raster step of its slot, under 1 % once the slot is
    200 raster steps or more (the raster itself sets the finest grid)."""
    options = build_candidates(_problem(demand), demand)
    for fam in options.candidates:
        for half in (fam.lo_half, fam.hi_half):
            slot = 2 * half * BLOCK.raster_hz
            lost = slot - fam.at(half).config.allocated_bandwidth_hz
            assert -1e-9 * slot <= lost < 2 * BLOCK.raster_hz * (1 + 1e-9)  # to rounding, as above
            if half >= 100:
                assert lost / slot < 0.01


def test_fixed_link_keeps_only_the_most_efficient_family() -> None:
    # With Es/N0 fixed, every family spans min→target; the one with the lowest spectral cost
    # per bit covers all others, so one family (or ties) survives the pruning.
    demand = Demand(id="f", min_rate_bps=1e6, target_rate_bps=4e6, esn0_db=14.0, margin_db=2.0)
    families = build_candidates(_problem(demand), demand).candidates
    assert 1 <= len(families) <= 3
    best = families[-1].config
    # Its modulation and rate is the most efficient entry that closes at 14 - 2 = 12 dB.
    problem = _problem(demand)
    table = equipment.modcod_table(equipment.profile_for(problem, demand), problem.coding)
    top_efficiency = max(e.net_bits_per_symbol for e in table if e.required_esn0_db <= 12.0)
    assert best.throughput_bps / best.symbol_rate_baud == pytest.approx(top_efficiency, rel=1e-9)


def test_no_link_explains_itself() -> None:
    demand = Demand(id="weak", min_rate_bps=5e6, target_rate_bps=5e6, cn0_dbhz=50.0)
    options = build_candidates(_problem(demand), demand)
    assert options.candidates == ()
    assert "no modulation closes the link" in options.best_link_detail


def test_candidate_for_rejects_a_setting_that_no_longer_closes() -> None:
    demand = Demand(id="r", min_rate_bps=1e6, target_rate_bps=2e6, esn0_db=10.0, margin_db=1.0)
    problem = _problem(demand)
    assert (
        candidate_for(problem, demand, Modulation.QPSK, None, 0.2, 1e6) is None
    )  # uncoded QPSK needs ~13.5 dB
    ok = candidate_for(problem, demand, Modulation.QPSK, modcod.CODE_RATES[3], 0.2, 1.5e6)
    assert ok is not None
    assert ok.config.throughput_bps >= demand.min_rate_bps


@settings(max_examples=15, deadline=None)
@given(
    rate=st.floats(0.1e6, 5e6),
    link=st.floats(8.0, 24.0),
    power=st.booleans(),
    margin=st.floats(0.0, 4.0),
)
def test_narrowest_at_min_rate_is_the_narrowest_of_every_configuration(
    rate: float, link: float, power: bool, margin: float
) -> None:
    """Property: the greedy peer's shortlist (every combination sized at once) starts with the
    configuration that a one-by-one search over the demand's whole MODCOD table × roll-offs finds
    narrowest (allocated width plus guard)."""
    from solver.candidates import narrowest_at_min_rate

    demand = Demand(
        id="d",
        min_rate_bps=rate,
        target_rate_bps=2 * rate,
        cn0_dbhz=link + 60.0 if power else None,
        esn0_db=None if power else link,
        margin_db=margin,
    )
    problem = Problem(
        block=Block(1_000e6, 1_040e6, 10e3),
        demands=(demand,),
        transmitter=Transmitter(filter_span_symbols=12, rolloffs=(0.1, 0.2, 0.35)),
    )
    every = [
        c
        for entry in equipment.modcod_table(equipment.profile_for(problem, demand), problem.coding)
        for alpha in problem.transmitter.rolloffs
        if (
            c := candidate_for(
                problem,
                demand,
                entry.modulation,
                entry.code_rate,
                alpha,
                rate / entry.net_bits_per_symbol,
            )
        )
        is not None
    ]
    shortlist = narrowest_at_min_rate(problem, demand, 3)
    if not every:
        assert shortlist == []
        return
    least = min(c.config.allocated_bandwidth_hz + c.config.guard_hz for c in every)
    first = shortlist[0].config
    assert first.allocated_bandwidth_hz + first.guard_hz == pytest.approx(least, rel=1e-9)


def _front_one_by_one(
    ratio: list[float], low: list[float], high: list[float], guards: list[list[float]]
) -> list[int]:
    """The family front as first written: each family, cheapest per bit first, kept unless
    a family already kept beats it (the reference for the vectorised one)."""
    order = sorted(range(len(ratio)), key=lambda i: -ratio[i])
    kept: list[int] = []
    for i in order:
        covered = any(
            high[j] >= high[i] * (1 - 1e-9)
            and low[j] / ratio[j] <= low[i] / ratio[i] * (1 + 1e-9)
            and all(g[j] <= g[i] * (1 + 1e-9) for g in guards)
            for j in kept
        )
        if not covered:
            kept.append(i)
    return kept


values = st.floats(0.5, 4.0).map(lambda v: round(v, 1))  # coarse: ties and equal guards occur


@settings(max_examples=200, deadline=None)
@given(
    st.integers(1, 12).flatmap(
        lambda n: st.tuples(
            st.lists(values, min_size=n, max_size=n),
            st.lists(values, min_size=n, max_size=n),
            st.lists(values, min_size=n, max_size=n),
            st.lists(st.lists(values, min_size=n, max_size=n), min_size=0, max_size=2),
        )
    )
)
def test_family_front_keeps_what_the_one_by_one_search_keeps(
    arrays: tuple[list[float], list[float], list[float], list[list[float]]],
) -> None:
    ratio, low, spread, guards = arrays
    high = [lo + s for lo, s in zip(low, spread, strict=True)]
    got = _family_front(
        np.array(ratio), np.array(low), np.array(high), *(np.array(g) for g in guards)
    )
    assert got == _front_one_by_one(ratio, low, high, guards)


def test_a_target_far_above_the_family_makes_a_short_fine_grid() -> None:
    # Found by the schema fuzzer: a target of 10^11 bit/s on a 2 Mbaud family stepped its
    # fine grid down one half-step at a time from some 10^5 steps per raster step, for minutes.
    from solver.candidates import family_for
    from solver.packing.spacing import fill_grid

    demand = Demand(id="d", min_rate_bps=1e6, target_rate_bps=1e11, cn0_dbhz=75.0, margin_db=1.0)
    problem = _problem(demand)
    family = family_for(problem, demand, Modulation.QPSK, Fraction(1, 2), 0.2, 2e6)
    assert family is not None
    fine = fill_grid(family, 4, demand.min_rate_bps, demand.target_rate_bps, demand.margin_db)
    assert fine.lo_half <= fine.hi_half <= (family.hi_half + 1) * 4
    # the widest kept still closes the link with the margin (C/N0 − 10·log10 Rs, DESIGN.md)
    top = fine.top.config
    assert top.esn0_db - top.required_esn0_db >= demand.margin_db - 1e-9


@pytest.mark.parametrize("level_db", [0.0, -3.0, -1e4])
def test_no_mask_guard_is_needed_for_a_level_at_or_above_the_in_band_density(
    level_db: float,
) -> None:
    # Found by the schema fuzzer: an Es/N0 of about 0 dB made a sensitivity of -10^4 dB, and
    # 10^(-level/10) overflowed.  A skirt is never above the in-band density, so no guard.
    from solver.packing.families import mask_guard_per_baud
    from solver.physics.emission import EmissionKey

    assert mask_guard_per_baud(EmissionKey(rolloff=0.2, span_symbols=12), level_db) == 0.0
