"""The CP-SAT packing model on tiny instances whose optimum is worked out by hand.

Candidates are built directly on the raster grid (widths, guards and throughputs in round
numbers), so the arithmetic in each test is the whole proof of the expected optimum.
"""

from __future__ import annotations

import itertools

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver.model import CarrierConfig, Demand, Modulation, Objective, SolveStatus
from solver.packing import (
    Boundary,
    PackingInput,
    Segment,
    admission_weights,
    place_segment,
    solve_packing,
)
from solver.packing.families import Candidate, DemandOptions, Family


def _cand(
    demand: str, width: int, guard: int, throughput: float, edge: int | None = None
) -> Candidate:
    config = CarrierConfig(
        demand_id=demand,
        modulation=Modulation.QPSK,
        code_rate=None,
        rolloff=0.2,
        symbol_rate_baud=width / 1.2,
        bits_per_symbol=2,
        allocated_bandwidth_hz=float(width),
        occupied_bandwidth_hz=float(width),
        guard_hz=float(guard),
        edge_guard_hz=float(guard if edge is None else edge),
        throughput_bps=throughput,
        esn0_db=20.0,
        required_esn0_db=10.0,
    )
    return Candidate(config, width, guard, guard if edge is None else edge)


def _options(
    demand: str, *cands: Candidate, priority: int = 1, target: float = 100.0
) -> DemandOptions:
    d = Demand(id=demand, min_rate_bps=1.0, target_rate_bps=target, priority=priority, esn0_db=20.0)
    return DemandOptions(d, tuple(Family.single(c) for c in cands), "")


def _input(
    options: list[DemandOptions],
    segments: list[Segment],
    objective: Objective = Objective.MAX_THROUGHPUT,
) -> PackingInput:
    return PackingInput(
        options=options,
        segments=segments,
        objective=objective,
        admission_weights=admission_weights([o.demand for o in options]),
        priorities=[o.demand.priority for o in options],
        time_limit_s=5.0,
        num_workers=1,
        seed=1,
    )


def _served(result, data) -> dict[str, int]:
    return {data.options[d].demand.id: k for picks in result.chosen.values() for d, k, _ in picks}


@pytest.mark.parametrize(("length", "all_fit"), [(78, True), (77, False)])
def test_segment_needs_sum_of_width_plus_guard_plus_largest_guard(
    length: int, all_fit: bool
) -> None:
    # Widths/guards (30, 2), (20, 4), (10, 6) sorted by guard from the low edge:
    # edge 2 | 30 | gap max(2,4)=4 | 20 | gap max(4,6)=6 | 10 | edge 6
    # = 2 + 30 + 4 + 20 + 6 + 10 + 6 = 78 = Σ(w+g) + max g = 72 + 6.
    options = [
        _options("a", _cand("a", 30, 2, 30.0)),
        _options("b", _cand("b", 20, 4, 20.0), priority=2),
        _options("c", _cand("c", 10, 6, 10.0), priority=3),
    ]
    data = _input(options, [Segment(0, length)])
    result = solve_packing(data)
    assert result.status is SolveStatus.OPTIMAL
    served = _served(result, data)
    if all_fit:
        assert set(served) == {"a", "b", "c"}
    else:
        # Any two fit (e.g. b and c: 4+20+6+10+6 = 46); admission drops the lowest priority.
        assert set(served) == {"b", "c"}


