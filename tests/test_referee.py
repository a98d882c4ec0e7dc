"""The planner against the exhaustive referee (tests/referee.py) on small random instances.

Properties (hypothesis; each with an explicit example from a known bug):

1. the planner serves at least the referee's admission (priority order), and with the same
   admission at least the referee's priority-weighted served value;
2. when the planner says ``optimal``, its objective is within its stated gap of the referee's
   best (the referee's grid is coarse, so its best is a lower bound on the optimum);
3. the planner never says ``infeasible``, and never leaves out a demand the referee serves alone
   without serving a demand of at least its priority instead;
4. every plan the planner returns passes ``verify_plan``;
5. the bound a plan states is never below the referee's best plan of the same admission.

The five properties draw the same instances (one shared seed, see :data:`SHARED_SEED`) and share
one planner run and one referee run per instance (:func:`refereed.outcome`), which keeps the module
within its time budget on two cores.  Plain unit tests of the referee itself come first.
"""

from __future__ import annotations

import math
from dataclasses import replace
from fractions import Fraction

import pytest
from hypothesis import HealthCheck, example, given, seed, settings
from hypothesis import strategies as st
from referee import (
    admission_key,
    admission_value,
    configurations,
    objective_value,
    referee,
    servable_alone,
    served_value,
    used_bandwidth_hz,
)
from refereed import outcome

from solver import (
    Amplifier,
    AmplifierModel,
    Block,
    Coding,
    Demand,
    Exclusion,
    Modulation,
    Objective,
    Plan,
    Problem,
    SolveStatus,
    Transmitter,
    UnservedReason,
    verify_plan,
)
from solver.packing import admission_weights
from solver.physics import modcod

pytestmark = pytest.mark.slow

RAPP = Amplifier(AmplifierModel.RAPP, 2.0, 6.0)
LINEAR = Transmitter(filter_span_symbols=12, rolloffs=(0.1, 0.25))
AMPLIFIED = Transmitter(filter_span_symbols=12, rolloffs=(0.1, 0.25), amplifier=RAPP)
FEW = (Modulation.QPSK, Modulation.PSK8, Modulation.APSK16)
"""Modulations the random instances draw from (few spectrum profiles to compute)."""


# ---------------------------------------------------------------- known bugs


def _bug_problem(priorities: tuple[int, ...], objective: Objective) -> Problem:
    """1 MHz block, 5 kHz raster, 40 dB towards the edges, Rapp p = 2 at 6 dB back-off: each
    demand needs 1 Mb/s (target 1.5 Mb/s) at Es/N0 12 dB with a 3 dB margin."""
    demands = tuple(
        Demand(
            id=f"d{i}",
            min_rate_bps=1e6,
            target_rate_bps=1.5e6,
            priority=p,
            esn0_db=12.0,
            margin_db=3.0,
        )
        for i, p in enumerate(priorities)
    )
    return Problem(
        block=Block(100e6, 101e6, raster_hz=5e3, edge_leakage_limit_db=40.0),
        demands=demands,
        leakage_limit_db=30.0,
        transmitter=Transmitter(amplifier=RAPP),
        objective=objective,
        time_limit_s=3.0,
        num_workers=2,
    )


BUG_ONE = _bug_problem((1,), Objective.MAX_THROUGHPUT)
"""The planner says infeasible; pinned at the centre the same demand gets 1.22 Mb/s."""
BUG_THREE = _bug_problem((3, 2, 1), Objective.MAX_THROUGHPUT)
"""Three such demands (priorities 3, 2, 1): the planner serves none."""


PINNED_BESIDE_EXCLUSION = Problem(
    block=Block(
        400e6,
        401e6,
        raster_hz=25e3,
        exclusions=(Exclusion(400.3e6, 400.4e6, "protected"),),
        edge_leakage_limit_db=40.0,
    ),
    demands=(
        Demand(
            id="d0",
            min_rate_bps=150e3,
            target_rate_bps=150e3,
            cn0_dbhz=66.0,
            margin_db=1.0,
            modulations=(Modulation.QPSK,),
            pinned_center_hz=400.25e6,
        ),
    ),
    leakage_limit_db=25.0,
    transmitter=LINEAR,
    time_limit_s=2.0,
    num_workers=2,
)
"""Found by these properties (shrunk by hypothesis): a 150 kb/s demand pinned 50 kHz below an
exclusion.  Uncoded QPSK at 80 kBd (α = 0.25) fills exactly the 100 kHz up to the exclusion and
passes verification; the planner says infeasible ("no configuration fits at the pinned
centre")."""


