"""The re-choice after packing: a carrier below target takes the width or configuration of its
demand that carries most in the room its stretch has left, and the change can be undone.

Found on the 200-demand benchmark row: 54 carriers sat below target beside spread slack, 25 of
them at their configuration's link limit, while other configurations of the same demands would
have carried more there.  Scenarios are invented.
"""

from __future__ import annotations

import math

import pytest

from solver import Block, Demand, Objective, Problem, Transmitter, verify_plan
from solver.candidates import build_candidates
from solver.geometry import free_segments
from solver.model import Carrier
from solver.packing import admission_weights
from solver.packing.arrangement import from_carriers, slot_of, to_carriers
from solver.packing.items import PackingInput
from solver.squeeze import rechoose, undo_rechoices

BLOCK = Block(start_hz=2.400e9, stop_hz=2.403e9, raster_hz=10e3)


def _case(objective: Objective = Objective.MAX_THROUGHPUT) -> tuple[Problem, PackingInput]:
    # Power-limited (C/N0 given): a wider carrier has less Es/N0, so each configuration's
    # link stops growing at its own symbol rate; the target is beyond every one of them.
    demand = Demand(id="hill", min_rate_bps=1e6, target_rate_bps=60e6, cn0_dbhz=80.0)
    problem = Problem(
        block=BLOCK,
        demands=(demand,),
        transmitter=Transmitter(filter_span_symbols=12, rolloffs=(0.2, 0.35)),
        objective=objective,
        time_limit_s=5.0,
    )
    options = build_candidates(problem, demand)
    data = PackingInput(
        options=[options],
        segments=free_segments(problem, []),
        objective=problem.objective,
        admission_weights=admission_weights([demand]),
        priorities=[demand.priority],
        time_limit_s=problem.time_limit_s,
        num_workers=1,
        seed=1,
        hints={},
        levels=(),
    )
    return problem, data


def _weakest_placed(problem: Problem, data: PackingInput) -> Carrier:
    """The demand's configuration that carries least at its link's limit, at that limit, at
    the block's low end: a poor choice with room to spare."""
    slots = [slot_of(data, 0, k) for k in range(len(data.options[0].candidates))]
    weakest = min(slots, key=lambda s: s.value_per_half * s.hi_half)
    config = weakest.family.at(weakest.hi_half).config
    centre = BLOCK.start_hz + config.edge_guard_hz + config.allocated_bandwidth_hz
    return Carrier(config, math.ceil(centre / BLOCK.raster_hz) * BLOCK.raster_hz, 0.0, 0.0)


def test_a_carrier_below_target_takes_what_carries_most_in_its_room_and_still_verifies() -> None:
    problem, data = _case()
    placed = _weakest_placed(problem, data)
    arrangement = from_carriers(problem, data, [placed], lambda c: None)
    assert arrangement is not None
    (st,) = [s for s in arrangement.stretches if s.slots]
    before = st.slots[0].value_per_half * st.halves[0]

    done = rechoose(problem, data, arrangement, math.inf)

    chosen = (st.slots[0], st.halves[0])
    after = chosen[0].value_per_half * chosen[1]
    assert len(done) == 1
    assert after > before
    # no configuration of the demand carries more at any width that fits the stretch
    for k in range(len(data.options[0].candidates)):
        other = slot_of(data, 0, k)
        st.slots[0] = other
        for half in range(other.lo_half, other.hi_half + 1):
            st.halves[0] = half
            if st.fits(st.halves):
                assert other.value_per_half * half <= after * (1 + 1e-12)
    st.slots[0], st.halves[0] = chosen
    carriers = to_carriers(problem, arrangement)
    assert verify_plan(problem, carriers).passed
    assert carriers[0].config.throughput_bps > placed.config.throughput_bps


def test_undo_puts_back_the_configuration_and_the_gaps() -> None:
    problem, data = _case()
    arrangement = from_carriers(problem, data, [_weakest_placed(problem, data)], lambda c: None)
    assert arrangement is not None
    (st,) = [s for s in arrangement.stretches if s.slots]
    kept = (list(st.slots), list(st.halves), dict(st.scales))
    done = rechoose(problem, data, arrangement, math.inf)
    assert done
    undo_rechoices(done)
    assert (st.slots, st.halves, st.scales) == kept


@pytest.mark.parametrize("objective", [Objective.MIN_BANDWIDTH, Objective.MAX_MARGIN])
def test_other_objectives_are_left_as_they_are(objective: Objective) -> None:
    problem, data = _case(objective)
    arrangement = from_carriers(problem, data, [_weakest_placed(problem, data)], lambda c: None)
    assert arrangement is not None
    assert rechoose(problem, data, arrangement, math.inf) == []


def test_nothing_changes_once_the_deadline_has_passed() -> None:
    problem, data = _case()
    arrangement = from_carriers(problem, data, [_weakest_placed(problem, data)], lambda c: None)
    assert arrangement is not None
    assert rechoose(problem, data, arrangement, deadline=0.0) == []
