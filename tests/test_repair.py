"""The repair path: what the planner and the hand method do when verification fails.

The planner's own plans pass verification in the first round, so these tests make the stage
that places carriers (``solver.planner.to_carriers``) return a plan that fails, and check that
the plan handed back passes an independent verification, says which demands were left out
and why, and says what happened in its notices.
"""

from __future__ import annotations

import pytest

from solver import (
    Block,
    Carrier,
    Demand,
    EquipmentProfile,
    Plan,
    Problem,
    Transmitter,
    UnservedReason,
    rule_of_thumb_plan,
    solve,
    verify_plan,
)
from solver import planner as planner_module
from solver.packing.arrangement import Arrangement, to_carriers
from solver.verify import ViolationKind

BLOCK = Block(start_hz=1_000e6, stop_hz=1_010e6, raster_hz=10e3, edge_leakage_limit_db=45.0)
STUDY = EquipmentProfile(
    "study", modcod_set="full", rolloffs=(0.2, 0.35), amplifier_distortion=False
)
"""The whole MODCOD grid: the sabotage below was sized on it (with the default set the carrier
chosen for the top slot keeps the edge limit even at gap 0)."""
DEMANDS = tuple(
    Demand(id=i, min_rate_bps=1e6, target_rate_bps=2e6, esn0_db=14.0, priority=p, profile="study")
    for i, p in (("low", 3), ("mid", 2), ("top", 1))
)
PROBLEM = Problem(
    block=BLOCK,
    demands=DEMANDS,
    transmitter=Transmitter(filter_span_symbols=12, rolloffs=(0.2, 0.35)),
    time_limit_s=4.0,
    num_workers=1,
    profiles=(STUDY,),
)


def _highest(carriers: tuple[Carrier, ...]) -> Carrier:
    return max(carriers, key=lambda c: c.center_hz)


def _moved(carriers: tuple[Carrier, ...], victim: Carrier, center_hz: float) -> tuple[Carrier, ...]:
    return tuple(Carrier(c.config, center_hz, 0.0, 0.0) if c is victim else c for c in carriers)


def _unserved(plan: Plan) -> dict[str, tuple[UnservedReason, str]]:
    return {u.demand_id: (u.reason, u.detail) for u in plan.unserved}


def _named_as_dropped(plan: Plan) -> set[str]:
    """The demands the plan's notice says verification left out."""
    notices = [n for n in plan.notices if n.startswith("Verification failed:")]
    assert len(notices) <= 1, notices
    ids = {d.id for d in DEMANDS}
    return {d for d in ids if notices and d in notices[0]}


def test_unsabotaged_plan_passes_in_the_first_round() -> None:
    # The baseline the other tests break: every demand served, one round, nothing dropped.
    plan = solve(PROBLEM)
    assert {c.demand_id for c in plan.carriers} == {"low", "mid", "top"}
    assert plan.stats.verification_rounds == 1
    assert not any(n.startswith("Verification") for n in plan.notices)
    assert _named_as_dropped(plan) == set()


def _without_greedy_peer(monkeypatch: pytest.MonkeyPatch) -> None:
    """The greedy peer (solver/greedy.py) does not use the sabotaged stage and would serve
    everyone; these tests are about the repair path alone."""
    monkeypatch.setattr(
        planner_module,
        "_at_least_greedy",
        lambda problem, data, pinned, peer, check, dropped, deadline, cancel: (check, dropped),
    )