# ---------------------------------------------------------------- unit tests of the referee

QPSK_ONLY = Demand(
    id="a",
    min_rate_bps=980e3,
    target_rate_bps=980e3,
    esn0_db=15.0,
    margin_db=3.0,
    modulations=(Modulation.QPSK,),
)
"""Hand-worked: with 3 dB margin at Es/N0 15 dB a QPSK rate closes when its threshold is at most
12 dB; every code rate does (9/10 needs about 7.1 dB), uncoded QPSK does not (about 14.5 dB at a
bit error rate of 1e-6 with 1 dB implementation loss).  The narrowest is 9/10: 2 × 0.9 × 0.98 =
1.764 bit per symbol (2 % framing), 980 kb/s needs 555.6 kBd, × 1.25 (α = 0.25) = 694.4 kHz,
rounded up to an even number of 25 kHz steps: 28 steps, 700 kHz, 560 kBd, 987.84 kb/s.  A linear
transmitter with a 12-symbol filter at α = 0.25 meets 30 dB at zero gap (no guards)."""


def _tiny(
    demands: tuple[Demand, ...], width_hz: float, objective: Objective | None = None
) -> Problem:
    return Problem(
        block=Block(200e6, 200e6 + width_hz, raster_hz=25e3),
        demands=demands,
        leakage_limit_db=30.0,
        transmitter=Transmitter(filter_span_symbols=12, rolloffs=(0.25,)),
        objective=Objective.MAX_THROUGHPUT if objective is None else objective,
    )


def test_premises_of_the_hand_worked_cases() -> None:
    coding = Coding()
    assert modcod.required_esn0_db(Modulation.QPSK, Fraction(9, 10), coding) <= 12.0
    assert modcod.required_esn0_db(Modulation.QPSK, None, coding) > 12.0
    narrowest = configurations(_tiny((QPSK_ONLY,), 3e6), QPSK_ONLY)[0]
    assert narrowest.edge_guard_hz == 0.0
    assert narrowest.guard_hz == 0.0


def test_narrowest_configuration_by_hand() -> None:
    narrowest = configurations(_tiny((QPSK_ONLY,), 3e6), QPSK_ONLY)[0]
    assert (narrowest.modulation, narrowest.code_rate) == (Modulation.QPSK, Fraction(9, 10))
    assert narrowest.allocated_bandwidth_hz == pytest.approx(700e3, rel=1e-12)
    assert narrowest.symbol_rate_baud == pytest.approx(560e3, rel=1e-12)
    assert narrowest.throughput_bps == pytest.approx(987_840.0, rel=1e-12)


def test_weights_put_one_demand_above_all_lower_priorities() -> None:
    demands = tuple(replace(QPSK_ONLY, id=i, priority=p) for i, p in (("x", 3), ("y", 2), ("z", 2)))
    problem = _tiny(demands, 2e6)
    # Hand-worked: the priority-2 demands weigh 1 each, the priority-3 demand 1 + 2 = 3.
    assert admission_value(problem, ["x"]) == 3
    assert admission_value(problem, ["y", "z"]) == 2
    assert admission_key(problem, ["x"]) > admission_key(problem, ["y", "z"])
    assert [admission_value(problem, [d.id]) for d in demands] == admission_weights(demands)
    assert served_value(problem, ["x", "z"]) == 3 * 980e3 + 2 * 980e3


def test_one_demand_fits_a_block_of_exactly_its_narrowest_width() -> None:
    problem = _tiny((QPSK_ONLY,), 700e3)
    found = referee(problem)
    assert found.best.served == {"a"}
    (carrier,) = found.best.carriers
    assert carrier.center_hz == pytest.approx(200.35e6)
    assert carrier.config.code_rate == Fraction(9, 10)
    assert found.alone == {"a"}
    assert verify_plan(problem, found.best.carriers).passed