def test_multiple_choice_knapsack_optimum() -> None:
    # Segment 100. Every guard is 5, so two carriers need w1 + w2 + 3*5 = w1 + w2 + 15 <= 100.
    # A: 40 (t 10) or 60 (t 15); B: 30 (t 8), 35 (t 9.5) or 50 (t 12).
    # Both must be served (admission); pairs with w1 + w2 <= 85:
    #   A40+B30 -> 18, A40+B35 -> 19.5 (75+15 = 90), A60+... needs B <= 25 -> none.
    # A40+B50 = 90+15 = 105 > 100. Optimum: A40 + B35, throughput 19.5.
    options = [
        _options("A", _cand("A", 40, 5, 10.0), _cand("A", 60, 5, 15.0)),
        _options("B", _cand("B", 30, 5, 8.0), _cand("B", 35, 5, 9.5), _cand("B", 50, 5, 12.0)),
    ]
    data = _input(options, [Segment(0, 100)])
    result = solve_packing(data)
    assert result.status is SolveStatus.OPTIMAL
    assert _served(result, data) == {"A": 0, "B": 1}
    assert result.optimality_gap == pytest.approx(0.0)


def test_throughput_is_capped_at_target() -> None:
    # A's wide option carries 15 but its target is 10, so it is worth no more than the narrow
    # one; with B needing the room, the optimum takes A narrow (40) and B wide (45):
    # 40 + 45 + 15 = 100 <= 100, throughput min(10,10) + 12 = 22 against A wide + B narrow
    # (60 + 25 + 15 = 100): min(15,10) + 6 = 16.
    options = [
        _options("A", _cand("A", 40, 5, 10.0), _cand("A", 60, 5, 15.0), target=10.0),
        _options("B", _cand("B", 25, 5, 6.0), _cand("B", 45, 5, 12.0)),
    ]
    data = _input(options, [Segment(0, 100)])
    assert _served(solve_packing(data), data) == {"A": 0, "B": 1}


def test_admission_keeps_the_higher_priority() -> None:
    # Only one of the two 60-wide carriers fits in 80 (60 + 2*5 = 70; two need 135).
    options = [
        _options("low", _cand("low", 60, 5, 100.0), priority=1),
        _options("high", _cand("high", 60, 5, 1.0), priority=5),
    ]
    data = _input(options, [Segment(0, 80)])
    assert set(_served(solve_packing(data), data)) == {"high"}


def test_edge_guard_stricter_than_neighbour_guard() -> None:
    # Guard 2 between carriers but 10 to the block edges:
    # 10 + 20 + 2 + 20 + 10 = 62 needed. Model bound: Σ(w+g) + max δ + max hR
    # = 44 + (10-2) + 10 = 62, exact here. 61 units leave one carrier out.
    for length, count in ((62, 2), (61, 1)):
        options = [_options(n, _cand(n, 20, 2, 1.0, edge=10)) for n in ("p", "q")]
        data = _input(options, [Segment(0, length)])
        assert len(_served(solve_packing(data), data)) == count


def test_min_bandwidth_prefers_lower_segment() -> None:
    # Two equal segments of 50; a single 30-wide carrier (+2*5 guards) goes in the lower one.
    options = [_options("a", _cand("a", 30, 5, 1.0))]
    data = _input(options, [Segment(0, 50), Segment(60, 110)], Objective.MIN_BANDWIDTH)
    result = solve_packing(data)
    assert list(result.chosen) == [0]


def test_min_bandwidth_takes_the_narrowest_candidate() -> None:
    options = [_options("a", _cand("a", 30, 5, 1.0), _cand("a", 20, 5, 1.0))]
    data = _input(options, [Segment(0, 100)], Objective.MIN_BANDWIDTH)
    assert _served(solve_packing(data), data) == {"a": 1}


def test_place_segment_positions_by_hand() -> None:
    seg = Segment(100, 200)
    items = [_cand("a", 20, 4, 1.0), _cand("b", 30, 2, 1.0)]
    # b (guard 2) first: 100 + 2 = 102, b occupies 102-132, gap max(2,4)=4 -> a at 136.
    assert place_segment(seg, items, pack_low=True) == [136, 102]


def test_place_segment_next_to_pinned_carrier() -> None:
    # Left boundary is a pinned carrier with guard 8: the gap is max(3, 8) = 8.
    seg = Segment(50, 100, left=Boundary.CARRIER, left_guard=8)
    assert place_segment(seg, [_cand("a", 10, 3, 1.0)], pack_low=True) == [58]


