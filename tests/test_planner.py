"""End-to-end planning: properties on random instances and the explanations of what is left out."""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from referee import used_bandwidth_hz

from solver import (
    Block,
    CurrentSetting,
    Demand,
    Exclusion,
    Modulation,
    Objective,
    Plan,
    Problem,
    ProblemError,
    SolveStatus,
    Transmitter,
    UnservedReason,
    solve,
)
from solver.packing import admission_weights
from solver.rules import rule_of_thumb_plan
from solver.verify import verify_plan

TX = Transmitter(filter_span_symbols=12, rolloffs=(0.05, 0.1, 0.2, 0.35))


def _problem(demands: list[Demand], width_hz: float = 20e6, **kw: object) -> Problem:
    block = Block(start_hz=1_000e6, stop_hz=1_000e6 + width_hz, raster_hz=10e3)
    settings_ = {"time_limit_s": 5.0, "num_workers": 1, "transmitter": TX} | kw
    return Problem(block=block, demands=tuple(demands), **settings_)  # type: ignore[arg-type]


demand_strategy = st.builds(
    lambda i, lo, ratio, link, fixed, prio, margin: Demand(
        id=f"d{i}",
        min_rate_bps=lo,
        target_rate_bps=lo * ratio,
        priority=prio,
        cn0_dbhz=None if fixed else link + 55.0,
        esn0_db=link - 5.0 if fixed else None,
        margin_db=margin,
    ),
    st.integers(0, 10_000),
    st.floats(200e3, 4e6),
    st.floats(1.0, 4.0),
    st.floats(5.0, 25.0),
    st.booleans(),
    st.integers(1, 3),
    st.floats(0.0, 4.0),
)


def _unique(demands: list[Demand]) -> list[Demand]:
    return [replace(d, id=f"d{i}") for i, d in enumerate(demands)]


def _served_rates(plan: Plan) -> dict[str, float]:
    return {c.demand_id: c.config.throughput_bps for c in plan.carriers}


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(demand_strategy, min_size=1, max_size=5))
def test_random_plans_hold_every_promise(demands: list[Demand]) -> None:
    """Properties: verified, minimum rates met, within Shannon, never worse than by hand."""
    problem = _problem(_unique(demands), width_hz=12e6)
    plan = solve(problem)
    # 1. The returned plan passes an independent verification run again here.
    assert verify_plan(problem, plan.carriers).passed
    by_id = {d.id: d for d in problem.demands}
    for c in plan.carriers:
        demand = by_id[c.demand_id]
        # 2. Every served demand gets at least its minimum rate.
        assert c.config.throughput_bps >= demand.min_rate_bps * (1 - 1e-9)
        # 3. Shannon (1948): C = B log2(1 + S/(N0 B)) with S/N0 = Es/N0 * Rs over the allocated B.
        width = c.config.allocated_bandwidth_hz
        snr = 10 ** (c.config.esn0_db / 10) * c.config.symbol_rate_baud / width
        assert c.config.throughput_bps <= width * math.log2(1 + snr)
    # 4. Never worse than the rule-of-thumb plan: admission first, then capped throughput.
    hand = rule_of_thumb_plan(problem)
    weights = dict(zip(by_id, admission_weights(problem.demands), strict=True))

    def score(p: Plan) -> tuple[int, float]:
        rates = _served_rates(p)
        admitted = sum(weights[d] for d in rates)
        return admitted, sum(
            by_id[d].priority * min(r, by_id[d].target_rate_bps) for d, r in rates.items()
        )

    ours, theirs = score(plan), score(hand)
    assert ours[0] >= theirs[0]
    if ours[0] == theirs[0]:
        assert ours[1] >= theirs[1] * (1 - 0.02)  # throughput grid: 1 % width steps, 40 kept
    _check_summary_figures(problem, plan, hand)


