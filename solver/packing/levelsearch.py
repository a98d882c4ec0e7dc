"""Search over the segments' protection levels: a tight bound and a near-optimal plan.

Every segment of a plan sits at one protection level, so the best plan is the best over the
level combinations of the best plan with those levels fixed.  With the levels fixed the
throughput stage is a multiple-choice knapsack per segment whose LP relaxation is nearly
integral: at a basic optimum only a few demands (about one per binding row) are split between
two choices.  So

* the largest LP optimum over all combinations is a valid upper bound on every plan, and a far
  tighter one than the relaxation with the levels left free (which may split a segment between
  levels), and
* rounding the best combinations' LP solutions — each demand takes its largest share, then the
  segment is narrowed or widened to fit (:func:`solver.packing.fit_segment`) — gives plans
  within a fraction of a percent of that bound on large instances.

The rounded plan is checked against the model's own capacity rows, so it is feasible in the
CP-SAT model and serves as its hint; CP-SAT then only has to close what rounding left.  When
there are more combinations than :data:`COMBINATION_LIMIT`, each segment takes the level with
the largest share in the relaxation with levels left free, and that relaxation is the bound.
"""

from __future__ import annotations

import itertools
import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import NamedTuple

from solver.packing.capacity import fit_segment, segment_room
from solver.packing.items import Key, PackingInput, Segment, SegmentLevel
from solver.packing.objective import StageObjective
from solver.packing.relaxation import Relaxation, solve_relaxation

__all__ = ["COMBINATION_LIMIT", "ComboBound", "LevelSearch", "round_relaxation", "search_levels"]

COMBINATION_LIMIT = 64
"""Level combinations solved one by one; above this the free-level relaxation is used."""


class ComboBound(NamedTuple):
    """One solved level combination: its (segment, level) pairs and its LP optimum."""

    levels: frozenset[SegmentLevel]
    value: float


@dataclass(frozen=True)
class LevelSearch:
    """What the search found.

    ``bound`` is a valid upper bound on the throughput stage (``math.inf`` when the time ran out
    before every combination was solved); ``choice`` the best rounded plan (half-width per
    item) and ``value`` its objective; ``combinations`` how many were solved as LPs.
    """

    bound: float
    choice: dict[Key, int] | None
    value: float
    combinations: int
    bounds: tuple[ComboBound, ...] = ()
    """Each solved combination and its LP optimum (empty when the combinations were not
    solved one by one)."""

    def bound_outside(self, levels: set[SegmentLevel]) -> float:
        """Largest LP optimum among combinations that put a segment of ``levels`` at another
        level: a bound on every plan outside the plans at ``levels``."""
        segments = {sl.segment for sl in levels}
        return max(
            (
                combo.value
                for combo in self.bounds
                if any(sl.segment in segments and sl not in levels for sl in combo.levels)
            ),
            default=0.0,
        )


def search_levels(
    data: PackingInput,
    keys: Sequence[Key],
    objective: StageObjective,
    admitted: int,
    deadline: float,
) -> LevelSearch:
    """Bound and round the throughput stage over every level combination (see module doc).

    Parameters
    ----------
    data : PackingInput
        The packing data.
    keys : sequence of Key
        The model's items (demand, family, segment, level).
    objective : StageObjective
        The stage's linear objective.
    admitted : int
        Admission value every plan must reach (Σ admission weight · served).
    deadline : float
        ``time.perf_counter()`` value by which the search stops.

    Returns
    -------
    LevelSearch
    """
    combos = _combinations(keys)
    if len(combos) > COMBINATION_LIMIT:
        return _free_levels(data, keys, objective, admitted, deadline)
    solved: list[Relaxation] = []
    bounds: list[ComboBound] = []
    bound = -math.inf
    for combo in combos:
        subset = [key for key in keys if key.segment_level in combo]
        left = deadline - time.perf_counter()
        if left <= 0:
            return _best(data, solved, objective, admitted, math.inf)
        relax = solve_relaxation(data, subset, objective, admitted, left)
        if relax.value == math.inf:  # stopped unsolved: no valid bound from this search
            return _best(data, solved, objective, admitted, math.inf)
        bound = max(bound, relax.value)
        if relax.solved:
            solved.append(relax)
            bounds.append(ComboBound(combo, relax.value))
    found = _best(data, solved, objective, admitted, max(bound, 0.0))
    return replace(found, bounds=tuple(bounds))


def _combinations(keys: Sequence[Key]) -> list[frozenset[SegmentLevel]]:
    """Every way to give each segment with items one of its items' levels."""
    by_segment: dict[int, list[int]] = {}
    for key in keys:
        levels = by_segment.setdefault(key.segment, [])
        if key.level not in levels:
            levels.append(key.level)
    segments = sorted(by_segment)
    return [
        frozenset(SegmentLevel(s, i) for s, i in zip(segments, combo, strict=True))
        for combo in itertools.product(*(sorted(by_segment[s]) for s in segments))
    ]


def _best(
    data: PackingInput,
    solved: list[Relaxation],
    objective: StageObjective,
    admitted: int,
    bound: float,
) -> LevelSearch:
    """Round the combinations in order of their LP optimum while one could still beat the best."""
    best: dict[Key, int] | None = None
    value = -math.inf
    for relax in sorted(solved, key=lambda r: -r.value):
        if relax.value <= value:
            break
        choice = round_relaxation(data, relax, objective, admitted)
        if choice is not None:
            got = objective.value(data, choice)
            if got > value:
                best, value = choice, got
    return LevelSearch(bound, best, value if best is not None else 0.0, len(solved))


class _Share(NamedTuple):
    """A level's total share of a segment in the free-level relaxation (the largest wins, ties
    to the higher level)."""

    total: float
    level: int