@settings(max_examples=40, deadline=None)
@given(
    st.lists(
        st.tuples(st.integers(2, 30), st.integers(0, 8), st.integers(0, 12)),
        min_size=1,
        max_size=6,
    ),
    st.integers(20, 140),
)
def test_solution_always_places_without_conflict(
    items: list[tuple[int, int, int]], length: int
) -> None:
    """Property: whatever the model admits, sorting places with every gap >= max(g_i, g_j)."""
    options = [
        _options(f"d{i}", _cand(f"d{i}", 2 * w, g, float(w), edge=e))
        for i, (w, g, e) in enumerate(items)
    ]
    seg = Segment(0, length)
    data = _input(options, [seg])
    result = solve_packing(data)
    picks = result.chosen.get(0, [])
    cands = [data.options[d].candidates[k].at(h) for d, k, h in picks]
    if not cands:
        return
    lows = place_segment(seg, cands, pack_low=False)
    spans = sorted(zip(lows, cands, strict=True), key=lambda lc: lc[0])
    first_low, first = spans[0]
    last_low, last = spans[-1]
    assert first_low - seg.start >= first.edge_units
    assert seg.stop - (last_low + last.width_units) >= last.edge_units
    for (lo_a, a), (lo_b, b) in itertools.pairwise(spans):
        assert lo_b - (lo_a + a.width_units) >= max(a.guard_units, b.guard_units)


@settings(max_examples=30, deadline=None)
@given(
    st.lists(st.tuples(st.integers(2, 20), st.integers(0, 6)), min_size=1, max_size=5),
    st.integers(10, 90),
)
def test_knapsack_matches_brute_force(items: list[tuple[int, int]], length: int) -> None:
    """Property: the number served equals the best subset found by trying all of them."""
    options = [_options(f"d{i}", _cand(f"d{i}", 2 * w, g, 1.0)) for i, (w, g) in enumerate(items)]
    data = _input(options, [Segment(0, length)])
    served = len(_served(solve_packing(data), data))
    best = 0
    for r in range(len(items) + 1):
        for subset in itertools.combinations(items, r):
            if not subset:
                continue
            need = sum(2 * w + g for w, g in subset) + max(g for _, g in subset)
            if need <= length:
                best = max(best, r)
    assert served == best


@settings(max_examples=20, deadline=None)
@given(
    st.lists(
        st.tuples(st.integers(2, 20), st.integers(0, 6), st.integers(1, 9)), min_size=1, max_size=5
    ),
    st.integers(20, 90),
)
def test_lp_relaxation_bounds_the_integer_optimum(
    items: list[tuple[int, int, int]], length: int
) -> None:
    """Property: the LP relaxation of the throughput stage is never below the integer optimum."""
    from ortools.sat.python import cp_model

    from solver.packing import throughput_lp_bound
    from solver.packing.model import make_choice_vars as _make_choice_vars
    from solver.packing.terms import throughput_term as _throughput_term

    options = [
        _options(f"d{i}", _cand(f"d{i}", 2 * w, g, float(t)), target=100.0)
        for i, (w, g, t) in enumerate(items)
    ]
    data = _input(options, [Segment(0, length)])
    result = solve_packing(data)
    v = _make_choice_vars(cp_model.CpModel(), data)
    term = _throughput_term(data, v, 2**40)
    assert term.coefficients is not None
    bound = throughput_lp_bound(data, list(v.x), term.coefficients, 0, 5.0)
    achieved = sum(
        term.coefficients[key] * (data.options[key[0]].candidates[key[1]].hi_half)
        for key in v.x
        if any(key[0] == d and key[1] == k for picks in result.chosen.values() for d, k, _ in picks)
    )
    assert bound >= achieved - 1e-6