def _check_summary_figures(problem: Problem, plan: Plan, hand: Plan) -> None:
    """The summary's bounds, requested rate and hand-method figures against their definitions
    and an independent run of the hand method checked again by the verifier."""
    s = plan.summary
    total = s.total_throughput_bps
    requested = sum(d.target_rate_bps for d in problem.demands)
    assert s.requested_rate_bps == pytest.approx(requested, rel=1e-12)
    # Each carrier carries at most Shannon in its own width with the margin kept, and the
    # carriers share the usable block: no plan beats the uncapped bound.
    assert total <= s.capacity_bound_bps * (1 + 1e-9)
    assert s.capacity_bound_bps >= s.target_capped_bound_bps * (1 - 1e-12) >= 0.0
    assert s.target_capped_bound_bps <= requested * (1 + 1e-12)
    by_id = {d.id: d for d in problem.demands}
    capped = sum(
        min(c.config.throughput_bps, by_id[c.demand_id].target_rate_bps) for c in plan.carriers
    )
    assert capped <= s.target_capped_bound_bps * (1 + 1e-9)
    assert s.efficiency_vs_capacity_bound == pytest.approx(total / s.capacity_bound_bps)
    assert s.efficiency_vs_target_capped_bound == pytest.approx(total / s.target_capped_bound_bps)
    assert s.fraction_of_requested == pytest.approx(total / requested)
    # The hand method, run here on its own and verified again, gives the summary's figures.
    assert verify_plan(problem, hand.carriers).passed
    hand_total = sum(c.config.throughput_bps for c in hand.carriers)
    assert s.hand_method is not None
    assert s.hand_method.served_demands == len(hand.carriers)
    assert s.hand_method.throughput_bps == pytest.approx(hand_total, rel=1e-12)
    assert s.hand_method.used_bandwidth_hz == pytest.approx(
        used_bandwidth_hz(problem, list(hand.carriers)), rel=1e-12
    )
    if hand_total > 0:
        assert s.hand_method.plan_to_hand_ratio == pytest.approx(total / hand_total, rel=1e-12)
    else:
        assert s.hand_method.plan_to_hand_ratio is None
    assert hand.summary.hand_method is None  # the hand plan does not compare with itself


def test_summary_bounds_of_one_fixed_link_by_hand() -> None:
    # One fixed link, Es/N0 13 dB with a 3 dB margin: SNR 10 dB = 10 in a 20 MHz block.
    # Shannon (1948), C = B·log2(1 + SNR): capacity 20e6·log2(11) = 69,188,632 bit/s.
    # Capped at its 4 Mbit/s target (which needs only 4e6/log2(11) = 1.16 MHz): 4e6 bit/s.
    problem = _problem([Demand("link", 1e6, 4e6, esn0_db=13.0, margin_db=3.0)])
    plan = solve(problem)
    s = plan.summary
    assert s.capacity_bound_bps == pytest.approx(20e6 * math.log2(11.0), rel=1e-12)
    assert s.target_capped_bound_bps == pytest.approx(4e6, rel=1e-12)
    assert s.requested_rate_bps == 4e6
    total = s.total_throughput_bps
    assert total > 0
    assert s.fraction_of_requested == pytest.approx(total / 4e6, rel=1e-12)
    assert s.efficiency_vs_capacity_bound == pytest.approx(
        total / (20e6 * math.log2(11.0)), rel=1e-12
    )
    _check_summary_figures(problem, plan, rule_of_thumb_plan(problem))


def test_same_input_gives_the_same_plan() -> None:
    demands = [
        Demand(id="a", min_rate_bps=1e6, target_rate_bps=4e6, cn0_dbhz=75.0),
        Demand(id="b", min_rate_bps=2e6, target_rate_bps=6e6, esn0_db=14.0, priority=2),
        Demand(id="c", min_rate_bps=5e5, target_rate_bps=1e6, cn0_dbhz=70.0),
    ]
    problem = _problem(demands)
    first, second = solve(problem), solve(problem)
    assert first.carriers == second.carriers
    assert first.unserved == second.unserved


def test_replan_without_change_retunes_nothing() -> None:
    demands = [
        Demand(id="a", min_rate_bps=1e6, target_rate_bps=4e6, cn0_dbhz=75.0),
        Demand(id="b", min_rate_bps=2e6, target_rate_bps=6e6, esn0_db=14.0, priority=2),
    ]
    problem = _problem(demands)
    plan = solve(problem)
    current = {
        c.demand_id: CurrentSetting(
            center_hz=c.center_hz,
            symbol_rate_baud=c.config.symbol_rate_baud,
            rolloff=c.config.rolloff,
            modulation=c.config.modulation,
            code_rate=c.config.code_rate,
        )
        for c in plan.carriers
    }
    again = solve(
        replace(problem, demands=tuple(replace(d, current=current[d.id]) for d in demands))
    )
    assert again.summary.retune_count == 0
    assert [c.center_hz for c in again.carriers] == [c.center_hz for c in plan.carriers]


def test_replan_keeps_a_carrier_that_can_stay() -> None:
    # A carrier sitting in the middle of the block keeps its place when a new small demand
    # arrives and there is room elsewhere.
    base = Demand(id="keep", min_rate_bps=1e6, target_rate_bps=1e6, esn0_db=15.0)
    first = solve(_problem([base]))
    c = first.carriers[0]
    moved_center = c.center_hz + 3e6
    current = CurrentSetting(
        moved_center,
        c.config.symbol_rate_baud,
        c.config.rolloff,
        c.config.modulation,
        c.config.code_rate,
    )
    newcomer = Demand(id="new", min_rate_bps=5e5, target_rate_bps=5e5, esn0_db=15.0)
    plan = solve(_problem([replace(base, current=current), newcomer]))
    kept = next(x for x in plan.carriers if x.demand_id == "keep")
    assert kept.center_hz == pytest.approx(moved_center)
    assert not kept.retuned
    assert {x.demand_id for x in plan.carriers} == {"keep", "new"}