def test_one_demand_in_a_block_one_step_too_narrow_is_not_served() -> None:
    problem = _tiny((QPSK_ONLY,), 675e3)
    found = referee(problem)
    assert found.best.carriers == ()
    assert found.alone == frozenset()
    assert found.admission_value == 0


def test_two_demands_that_cannot_both_fit_serve_the_higher_priority() -> None:
    """Both need 700 kHz; 1.375 MHz holds one."""
    low, high = replace(QPSK_ONLY, id="low"), replace(QPSK_ONLY, id="high", priority=2)
    found = referee(_tiny((low, high), 1.375e6))
    assert found.best.served == {"high"}
    assert found.alone == {"low", "high"}
    assert found.admission_value == 2  # priority 2 weighs 1 + 1
    assert found.served_value == 2 * 980e3


def test_two_demands_fit_edge_to_edge_in_twice_the_width() -> None:
    low, high = replace(QPSK_ONLY, id="low"), replace(QPSK_ONLY, id="high", priority=2)
    problem = _tiny((low, high), 1.4e6)
    found = referee(problem)
    assert found.best.served == {"low", "high"}
    lower, upper = found.best.carriers
    assert lower.center_hz == pytest.approx(200.35e6)
    assert upper.center_hz == pytest.approx(201.05e6)
    assert verify_plan(problem, found.best.carriers).passed


def test_pinned_demand_sits_at_its_centre() -> None:
    pinned = replace(QPSK_ONLY, pinned_center_hz=201.5e6)
    found = referee(_tiny((pinned,), 3e6))
    assert [c.center_hz for c in found.best.carriers] == [201.5e6]


def test_exclusion_is_respected() -> None:
    """A 1.2 MHz block with its middle 200 kHz excluded leaves two 500 kHz stretches: too narrow
    for the 700 kHz carrier, though the block itself is wide enough."""
    block = Block(200e6, 201.2e6, raster_hz=25e3, exclusions=(Exclusion(200.5e6, 200.7e6),))
    problem = replace(_tiny((QPSK_ONLY,), 1.2e6), block=block)
    assert referee(problem).best.carriers == ()
    assert servable_alone(problem) == frozenset()
    assert referee(_tiny((QPSK_ONLY,), 1.2e6)).best.served == {"a"}


def test_objectives_pick_different_plans() -> None:
    """One demand that may run from 980 kb/s to 2 Mb/s in 3 MHz: max_throughput takes a wider
    carrier than min_bandwidth, and each objective's plan is best by its own measure."""
    wide = replace(QPSK_ONLY, target_rate_bps=2e6)
    problem = _tiny((wide,), 3e6)
    plans = {goal: referee(_tiny((wide,), 3e6, goal)).best.carriers for goal in Objective}
    rate = {g: objective_value(problem, c, Objective.MAX_THROUGHPUT) for g, c in plans.items()}
    used = {g: used_bandwidth_hz(problem, c) for g, c in plans.items()}
    assert rate[Objective.MAX_THROUGHPUT] == pytest.approx(2e6, rel=1e-2)
    assert rate[Objective.MAX_THROUGHPUT] > rate[Objective.MIN_BANDWIDTH]
    assert used[Objective.MIN_BANDWIDTH] == pytest.approx(700e3)
    assert used[Objective.MIN_BANDWIDTH] == min(used.values())


# ---------------------------------------------------------------- instances


@st.composite
def _demand(draw: st.DrawFn, index: int, block: Block) -> Demand:
    fixed = draw(st.booleans())
    minimum = draw(st.sampled_from((0.15, 0.25, 0.4, 0.6))) * block.width_hz
    mods = draw(st.lists(st.sampled_from(FEW), min_size=1, max_size=2, unique=True))
    return Demand(
        id=f"d{index}",
        min_rate_bps=minimum,
        target_rate_bps=minimum * draw(st.sampled_from((1.0, 1.5, 2.5))),
        priority=draw(st.integers(1, 3)),
        esn0_db=draw(st.sampled_from((9.0, 12.0, 16.0))) if fixed else None,
        cn0_dbhz=None if fixed else draw(st.sampled_from((66.0, 70.0, 74.0))),
        margin_db=draw(st.sampled_from((1.0, 3.0))),
        modulations=tuple(sorted(mods)),
    )


