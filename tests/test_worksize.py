"""The work-size bound holds over what the candidate builder really lays out.

:func:`solver.configuration_bound` is computed from the problem alone; these tests build the
rows and width grids that :mod:`solver.candidates` would build and count them.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from solver import Block, Demand, Modulation, Objective, Problem, Transmitter, configuration_bound
from solver.candidates import _demand_combos, _family_span, _width_grid
from solver.physics.modcodsets import modcod_set

ROLLOFF_CHOICES = (0.2, 0.35)  # few distinct roll-offs: their spectrum profiles are computed once
FEW_MODULATIONS = (Modulation.QPSK, Modulation.PSK8, Modulation.QAM16)

demands = st.builds(
    lambda lo, ratio, fixed, link, mods: Demand(
        id="d",
        min_rate_bps=lo,
        target_rate_bps=lo * ratio,
        cn0_dbhz=None if fixed else link + 60.0,
        esn0_db=link if fixed else None,
        margin_db=1.0,
        modulations=tuple(mods),
    ),
    st.floats(1.0, 1e7),
    st.floats(1.0, 1e4),
    st.booleans(),
    st.floats(-5.0, 30.0),
    st.lists(st.sampled_from(FEW_MODULATIONS), min_size=1, max_size=3, unique=True),
)
rolloff_lists = st.lists(st.sampled_from(ROLLOFF_CHOICES), min_size=1, max_size=3)
rasters = st.sampled_from([1.0, 10.0, 1e3, 25e3])


def _problem(
    demand: Demand, rolloffs: list[float], raster_hz: float, objective: Objective
) -> Problem:
    block = Block(start_hz=2.0e9, stop_hz=2.0e9 + 4000 * raster_hz, raster_hz=raster_hz)
    tx = Transmitter(filter_span_symbols=8, rolloffs=tuple(rolloffs))
    return Problem(block=block, demands=(demand,), transmitter=tx, objective=objective)


@settings(max_examples=60, deadline=None)
@given(demands, rolloff_lists, rasters)
def test_the_width_grid_never_holds_more_points_than_the_bound(
    demand: Demand, rolloffs: list[float], raster_hz: float
) -> None:
    problem = _problem(demand, rolloffs, raster_hz, Objective.MAX_MARGIN)
    combos = _demand_combos(problem, demand)
    grid = _width_grid(combos, demand, raster_hz, problem.block.width_hz)
    bound = configuration_bound(problem, demand)
    assert grid.combo_index.size <= bound.total
    per_row = np.bincount(grid.combo_index, minlength=combos.size)
    assert int(per_row.max(initial=0)) <= bound.width_steps  # the derivation, row by row
    assert combos.size <= bound.modulations * bound.code_rates * bound.rolloffs


@settings(max_examples=30, deadline=None)
@given(
    demands,
    rolloff_lists,
    rasters,
    st.sampled_from([Objective.MAX_THROUGHPUT, Objective.MIN_BANDWIDTH]),
)
def test_a_family_counts_once_and_the_families_stay_under_the_bound(
    demand: Demand, rolloffs: list[float], raster_hz: float, objective: Objective
) -> None:
    problem = _problem(demand, rolloffs, raster_hz, objective)
    combos = _demand_combos(problem, demand)
    span = _family_span(combos, demand, raster_hz, problem.block.width_hz)
    bound = configuration_bound(problem, demand)
    assert bound.width_steps == 1
    assert span.combo_index.size <= combos.size <= bound.total


def test_the_factors_follow_the_catalogue_and_the_request() -> None:
    demand = Demand("d", min_rate_bps=1e6, target_rate_bps=3e6, esn0_db=10.0)
    problem = _problem(demand, [0.2, 0.35, 0.2], 1e3, Objective.MAX_THROUGHPUT)
    bound = configuration_bound(problem, demand)
    # the default set: DVB-S2 (EN 302 307-1: QPSK, 8PSK, 16APSK, 32APSK) and TS 38.214
    # Table 5.1.3.1-2 (QPSK, 16QAM, 64QAM, 256QAM); QPSK has 11 + 5 entries, the most
    standard = modcod_set("standard")
    assert bound.modulations == len({e.modulation for e in standard}) == 7
    assert bound.code_rates == 16
    assert bound.modulations * bound.code_rates >= len(standard)
    assert bound.rolloffs == 3  # a repeated roll-off is built twice, so it counts twice
    narrowed = Demand(
        "d", min_rate_bps=1e6, target_rate_bps=3e6, esn0_db=10.0, modulations=(Modulation.QPSK,)
    )
    qpsk = configuration_bound(problem, narrowed)
    assert (qpsk.modulations, qpsk.code_rates) == (1, 16)
    assert qpsk.total == 16 * 3
