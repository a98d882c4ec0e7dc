"""The search driver: builds the model, runs the stages and reports progress.

Stage 1 settles admission (serve demands in priority order); stage 2 keeps that admission and
optimises the objective's other terms, starting from the best plan known, with the level search
(:mod:`solver.packing.levelsearch`) bounding it and, when the whole model cannot prove its plan,
solving the protection-level combinations one by one.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable, Mapping
from dataclasses import replace

from ortools.sat.python import cp_model

from solver.model import ProgressEvent, SolveStatus
from solver.packing.capacity import grown_start
from solver.packing.items import Key, PackingInput, PackingResult
from solver.packing.levelsearch import LevelSearch, search_levels
from solver.packing.model import (
    ChoiceVars,
    add_hints,
    at_most_one_carrier_per_demand,
    hint_solution,
    keep_levels,
    make_choice_vars,
    segment_capacity,
    segment_levels,
    switched_off,
)
from solver.packing.objective import StageObjective
from solver.packing.relaxation import throughput_lp_bound
from solver.packing.results import bounded, extract, from_choice, gap, no_solution
from solver.packing.terms import (
    INT_HEADROOM,
    lexicographic,
    objective_terms,
    stage_objective,
    throughput_term,
)

__all__ = [
    "FULL_MODEL_SHARE",
    "GAP_TOLERANCE",
    "LARGE_MODEL_ITEMS",
    "LP_BOUND_SHARE",
    "SEARCH_SHARE",
    "STAGE_ONE_SHARE",
    "solve_packing",
]

STAGE_ONE_SHARE = 0.3
"""Share of the time limit the admission stage may use (it usually proves optimal at once)."""

LARGE_MODEL_ITEMS = 1500
"""Variables above which presolve probing is switched off."""

SEARCH_SHARE = 0.4
"""Share of the (remaining) time limit the protection-level search may use."""

FULL_MODEL_SHARE = 0.4
"""Share of stage 2's time the whole model gets before the level combinations are solved one
by one (when the level search bounded each of them)."""

LP_BOUND_SHARE = 0.15
"""Share of the time limit kept for the LP-relaxation bound when CP-SAT has not proved optimal."""

GAP_TOLERANCE = 1e-4
"""A solve stops as optimal once the proven gap is below this fraction of the range of the
objective's last term (throughput, spectrum or margin): 0.01 %."""


# ---------------------------------------------------------------- one CP-SAT solve


class _Progress(cp_model.CpSolverSolutionCallback):
    """Reports each improving solution; stops the search when asked to."""

    def __init__(
        self, report: Callable[[ProgressEvent], None] | None, cancel: threading.Event | None
    ):
        super().__init__()
        self._report = report
        self._cancel = cancel
        self._start = time.perf_counter()

    def on_solution_callback(self) -> None:
        if self._cancel is not None and self._cancel.is_set():
            self.stop_search()
        if self._report is None:
            return
        obj, bound = self.objective_value, self.best_objective_bound
        self._report(
            ProgressEvent(
                elapsed_s=time.perf_counter() - self._start,
                objective_value=obj,
                best_bound=bound,
                optimality_gap=gap(obj, bound),
            )
        )


def _configure(solver: cp_model.CpSolver, data: PackingInput, gap_units: float, items: int) -> None:
    """Time limit, workers, seed and stopping gap: always set, never left to the defaults."""
    params = solver.parameters
    if items > LARGE_MODEL_ITEMS:
        # Presolve probing dominates short budgets on large models (CP-SAT notes, §1.8).
        params.cp_model_probing_level = 0
    params.absolute_gap_limit = max(gap_units, 1e-4)
    params.max_time_in_seconds = max(0.05, data.time_limit_s)
    params.num_workers = max(1, data.num_workers)
    params.random_seed = data.seed
    params.catch_sigint_signal = False  # solves may run off the main thread
    params.log_search_progress = False


def _watch_cancel(
    solver: cp_model.CpSolver, cancel: threading.Event, done: threading.Event
) -> None:
    """Stop the search once ``cancel`` is set; stop_search is ignored before solve() starts."""
    cancel.wait()
    while not done.is_set():
        solver.stop_search()
        done.wait(0.05)


