"""Packing results: read from a solver, made from a known choice, and bounded."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import replace

import ortools
from ortools.sat.python import cp_model

from solver.model import SolveStatus
from solver.packing.items import Key, PackingResult, Pick
from solver.packing.model import ChoiceVars

__all__ = ["bounded", "extract", "from_choice", "gap", "no_solution"]


def _version() -> str:
    return str(getattr(ortools, "__version__", "unknown"))


def gap(objective: float, bound: float) -> float:
    """Relative gap between an objective and its bound (relative to at least 1)."""
    return abs(bound - objective) / max(1.0, abs(objective))


def from_choice(chosen: Mapping[Key, int], elapsed: float, value: float | None) -> PackingResult:
    """A result made from a known choice: its objective ``value`` when known, and no bound yet
    (gap 1 until one is found)."""
    picks: dict[int, list[Pick]] = {}
    levels: dict[int, int] = {}
    for key, h in sorted(chosen.items()):
        picks.setdefault(key.segment, []).append(Pick(key.demand, key.family, h))
        levels[key.segment] = key.level
    bound = math.inf if value is not None else 0.0
    objective = value if value is not None else 0.0
    return PackingResult(
        SolveStatus.FEASIBLE, picks, levels, objective, bound, 1.0, elapsed, _version()
    )


RELATIVE_GAP = 1e-4
"""A bound within this fraction of itself (0.01 %) closes a stage, whatever its slack."""


def closed(bound: float, value: float, slack: float = math.inf) -> bool:
    """Whether ``bound`` lies within ``slack`` (units of the term) and within
    :data:`RELATIVE_GAP` of itself above ``value``."""
    return bound - value <= min(slack, RELATIVE_GAP * max(abs(bound), 1.0))


def no_solution(elapsed: float) -> PackingResult:
    """The result when not even admission found a plan."""
    return PackingResult(SolveStatus.INFEASIBLE, {}, {}, 0.0, 0.0, 0.0, elapsed, _version())


def extract(
    solver: cp_model.CpSolver, v: ChoiceVars, elapsed: float, *, proven: bool
) -> PackingResult:
    """Read the choice, the objective of the last stage, its bound and relative gap."""
    chosen: dict[int, list[Pick]] = {}
    levels: dict[int, int] = {}
    for key, var in v.x.items():
        if solver.boolean_value(var):
            half = int(solver.value(v.half[key]))
            chosen.setdefault(key.segment, []).append(Pick(key.demand, key.family, half))
            levels[key.segment] = key.level
    obj, bound = solver.objective_value, solver.best_objective_bound
    state = SolveStatus.OPTIMAL if proven and closed(bound, obj) else SolveStatus.FEASIBLE
    return PackingResult(state, chosen, levels, obj, bound, gap(obj, bound), elapsed, _version())


def bounded(result: PackingResult, bound: float, *, proven: bool, slack: float) -> PackingResult:
    """``result`` with the tighter of its bound and ``bound``; optimal once the bound is within
    ``slack`` of the objective (the same stopping rule CP-SAT is given; see
    :data:`~solver.packing.driver.GAP_TOLERANCE`) and the admission before it was ``proven``
    optimal."""
    best = min(result.best_bound, math.floor(bound + 1e-6))
    done = closed(best, result.objective_value, slack)
    status = SolveStatus.OPTIMAL if proven and done else SolveStatus.FEASIBLE
    return replace(
        result, best_bound=best, optimality_gap=gap(result.objective_value, best), status=status
    )