@st.composite
def instances(draw: st.DrawFn) -> Problem:
    """A 1–3 MHz block on a 25 or 50 kHz raster, 1–4 demands (over- and under-subscribed),
    linear or Rapp transmitter, with or without one exclusion and one pinned carrier."""
    raster = draw(st.sampled_from((25e3, 50e3)))
    width = draw(st.sampled_from((1e6, 2e6, 3e6)))
    start = 400e6
    exclusions: tuple[Exclusion, ...] = ()
    if draw(st.booleans()):
        at = draw(st.sampled_from((0.3, 0.5, 0.7))) * width
        size = draw(st.sampled_from((100e3, 200e3)))
        exclusions = (Exclusion(start + at, start + at + size, "protected"),)
    block = Block(
        start,
        start + width,
        raster_hz=raster,
        exclusions=exclusions,
        edge_leakage_limit_db=draw(st.sampled_from((None, 40.0))),
    )
    count = draw(st.integers(1, 4))
    demands = [draw(_demand(i, block)) for i in range(count)]
    if draw(st.booleans()):
        where = draw(st.sampled_from((0.25, 0.5, 0.75))) * width
        demands[0] = replace(demands[0], pinned_center_hz=start + round(where / raster) * raster)
    return Problem(
        block=block,
        demands=tuple(demands),
        leakage_limit_db=draw(st.sampled_from((25.0, 30.0))),
        transmitter=draw(st.sampled_from((LINEAR, AMPLIFIED))),
        objective=draw(st.sampled_from(tuple(Objective))),
        time_limit_s=draw(st.sampled_from((2.0, 3.0, 5.0))),
        num_workers=2,
    )


# ---------------------------------------------------------------- one run each, shared


def _planner_value(problem: Problem, plan: Plan) -> float:
    """The plan's objective value in the referee's units (margins re-measured by verify)."""
    carriers = verify_plan(problem, plan.carriers).carriers
    return objective_value(problem, carriers, problem.objective)


THROUGHPUT_SLACK = 1e-3
"""Property 2, max_throughput: share of Σ priority × target beyond the stated gap.  The planner
stops at 0.01 % of that range (``solver.packing.GAP_TOLERANCE``) and rounds each demand's
throughput per half-width step down to a millionth of the largest target; with at most 60
half-width steps per carrier in these blocks (3 MHz on a 25 kHz raster) both together stay
below 0.02 %, so 0.1 % leaves five times that."""

MARGIN_SLACK_DB = 0.1
"""Property 2, max_margin: the planner's margin term counts whole 0.1 dB steps."""


def _tolerance(problem: Problem, plan: Plan) -> float:
    """Slack on property 2 beyond the stated gap, in the objective's own unit.

    For min_bandwidth the planner rounds each guard and each carrier's slot up to the raster:
    at most one raster step per gap (carriers + 1) and one per carrier.
    """
    if problem.objective is Objective.MAX_THROUGHPUT:
        return THROUGHPUT_SLACK * sum(d.priority * d.target_rate_bps for d in problem.demands)
    if problem.objective is Objective.MIN_BANDWIDTH:
        return (2 * len(plan.carriers) + 1) * problem.block.raster_hz
    return MARGIN_SLACK_DB


SHARED_SEED = 20_240_611
"""One seed for the four properties: they draw the same instances, so each instance is solved
and refereed once (``refereed.outcome``); ``seed`` also makes the runs reproducible, as
derandomize does."""

RUNS = settings(
    max_examples=30,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)


# ---------------------------------------------------------------- properties


@RUNS
@seed(SHARED_SEED)
@given(problem=instances())
@example(problem=BUG_THREE)
def test_planner_admits_at_least_what_the_referee_admits(problem: Problem) -> None:
    """Property 1: priority order first, then the priority-weighted served value."""
    out = outcome(problem)
    served = [c.demand_id for c in out.plan.carriers]
    found = out.found
    mine = admission_key(problem, served)
    assert mine >= found.best.admission, (
        f"planner serves {sorted(served)} ({out.plan.status}), the referee serves "
        f"{sorted(found.best.served)}"
    )
    assert admission_value(problem, served) >= found.admission_value
    if mine == found.best.admission:
        assert served_value(problem, served) >= found.served_value * (1 - 1e-12)