def test_a_carrier_outside_the_block_is_left_out_with_its_reason(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """No carrier is to blame for a leakage figure (culprit None), so no re-solve can help:
    the planner must leave the carrier out at once, not return a plan that fails."""
    pushed: list[str] = []

    def half_outside(problem: Problem, arrangement: Arrangement) -> tuple[Carrier, ...]:
        carriers = to_carriers(problem, arrangement)
        victim = _highest(carriers)
        pushed.append(victim.demand_id)
        return _moved(carriers, victim, problem.block.stop_hz)  # upper half past the block

    monkeypatch.setattr(planner_module, "to_carriers", half_outside)
    _without_greedy_peer(monkeypatch)
    plan = solve(PROBLEM)

    assert pushed, "the sabotaged stage ran"
    victim = pushed[0]
    check = verify_plan(PROBLEM, plan.carriers)
    assert check.passed, check.violations
    assert victim not in {c.demand_id for c in plan.carriers}
    reason, detail = _unserved(plan)[victim]
    assert reason is UnservedReason.NO_SPECTRUM
    assert "left out after verification" in detail
    assert "leaves the block" in detail
    assert {c.demand_id for c in plan.carriers} == {"low", "mid", "top"} - {victim}
    assert plan.stats.verification_rounds == 1
    assert _named_as_dropped(plan) == {victim}


def test_after_a_failed_repair_round_the_last_plan_less_the_culprit_is_kept(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """First round: the highest carrier is pushed against the block edge, where it leaks more
    than the 45 dB edge limit allows (a culprit, so the planner widens its guard and solves
    again).  Second round: the stage finds nothing.  The planner must fall back to the first
    round's plan less the culprit.  Mending by local changes (next test) is switched off, so
    that the re-solve path runs."""
    calls: list[str] = []
    monkeypatch.setattr(planner_module, "_mended", lambda *args: None)

    def edge_then_nothing(problem: Problem, arrangement: Arrangement) -> tuple[Carrier, ...]:
        carriers = to_carriers(problem, arrangement)
        if calls:
            calls.append("empty")
            return ()
        victim = _highest(carriers)
        calls.append(victim.demand_id)
        half_width = victim.config.allocated_bandwidth_hz / 2
        return _moved(carriers, victim, problem.block.stop_hz - half_width)  # gap 0 to the edge

    monkeypatch.setattr(planner_module, "to_carriers", edge_then_nothing)
    _without_greedy_peer(monkeypatch)
    plan = solve(PROBLEM)

    assert calls[1:] == ["empty"], "one failing round, then an empty one"
    victim = calls[0]
    check = verify_plan(PROBLEM, plan.carriers)
    assert check.passed, check.violations
    assert victim not in {c.demand_id for c in plan.carriers}
    reason, detail = _unserved(plan)[victim]
    assert reason is UnservedReason.NO_SPECTRUM
    assert "left out after verification" in detail
    assert "upper block edge" in detail
    assert plan.stats.verification_rounds == 2
    assert any(n.startswith("Verification needed 2 rounds") for n in plan.notices)
    assert _named_as_dropped(plan) == {victim}


def _against_the_edge(problem: Problem, arrangement: Arrangement) -> tuple[Carrier, ...]:
    carriers = to_carriers(problem, arrangement)
    victim = _highest(carriers)
    half_width = victim.config.allocated_bandwidth_hz / 2
    return _moved(carriers, victim, problem.block.stop_hz - half_width)  # gap 0 to the edge


def test_a_plan_that_fails_is_mended_in_place_before_any_carrier_is_left_out(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """The carrier pushed against the block edge leaks more than the edge limit allows; a
    narrower carrier at the same centre (or another roll-off) keeps its edge guard, so the
    plan is mended by that one local change: everyone stays served, in one round, with no
    notice of anything left out, and the plan passes an independent verification."""
    pushed = verify_plan(PROBLEM, _against_the_edge(PROBLEM, _placed_once()))
    assert any(v.kind is ViolationKind.EDGE_LEAKAGE for v in pushed.violations)
    monkeypatch.setattr(planner_module, "to_carriers", _against_the_edge)
    _without_greedy_peer(monkeypatch)

    plan = solve(PROBLEM)

    assert verify_plan(PROBLEM, plan.carriers).passed
    assert {c.demand_id for c in plan.carriers} == {"low", "mid", "top"}
    assert plan.stats.verification_rounds == 1
    assert _named_as_dropped(plan) == set()
    highest = _highest(plan.carriers)
    assert highest.upper_edge_hz < BLOCK.stop_hz  # it no longer touches the edge


def _placed_once() -> Arrangement:
    """The arrangement the planner places on its first round (captured from a plain solve)."""
    seen: list[Arrangement] = []

    def capture(problem: Problem, arrangement: Arrangement) -> tuple[Carrier, ...]:
        seen.append(arrangement)
        return to_carriers(problem, arrangement)

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(planner_module, "to_carriers", capture)
        solve(PROBLEM)
    return seen[0]


def test_the_hand_method_leaves_out_what_fails_and_says_so() -> None:
    # Its 10 % guard (common practice) is far short of a 60 dB edge limit for the carrier it
    # puts first, next to the lower block edge.  Its placement does not depend on the limits.
    strict = Problem(
        block=Block(BLOCK.start_hz, BLOCK.stop_hz, BLOCK.raster_hz, edge_leakage_limit_db=60.0),
        demands=DEMANDS,
        transmitter=PROBLEM.transmitter,
        profiles=PROBLEM.profiles,
    )
    lax = rule_of_thumb_plan(PROBLEM)
    assert {c.demand_id for c in lax.carriers} == {"low", "mid", "top"}
    failing = verify_plan(strict, lax.carriers).violations
    assert any(v.kind is ViolationKind.EDGE_LEAKAGE for v in failing)

    plan = rule_of_thumb_plan(strict)

    assert verify_plan(strict, plan.carriers).passed
    dropped = {
        u.demand_id: u for u in plan.unserved if u.detail.startswith("left out after verification")
    }
    assert {v.demand_id for v in failing} <= set(dropped)
    assert all(u.reason is UnservedReason.NO_SPECTRUM for u in dropped.values())
    assert _named_as_dropped(plan) == set(dropped)
