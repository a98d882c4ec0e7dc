"""The referee's properties with the amplifier's back-off as a decision: every demand on one
profile whose carriers may each run at 4, 6 or 8 dB output back-off (Rapp p = 2, in-band
distortion counted as an EVM floor, links stated at 6 dB).  The referee (tests/referee.py)
enumerates every back-off of every configuration, so the planner's choice of back-off is held
to an exhaustive search on small instances."""

from __future__ import annotations

import math
from dataclasses import replace

from hypothesis import HealthCheck, given, seed, settings
from hypothesis import strategies as st
from referee import admission_key, objective_value
from refereed import outcome
from test_referee import RAPP, _tolerance, instances

from solver import EquipmentProfile, Objective, Problem, SolveStatus, verify_plan

PA = EquipmentProfile(
    "pa",
    modcod_set="dvb-s2",
    rolloffs=(0.1, 0.25),
    filter_span_symbols=12,
    amplifier=RAPP,
    output_backoffs_db=(4.0, 6.0, 8.0),
    reference_backoff_db=6.0,
)


@st.composite
def on_the_pa(draw: st.DrawFn) -> Problem:
    base = draw(instances())
    demands = tuple(replace(d, profile="pa") for d in base.demands[:3])
    return replace(base, demands=demands, profiles=(PA,), objective=Objective.MAX_THROUGHPUT)


RUNS = settings(
    max_examples=10,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)


@RUNS
@seed(20_261_202)
@given(problem=on_the_pa())
def test_the_planner_admits_what_the_referee_admits_choosing_backoffs(problem: Problem) -> None:
    out = outcome(problem)
    served = [c.demand_id for c in out.plan.carriers]
    assert admission_key(problem, served) >= out.found.best.admission
    assert verify_plan(problem, out.plan.carriers).passed
    assert {c.config.output_backoff_db for c in out.plan.carriers} <= {4.0, 6.0, 8.0}


@RUNS
@seed(20_261_202)
@given(problem=on_the_pa())
def test_an_optimal_plan_is_within_its_gap_of_the_referees_backoffs(problem: Problem) -> None:
    out = outcome(problem)
    plan, found = out.plan, out.found
    served = [c.demand_id for c in plan.carriers]
    if (
        plan.stats.status is not SolveStatus.OPTIMAL
        or admission_key(problem, served) > found.best.admission
    ):
        return
    value = objective_value(
        problem, verify_plan(problem, plan.carriers).carriers, problem.objective
    )
    gap = plan.stats.optimality_gap if math.isfinite(plan.stats.optimality_gap) else 0.0
    best = found.best.value
    assert value >= best - gap * abs(best) - _tolerance(problem, plan)