@RUNS
@seed(SHARED_SEED)
@given(problem=instances())
@example(problem=replace(BUG_ONE, objective=Objective.MIN_BANDWIDTH))
def test_optimal_plans_are_within_their_gap_of_the_referee(problem: Problem) -> None:
    """Property 2: an 'optimal' plan is not beaten by the referee's (coarser) best."""
    out = outcome(problem)
    plan, found = out.plan, out.found
    if plan.stats.status is not SolveStatus.OPTIMAL:
        return
    served = [c.demand_id for c in plan.carriers]
    mine = admission_key(problem, served)
    assert mine >= found.best.admission, (
        f"'optimal' plan serves {sorted(served)}, the referee serves {sorted(found.best.served)}"
    )
    if mine > found.best.admission:
        return
    value = _planner_value(problem, plan)
    gap = plan.stats.optimality_gap if math.isfinite(plan.stats.optimality_gap) else 0.0
    best = found.best.value
    floor = best - gap * abs(best) - _tolerance(problem, plan)
    where = [(c.demand_id, c.center_hz, c.config.symbol_rate_baud) for c in found.best.carriers]
    assert value >= floor, (
        f"{problem.objective}: planner {value:.6g} (gap {gap:.2e}) < referee {best:.6g}; "
        f"referee plan (demand, centre, Rs) {where}"
    )


@RUNS
@seed(SHARED_SEED)
@given(problem=instances())
@example(problem=BUG_ONE)
@example(problem=BUG_THREE)
@example(problem=PINNED_BESIDE_EXCLUSION)
def test_planner_serves_what_the_referee_serves_alone(problem: Problem) -> None:
    """Property 3: a demand the referee serves alone is served, or gives way to a demand of at
    least its priority; and no plan is 'infeasible' while the referee serves anything."""
    out = outcome(problem)
    plan, found = out.plan, out.found
    if found.alone:
        assert plan.status is not SolveStatus.INFEASIBLE, (
            f"infeasible, but the referee serves {sorted(found.alone)} alone"
        )
    served = {c.demand_id for c in plan.carriers}
    priority = {d.id: d.priority for d in problem.demands}
    reasons = {u.demand_id: u.reason for u in plan.unserved}
    for d in sorted(found.alone - served):
        assert reasons.get(d) is not UnservedReason.NO_LINK, f"{d}: the referee closes its link"
        instead = sorted(s for s in served if priority[s] >= priority[d])
        assert instead, (
            f"{d} left out ({reasons.get(d)}) though the referee serves it alone, and no demand "
            f"of priority >= {priority[d]} is served instead"
        )


@RUNS
@seed(SHARED_SEED)
@given(problem=instances())
@example(problem=replace(BUG_THREE, objective=Objective.MAX_MARGIN))
def test_every_plan_passes_verification(problem: Problem) -> None:
    """Property 4."""
    out = outcome(problem)
    check = verify_plan(problem, out.plan.carriers)
    assert check.passed, [v.detail for v in check.violations]


@RUNS
@seed(SHARED_SEED)
@given(problem=instances())
@example(problem=BUG_THREE)
def test_the_stated_bound_holds_for_the_referees_best(problem: Problem) -> None:
    """Property 5: the bound a plan states is never below the referee's best plan of the same
    admission (so its gap, optimal or not, is honest)."""
    out = outcome(problem)
    plan, found = out.plan, out.found
    served = [c.demand_id for c in plan.carriers]
    if not served or admission_key(problem, served) != found.best.admission:
        return
    assert math.isfinite(plan.stats.best_bound)
    assert plan.stats.best_bound >= found.best.value - _tolerance(problem, plan), (
        f"{problem.objective}: bound {plan.stats.best_bound:.6g} below the referee's "
        f"{found.best.value:.6g}"
    )