def _free_levels(
    data: PackingInput,
    keys: Sequence[Key],
    objective: StageObjective,
    admitted: int,
    deadline: float,
) -> LevelSearch:
    """Too many combinations: bound with the levels free, round at each segment's main level."""
    free = solve_relaxation(data, keys, objective, admitted, deadline - time.perf_counter())
    if not free.solved:
        return LevelSearch(free.value if free.value == math.inf else 0.0, None, 0.0, 1)
    share: dict[SegmentLevel, float] = {}
    for key, x in free.x.items():
        share[key.segment_level] = share.get(key.segment_level, 0.0) + x
    main: dict[int, _Share] = {}
    for sl, total in share.items():
        main[sl.segment] = max(main.get(sl.segment, _Share(-1.0, -1)), _Share(total, sl.level))
    subset = [key for key in keys if main[key.segment].level == key.level]
    fixed = solve_relaxation(data, subset, objective, admitted, deadline - time.perf_counter())
    result = _best(data, [fixed] if fixed.solved else [], objective, admitted, free.value)
    return LevelSearch(free.value, result.choice, result.value, 2)


def round_relaxation(
    data: PackingInput, relax: Relaxation, objective: StageObjective, admitted: int
) -> dict[Key, int] | None:
    """An integer plan from an LP solution, or None when rounding cannot make one.

    Each demand the LP serves (all of them when admission demands it, else those with at
    least half a share) takes its item with the largest share, at the half-width the LP gave
    that item; every segment is then fitted to its capacity row, leaving out the demands with
    the smallest shares while it is overfull and admission allows.
    """
    by_demand: dict[int, list[Key]] = {}
    for key in relax.x:
        by_demand.setdefault(key.demand, []).append(key)
    choice, share = _largest_shares(data, relax, objective, admitted, by_demand)
    spare = sum(data.admission_weights[key.demand] for key in choice) - admitted
    if spare < 0:
        return None
    fitted: dict[Key, int] = {}
    for s in sorted({key.segment for key in choice}):
        part = {k: h for k, h in choice.items() if k.segment == s}
        fit = _fit_leaving_out(
            data, data.segments[s], part, spare, relax, objective, by_demand, share
        )
        if fit is None:
            return None
        fitted.update(fit.choice)
        spare = fit.spare
    return fitted


def _largest_shares(
    data: PackingInput,
    relax: Relaxation,
    objective: StageObjective,
    admitted: int,
    by_demand: Mapping[int, list[Key]],
) -> tuple[dict[Key, int], dict[Key, float]]:
    """Each served demand's item with the largest share at the half-width the LP gave it, and
    the demand's whole share per chosen item."""
    present = sum(data.admission_weights[d] for d in by_demand)
    choice: dict[Key, int] = {}
    share: dict[Key, float] = {}
    for options in by_demand.values():
        total = sum(relax.x[k] for k in options)
        if present > admitted and total < 0.5:
            continue
        key = max(options, key=lambda k: (relax.x[k], objective.h.get(k, 0.0), k))
        fam = data.family_of(key)
        x = relax.x[key]
        half = math.floor(relax.h[key] / x + 1e-6) if x > 1e-9 else fam.lo_half
        choice[key] = min(max(half, fam.lo_half), fam.hi_half)
        share[key] = total
    return choice, share


class _Fitted(NamedTuple):
    """A segment's rounded part fitted to its capacity row, and the admission weight that may
    still be left out afterwards."""

    choice: dict[Key, int]
    spare: int


def _fit_leaving_out(
    data: PackingInput,
    seg: Segment,
    part: dict[Key, int],
    spare: int,
    relax: Relaxation,
    objective: StageObjective,
    by_demand: Mapping[int, list[Key]],
    share: dict[Key, float],
) -> _Fitted | None:
    """Fit ``part`` to ``seg``: while it is overfull, move a demand to a narrower item
    (:func:`_narrow_one`) or else leave out the demand with the smallest share whose admission
    weight ``spare`` allows.  None when nothing more may be left out."""
    weights = data.admission_weights
    while segment_room(data, seg, fit := fit_segment(data, seg, part, widen=objective.widen)) < 0:
        if _narrow_one(data, seg, part, by_demand, relax, share):
            continue
        optional = [k for k in part if weights[k.demand] <= spare]
        if not optional:
            return None
        drop = min(optional, key=lambda k: (share[k], objective.h.get(k, 0.0), k))
        spare -= weights[drop.demand]
        del part[drop]
    return _Fitted(fit, spare)


def _narrow_one(
    data: PackingInput,
    seg: Segment,
    part: dict[Key, int],
    by_demand: Mapping[int, list[Key]],
    relax: Relaxation,
    share: dict[Key, float],
) -> bool:
    """Move the least-settled demand of an overfull segment to the narrowest other item the LP
    gave it a share of in this segment, if that needs less room.  Returns whether it moved."""
    for key in sorted(part, key=lambda k: (relax.x[k], k)):
        others = [
            k
            for k in by_demand[key.demand]
            if k != key and k.segment == key.segment and relax.x[k] > 1e-9
        ]
        if not others:
            continue
        lowest = {k: data.family_of(k).lo_half for k in others}
        rest = {k: h for k, h in part.items() if k != key}
        best = max(others, key=lambda k: (segment_room(data, seg, rest | {k: lowest[k]}), k))
        now = {k: data.family_of(k).lo_half if k == key else h for k, h in part.items()}
        if segment_room(data, seg, rest | {best: lowest[best]}) > segment_room(data, seg, now):
            del part[key]
            part[best] = lowest[best]
            share[best] = share.pop(key)
            return True
    return False