def test_no_link_is_explained() -> None:
    weak = Demand(id="weak", min_rate_bps=10e6, target_rate_bps=10e6, cn0_dbhz=55.0, margin_db=3.0)
    plan = solve(_problem([weak]))
    assert plan.status is SolveStatus.INFEASIBLE
    (u,) = plan.unserved
    assert u.reason is UnservedReason.NO_LINK
    assert "no modulation closes the link" in u.detail
    assert "55.0 dBHz" in u.detail


def test_too_wide_for_any_segment_is_explained() -> None:
    # 8 MHz minimum on a 10 MHz block split in two by a 2 MHz exclusion in the middle.
    block = Block(1e9, 1.01e9, 10e3, exclusions=(Exclusion(1.004e9, 1.006e9, "radio astronomy"),))
    wide = Demand(
        id="wide",
        min_rate_bps=8e6,
        target_rate_bps=8e6,
        esn0_db=8.0,
        modulations=(Modulation.QPSK,),
    )
    plan = solve(
        Problem(block=block, demands=(wide,), transmitter=TX, time_limit_s=5, num_workers=1)
    )
    (u,) = plan.unserved
    assert u.reason is UnservedReason.NO_SPECTRUM
    assert "largest free segment" in u.detail


def test_lowest_priority_is_left_out_when_minimums_do_not_fit() -> None:
    demands = [
        Demand(
            id=f"p{p}",
            min_rate_bps=6e6,
            target_rate_bps=6e6,
            esn0_db=8.0,
            priority=p,
            modulations=(Modulation.QPSK,),
        )
        for p in (1, 2, 3)
    ]
    plan = solve(_problem(demands, width_hz=12e6))
    served = {c.demand_id for c in plan.carriers}
    assert "p1" not in served
    assert "p3" in served
    reasons = {u.demand_id: u for u in plan.unserved}
    assert reasons["p1"].reason is UnservedReason.NOT_ADMITTED
    # The reason names the higher-priority demands that hold the spectrum.
    assert reasons["p1"].detail.startswith("displaced by demands of priority 1 or higher (")
    assert "p3" in reasons["p1"].detail


def test_min_bandwidth_uses_less_spectrum_than_max_throughput() -> None:
    demands = [
        Demand(id="a", min_rate_bps=1e6, target_rate_bps=5e6, esn0_db=12.0),
        Demand(id="b", min_rate_bps=1e6, target_rate_bps=5e6, esn0_db=12.0),
    ]
    wide = solve(_problem(demands))
    narrow = solve(_problem(demands, objective=Objective.MIN_BANDWIDTH))
    assert narrow.summary.used_bandwidth_hz < wide.summary.used_bandwidth_hz
    assert narrow.summary.largest_free_segment_hz > wide.summary.largest_free_segment_hz
    # Pack low: the carriers sit at the bottom of the block.
    assert max(c.upper_edge_hz for c in narrow.carriers) < 1_000e6 + 10e6


def test_pinned_carrier_stays_on_its_pin() -> None:
    pin = Demand(
        id="pin", min_rate_bps=1e6, target_rate_bps=1e6, esn0_db=12.0, pinned_center_hz=1_010e6
    )
    free = Demand(id="free", min_rate_bps=1e6, target_rate_bps=3e6, esn0_db=12.0)
    plan = solve(_problem([pin, free]))
    placed = {c.demand_id: c for c in plan.carriers}
    assert placed["pin"].center_hz == 1_010e6
    assert "free" in placed


def test_every_plan_carries_the_cautions() -> None:
    plan = solve(_problem([Demand(id="a", min_rate_bps=1e6, target_rate_bps=1e6, esn0_db=12.0)]))
    text = " ".join(plan.notices)
    assert "Measure real equipment" in text
    assert "regulator" in text


def test_invalid_problem_names_the_field() -> None:
    bad = Demand(id="a", min_rate_bps=2e6, target_rate_bps=1e6, esn0_db=12.0)
    with pytest.raises(ProblemError) as err:
        solve(_problem([bad]))
    assert err.value.field == "demands[0].target_rate_bps"


def test_a_time_limit_too_short_for_the_request_is_refused_up_front() -> None:
    # 400 demands need at least 400 × 20 ms = 8 s; the request allows 5 s
    many = [
        Demand(id=f"d{i}", min_rate_bps=1e5, target_rate_bps=2e5, esn0_db=12.0) for i in range(400)
    ]
    with pytest.raises(ProblemError) as err:
        solve(_problem(many, time_limit_s=5.0))
    assert err.value.field == "time_limit_s"
    assert "400 demands" in str(err.value) and "at least 8 s" in str(err.value)
