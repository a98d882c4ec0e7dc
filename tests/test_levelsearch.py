"""The protection-level search: its bound against brute force and a hand-worked instance.

The families here are test doubles whose guard steps with the segment's protection level (the
real ones take it from the emission profile), so every need is a round number and each
expected value is worked out in the test.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from ortools.sat.python import cp_model

from solver.model import CarrierConfig, Demand, Modulation, Objective, SolveStatus
from solver.packing import (
    GAP_TOLERANCE,
    SCALE,
    Key,
    PackingInput,
    Segment,
    StageObjective,
    admission_weights,
    round_relaxation,
    search_levels,
    segment_room,
    solve_packing,
    solve_relaxation,
)
from solver.packing.families import Candidate, DemandOptions, Family
from solver.packing.model import make_choice_vars as _make_choice_vars
from solver.packing.terms import throughput_term as _throughput_term

LEVELS = (10.0, 20.0)


@dataclass(frozen=True)
class _Stepped(Family):
    """A single-width family whose guard (raster units) is ``guard_at[level]``."""

    guard_at: tuple[tuple[float, int], ...] = ()

    def at(self, half: int, level_db: float | None = None) -> Candidate:
        level = self.sensitivity_db if level_db is None else level_db
        return replace(self.top, guard_units=dict(self.guard_at)[level])


_SPECS = st.lists(
    st.lists(
        st.tuples(
            st.integers(2, 15),  # half-width
            st.integers(0, 6),  # guard at 10 dB
            st.integers(0, 6),  # extra guard at 20 dB
            st.sampled_from([10.0, 20.0]),  # sensitivity
            st.integers(1, 9),  # throughput
        ),
        min_size=1,
        max_size=2,
    ),
    min_size=1,
    max_size=4,
)
"""Per demand, one or two families: (half-width, guards at 10 and 20 dB, sensitivity, rate)."""

_LENGTHS = st.lists(st.integers(10, 70), min_size=1, max_size=2)
"""One or two segments."""


def _families(specs: list[list[tuple[int, int, int, float, int]]]) -> list[list[_Stepped]]:
    return [
        [_family(f"d{i}", 2 * h, (g, g + dg), sens, float(t)) for h, g, dg, sens, t in fams]
        for i, fams in enumerate(specs)
    ]


def _family(demand: str, width: int, guards: tuple[int, int], sensitivity: float, thr: float):
    config = CarrierConfig(
        demand_id=demand,
        modulation=Modulation.QPSK,
        code_rate=None,
        rolloff=0.2,
        symbol_rate_baud=width / 1.2,
        bits_per_symbol=2,
        allocated_bandwidth_hz=float(width),
        occupied_bandwidth_hz=float(width),
        guard_hz=float(guards[0]),
        edge_guard_hz=0.0,
        throughput_bps=thr,
        esn0_db=20.0,
        required_esn0_db=10.0,
    )
    top = Candidate(config, width, guards[0], 0)
    half = width // 2
    return _Stepped(
        top, half, half, False, 1.0, sensitivity, guard_at=tuple(zip(LEVELS, guards, strict=True))
    )


def _input(
    families: list[list[_Stepped]],
    lengths: list[int],
    objective: Objective = Objective.MAX_THROUGHPUT,
) -> PackingInput:
    options = [
        DemandOptions(
            Demand(id=f"d{i}", min_rate_bps=1.0, target_rate_bps=1e3, priority=1, esn0_db=20.0),
            tuple(fams),
            "",
        )
        for i, fams in enumerate(families)
    ]
    starts = list(itertools.accumulate([0, *lengths]))
    return PackingInput(
        options=options,
        segments=[Segment(a, a + n) for a, n in zip(starts, lengths, strict=False)],
        objective=objective,
        admission_weights=admission_weights([o.demand for o in options]),
        priorities=[o.demand.priority for o in options],
        time_limit_s=5.0,
        num_workers=1,
        seed=1,
        levels=LEVELS,
    )


def _hand_worked() -> PackingInput:
    """The instance of the hand-worked test: A and B (sensitivity 10, 40 wide, guard 0 at
    10 dB and 20 at 20 dB), C (sensitivity 20, 20 wide, guard 0), one segment of 100."""
    return _input(
        [
            [_family("d0", 40, (0, 20), 10.0, 40.0)],
            [_family("d1", 40, (0, 20), 10.0, 40.0)],
            [_family("d2", 20, (0, 0), 20.0, 20.0)],
        ],
        [100],
    )


def _linear(data: PackingInput) -> tuple[list[Key], dict[Key, int]]:
    v = _make_choice_vars(cp_model.CpModel(), data)
    term = _throughput_term(data, v, 2**40)
    assert term.coefficients is not None
    return list(v.x), term.coefficients


def _brute_force(data: PackingInput, linear: dict[Key, int]) -> tuple[int, int]:
    """Best (served, throughput units) over every choice and every level per segment.

    The need is the model's Σ(w + g) + max δ + max hR; the edges need no guard here, so δ and
    hR are 0 and the need is Σ(w + g) (an upper bound on the sorted placement's need)."""
    picks = [
        [None, *((k, s) for k in range(len(o.candidates)) for s in range(len(data.segments)))]
        for o in data.options
    ]
    best = (0, 0)
    for choice in itertools.product(*picks):
        for levels in itertools.product(range(len(LEVELS)), repeat=len(data.segments)):
            served, value, ok = 0, 0, True
            for s, seg in enumerate(data.segments):
                cands = []
                for d, pick in enumerate(choice):
                    if pick is None or pick[1] != s:
                        continue
                    fam = data.options[d].candidates[pick[0]]
                    if fam.sensitivity_db > LEVELS[levels[s]]:
                        ok = False
                        break
                    cands.append(fam.at(fam.hi_half, LEVELS[levels[s]]))
                    served += 1
                    if sum(c.width_units + c.guard_units for c in cands) > seg.length:
                        ok = False
                        break
                    value += linear[d, pick[0], s, levels[s]] * fam.hi_half
                if not ok:
                    break
            if ok:
                best = max(best, (served, value))
    return best


def _brute_force_spectrum(data: PackingInput) -> tuple[int, float]:
    """Best (served, spectrum term) over every choice and level per segment, the term being
    the model's Σ_s (n + s)·(length − used)·SCALE over the n segments, with used = Σ(w + g)
    (edges need no guard here)."""
    n = len(data.segments)
    picks = [
        [None, *((k, s) for k in range(len(o.candidates)) for s in range(n))] for o in data.options
    ]
    best: tuple[int, float] = (0, -math.inf)
    for choice in itertools.product(*picks):
        for levels in itertools.product(range(len(LEVELS)), repeat=n):
            served, free, ok = 0, 0.0, True
            for s, seg in enumerate(data.segments):
                used = 0
                for d, pick in enumerate(choice):
                    if pick is None or pick[1] != s:
                        continue
                    fam = data.options[d].candidates[pick[0]]
                    if fam.sensitivity_db > LEVELS[levels[s]]:
                        ok = False
                        break
                    c = fam.at(fam.hi_half, LEVELS[levels[s]])
                    used += c.width_units + c.guard_units
                    served += 1
                ok = ok and used <= seg.length
                if not ok:
                    break
                free += (n + s) * (seg.length - used) * SCALE
            if ok:
                best = max(best, (served, free))
    return best


def test_level_search_bound_is_exact_where_free_levels_are_loose() -> None:
    """One segment of 100 with edges needing no guard, so a segment needs Σ(w + g); levels 10
    and 20 dB.  A and B (sensitivity 10) are 40 wide with a guard of 0 at level 10 and 20 at
    level 20; C (sensitivity 20) is 20 wide with guard 0; each carries its width in bit/s.

    All three need level 20: 60 + 60 + 20 = 140 > 100, so two are admitted.  A + B at level 10
    need 40 + 40 = 80 and carry 80; A + C at level 20 need 60 + 20 = 80 and carry 60.
    Optimum: 80.

    Levels fixed, the LP is exact: at 10 (C has no item there, so A and B must both be
    served) A + B fit whole: 80; at 20, 40(x_A + x_B) + 20x_C with 60(x_A + x_B) + 20x_C ≤ 100
    and x_A + x_B + x_C ≥ 2 gives x_C = 1, x_A + x_B = 4/3: 73.3.  Bound max(80, 73.3) = 80.

    Levels free (z₁₀ = a, z₂₀ = 1 − a), A and B take share a at level 10 and t = 1 − a at
    level 20, C takes 1 − a: capacity 80a + 120(1 − a) + 20(1 − a) ≤ 100 holds for a ≥ 2/3,
    admission 2 + (1 − a) ≥ 2 holds, and the value 80 + 20(1 − a) is 86.7 at a = 2/3: the free
    relaxation is 8 % loose here.
    """
    data = _hand_worked()
    keys, linear = _linear(data)
    per_bps = linear[0, 0, 0, 0] * 20 / 40.0  # units per bit/s (half-width 20 carries 40)
    result = solve_packing(data)
    assert result.status is SolveStatus.OPTIMAL
    assert result.objective_value == pytest.approx(80 * per_bps, abs=1e-6)
    admitted = 2
    search = search_levels(data, keys, StageObjective(linear), admitted, math.inf)
    assert math.isclose(search.bound, 80 * per_bps, rel_tol=1e-6)
    free = solve_relaxation(data, keys, StageObjective(linear), admitted, 5.0)
    assert free.value >= 86.6 * per_bps


@settings(max_examples=40, deadline=None)
@given(_SPECS, _LENGTHS)
def test_search_bound_and_rounding_against_brute_force(
    specs: list[list[tuple[int, int, int, float, int]]], lengths: list[int]
) -> None:
    """Property: the level search's bound is never below the brute-force optimum, its rounded
    plan fits every segment by the model's own rows, and the packing reaches that optimum."""
    families = _families(specs)
    data = _input(families, lengths)
    keys, linear = _linear(data)
    served, best = _brute_force(data, linear)
    result = solve_packing(data)
    got = sum(len(p) for p in result.chosen.values())
    assert got == served
    # The packing stops within 0.01 % of its bound (GAP_TOLERANCE), never above the optimum.
    assert result.objective_value <= best + 1e-6
    assert result.objective_value == pytest.approx(best, rel=GAP_TOLERANCE, abs=1e-6)
    if not keys:
        return
    admitted = sum(data.admission_weights[d] for p in result.chosen.values() for d, _, _ in p)
    search = search_levels(data, keys, StageObjective(linear), admitted, math.inf)
    assert search.bound >= best - 1e-6
    if search.choice is not None:
        assert search.value <= best + 1e-6
        for s, seg in enumerate(data.segments):
            part = {k: h for k, h in search.choice.items() if k[2] == s}
            assert segment_room(data, seg, part) >= 0
            assert len({k[3] for k in part}) <= 1  # one level per segment
        assert len({k[0] for k in search.choice}) == len(search.choice)


@settings(max_examples=25, deadline=None)
@given(_SPECS, _LENGTHS)
def test_min_bandwidth_matches_brute_force(
    specs: list[list[tuple[int, int, int, float, int]]], lengths: list[int]
) -> None:
    """Property: ``min_bandwidth`` (through the level search's spectrum objective) serves as
    many as brute force and leaves the same weighted free spectrum, reported optimal."""
    families = _families(specs)
    data = _input(families, lengths, Objective.MIN_BANDWIDTH)
    served, free = _brute_force_spectrum(data)
    result = solve_packing(data)
    assert sum(len(p) for p in result.chosen.values()) == served
    assert result.status is SolveStatus.OPTIMAL
    if served:
        # The term only counts segments the model has items in.
        keys, _ = _linear(data)
        empty = set(range(len(lengths))) - {k[2] for k in keys}
        n = len(lengths)
        free -= sum((n + s) * lengths[s] * SCALE for s in empty)
        assert result.objective_value == pytest.approx(free, abs=1e-6)


def test_rounding_leaves_out_only_what_admission_allows() -> None:
    """Two 40-wide carriers in a segment of 60 (guards 0): the LP serves one whole and the
    other by half (40 + 20 = 60 wide).  With admission 2 rounding must keep both and cannot
    (80 > 60): no plan.  With admission 1 it leaves out the half-served one."""
    data = _input(
        [[_family("d0", 40, (0, 0), 10.0, 40.0)], [_family("d1", 40, (0, 0), 10.0, 40.0)]],
        [60],
    )
    keys, linear = _linear(data)
    relax = solve_relaxation(data, [k for k in keys if k[3] == 0], StageObjective(linear), 1, 5.0)
    assert relax.solved
    assert round_relaxation(data, relax, StageObjective(linear), 2) is None
    plan = round_relaxation(data, relax, StageObjective(linear), 1)
    assert plan is not None
    assert len(plan) == 1


def test_too_many_combinations_fall_back_to_the_free_levels(monkeypatch) -> None:
    """Above the combination limit the bound is the free-level relaxation (86.7 on the instance
    of the hand-worked test, still ≥ the optimum 80) and the plan is rounded at each segment's
    level with the largest share; the packing still reaches the optimum."""
    import solver.packing.levelsearch as levelsearch

    monkeypatch.setattr(levelsearch, "COMBINATION_LIMIT", 1)
    data = _hand_worked()
    keys, linear = _linear(data)
    per_bps = linear[0, 0, 0, 0] * 20 / 40.0
    search = search_levels(data, keys, StageObjective(linear), 2, math.inf)
    assert search.bounds == ()
    assert search.bound >= 86.6 * per_bps
    if search.choice is not None:
        assert segment_room(data, data.segments[0], search.choice) >= 0
        assert search.value <= 80 * per_bps + 1e-6
    result = solve_packing(data)
    assert result.objective_value == pytest.approx(80 * per_bps, abs=1e-6)


@settings(max_examples=20, deadline=None)
@given(_SPECS, _LENGTHS)
def test_level_by_level_stage_two_reaches_the_optimum(
    specs: list[list[tuple[int, int, int, float, int]]],
    lengths: list[int],
) -> None:
    """Property: when the whole model gets no time at all, solving the level combinations one
    by one still reaches the brute-force optimum and proves it."""
    import solver.packing.driver as packing

    real_run = packing._run

    def run(model, data, budget, *args, **kwargs):  # type: ignore[no-untyped-def]
        if budget <= 0.0:  # the whole-model stage 2: pretend it found nothing
            return cp_model.CpSolver(), cp_model.UNKNOWN
        return real_run(model, data, budget, *args, **kwargs)

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(packing, "FULL_MODEL_SHARE", 0.0)
        patch.setattr(packing, "_run", run)
        data = _input(_families(specs), lengths)
        _, linear = _linear(data)
        served, best = _brute_force(data, linear)
        result = solve_packing(data)
    assert sum(len(p) for p in result.chosen.values()) == served
    assert result.objective_value <= best + 1e-6
    assert result.objective_value == pytest.approx(best, rel=GAP_TOLERANCE, abs=1e-6)
    assert result.status is SolveStatus.OPTIMAL