def _run(
    model: cp_model.CpModel,
    data: PackingInput,
    budget_s: float,
    gap_units: float,
    progress: Callable[[ProgressEvent], None] | None,
    cancel: threading.Event | None,
) -> tuple[cp_model.CpSolver, cp_model.CpSolverStatus]:
    """Solve ``model`` within ``budget_s``, reporting to ``progress``, stopping on ``cancel``."""
    solver = cp_model.CpSolver()
    _configure(solver, replace(data, time_limit_s=budget_s), gap_units, len(model.proto.variables))
    done = threading.Event()
    if cancel is not None:
        threading.Thread(target=_watch_cancel, args=(solver, cancel, done), daemon=True).start()
    try:
        status = solver.solve(model, _Progress(progress, cancel))
    finally:
        done.set()
    return solver, status


# ---------------------------------------------------------------- stages


def solve_packing(
    data: PackingInput,
    *,
    progress: Callable[[ProgressEvent], None] | None = None,
    cancel: threading.Event | None = None,
) -> PackingResult:
    """Choose one candidate (or none) per demand and a segment for it.

    Parameters
    ----------
    data : PackingInput
        Candidates, segments, objective, weights and solver settings.
    progress : callable, optional
        Called with a :class:`ProgressEvent` for every improving solution.
    cancel : threading.Event, optional
        Set it to stop the search; the best solution so far is returned.

    Returns
    -------
    PackingResult
        Status, chosen candidates per segment, objective, bound, gap and solve time.
    """
    started = time.perf_counter()
    deadline = started + max(0.05, data.time_limit_s)
    model = cp_model.CpModel()
    v = make_choice_vars(model, data)
    at_most_one_carrier_per_demand(model, v)
    segment_levels(model, data, v)
    used = segment_capacity(model, data, v)
    terms = objective_terms(model, data, v, used)
    linear = terms[1].coefficients if len(terms) == 2 else None
    stage = stage_objective(data, v, terms)
    everyone = terms[0].upper

    # Stage 1: admission (serve demands in priority order).  A rounded plan from the level
    # search that serves everyone settles it without a solve, whatever the objective.
    probe = stage or StageObjective(
        throughput_term(data, v, INT_HEADROOM // (everyone + 1)).coefficients or {}
    )
    search = _search(data, v, probe, everyone, started + data.time_limit_s * SEARCH_SHARE)
    if search.choice is not None:
        admitted, start, proven = everyone, search.choice, True
        if stage is None:  # max_margin starts from the narrowest members
            start = {key: data.family_of(key).lo_half for key in start}
    else:
        model.maximize(terms[0].expr)
        add_hints(model, data, v)
        budget = max(0.05, data.time_limit_s * STAGE_ONE_SHARE)
        first, first_status = _run(model, data, budget, 0.5, None, cancel)
        if first_status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            return no_solution(time.perf_counter() - started)
        proven = first_status == cp_model.OPTIMAL
        admitted = round(first.objective_value)
        start = grown_start(data, list(v.x), v.read(first))
        if stage is not None and admitted != everyone:
            share = (deadline - time.perf_counter()) * SEARCH_SHARE
            search = _search(data, v, stage, admitted, time.perf_counter() + share)
            if search.choice is not None:
                start = max(start, search.choice, key=lambda c: stage.value(data, c))

    # Stage 2: keep that admission, optimise the rest (the CP-SAT notes' two-stage order,
    # rather than one objective with weights large enough to drown the LP bound).
    bound = search.bound if stage is not None else math.inf
    begun = stage.value(data, start) if stage is not None else None
    if progress is not None and begun is not None and proven:
        elapsed = time.perf_counter() - started
        progress(ProgressEvent(elapsed, begun, bound, gap(begun, bound)))
    slack = GAP_TOLERANCE * terms[-1].upper
    if proven and begun is not None and bound - begun <= slack:
        settled = from_choice(start, time.perf_counter() - started, begun)
        return bounded(settled, bound, proven=True, slack=slack)
    model.add(terms[0].expr >= admitted)
    outside = _keep_levels(model, data, v, search, start, stage)
    hint_solution(model, v, start)
    model.clear_objective()  # type: ignore[no-untyped-call]
    lexicographic(model, terms[1:])
    reserve = data.time_limit_s * LP_BOUND_SHARE if linear is not None and bound == math.inf else 0
    remaining = max(0.05, deadline - reserve - time.perf_counter())
    by_levels = stage is not None and proven and outside is None and bool(search.bounds)
    budget = remaining * FULL_MODEL_SHARE if by_levels else remaining
    second, second_status = _run(model, data, budget, slack, progress, cancel)
    elapsed = time.perf_counter() - started
    if second_status in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        done = proven and second_status == cp_model.OPTIMAL and outside is None
        result = extract(second, v, elapsed, proven=done)
        if outside is not None:  # CP-SAT's bound covers the kept levels only
            bound = max(outside, min(result.best_bound, bound))
            result = replace(result, best_bound=math.inf)
        if begun is not None and begun > result.objective_value:
            result = replace(from_choice(start, elapsed, begun), best_bound=result.best_bound)
    else:
        # Stage 2 found nothing in its time: the start is feasible by construction, so it is
        # the answer, with whatever bound is known.
        result = from_choice(start, elapsed, begun)
    if result.status is SolveStatus.OPTIMAL or stage is None:
        return result
    if by_levels and not (cancel is not None and cancel.is_set()):
        found = second_status in (cp_model.OPTIMAL, cp_model.FEASIBLE)
        incumbent = v.read(second) if found else dict(start)
        if result.objective_value > stage.value(data, incumbent):  # the start was better
            incumbent = dict(start)
        cp_bound = second.best_objective_bound if found else math.inf
        choice, value, bound = _by_combination(
            model, data, v, search, incumbent, result.objective_value, slack, deadline, cancel
        )
        result = from_choice(choice, time.perf_counter() - started, value)
        return bounded(result, min(bound, cp_bound), proven=proven, slack=slack)
    if bound < math.inf:
        return bounded(result, bound, proven=proven, slack=slack)
    if linear is None:
        return result
    return _tighten(
        result, data, list(v.x), linear, admitted, reserve, started, proven=proven, slack=slack
    )


def _by_combination(
    model: cp_model.CpModel,
    data: PackingInput,
    v: ChoiceVars,
    search: LevelSearch,
    incumbent: dict[Key, int],
    value: float,
    slack: float,
    deadline: float,
    cancel: threading.Event | None,
) -> tuple[dict[Key, int], float, float]:
    """Stage 2 one protection-level combination at a time, best LP optimum first, after the
    whole model could not prove its plan: each solve sees one level per segment (a model a
    fraction of the size), and none is needed once the incumbent is within ``slack`` of every
    combination left.  Returns the best choice, its value and a bound on every plan (the
    solved combinations' proven bounds and the others' LP optima)."""
    order = sorted(search.bounds, key=lambda cb: (-cb.value, sorted(cb.levels)))
    bounds = {cb.levels: cb.value for cb in order}
    for n, (combo, lp) in enumerate(order):
        left = deadline - time.perf_counter()
        if lp - value <= slack or left <= 0.05 or (cancel is not None and cancel.is_set()):
            break
        rivals = sum(1 for other in order[n:] if other.value - value > slack)
        if all(k.segment_level in combo for k in incumbent):
            hint_solution(model, v, incumbent)
        else:
            model.clear_hints()  # type: ignore[no-untyped-call]
        with switched_off(model, v.outside(combo)):
            solver, status = _run(model, data, left / rivals, slack, None, cancel)
        if status == cp_model.INFEASIBLE:
            bounds[combo] = -math.inf
        elif status in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            if solver.objective_value > value:
                value, incumbent = solver.objective_value, v.read(solver)
            bounds[combo] = min(lp, solver.best_objective_bound)
    return incumbent, value, max(value, *bounds.values())


def _keep_levels(
    model: cp_model.CpModel,
    data: PackingInput,
    v: ChoiceVars,
    search: LevelSearch,
    start: Mapping[Key, int],
    stage: StageObjective | None,
) -> float | None:
    """Keep the start's segments at its protection levels in stage 2 when no other level
    combination can beat the start (its LP optimum is no higher): the model shrinks to one
    level per segment and loses nothing.  Returns the bound on what is left out (None when
    nothing is kept)."""
    if stage is None or not search.bounds or not start:
        return None
    levels = {key.segment_level for key in start}
    outside = search.bound_outside(levels)
    if outside > stage.value(data, start):
        return None
    keep_levels(model, v, levels)
    return outside


def _search(
    data: PackingInput, v: ChoiceVars, stage: StageObjective, admitted: int, deadline: float
) -> LevelSearch:
    """The level search (bound and rounded plan) for a linear stage objective."""
    return search_levels(data, list(v.x), stage, admitted, deadline)


def _tighten(
    result: PackingResult,
    data: PackingInput,
    keys: list[Key],
    linear: dict[Key, int],
    admitted: int,
    budget_s: float,
    started: float,
    *,
    proven: bool,
    slack: float,
) -> PackingResult:
    """Report the tighter of CP-SAT's bound and the LP relaxation's."""
    lp = throughput_lp_bound(data, keys, linear, admitted, max(1.0, budget_s))
    tightened = bounded(result, lp, proven=proven, slack=slack) if math.isfinite(lp) else result
    return replace(tightened, solve_time_s=time.perf_counter() - started)
