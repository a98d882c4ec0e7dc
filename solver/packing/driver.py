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
from dataclasses import dataclass, replace

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
from solver.packing.results import (
    RELATIVE_GAP,
    bounded,
    closed,
    extract,
    from_choice,
    gap,
    no_solution,
)
from solver.packing.terms import (
    INT_HEADROOM,
    Term,
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
    # Stop within the stage's slack only once also within 0.01 % of the bound itself (an
    # integer objective: a gap under 0.5 is none).
    params.absolute_gap_limit = min(max(gap_units, 1e-4), 0.5)
    params.relative_gap_limit = RELATIVE_GAP
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


# ---------------------------------------------------------------- what the stages share


@dataclass(frozen=True)
class _Call:
    """One call of :func:`solve_packing`: its clock, its progress report and its cancel."""

    started: float
    deadline: float
    progress: Callable[[ProgressEvent], None] | None
    cancel: threading.Event | None

    def elapsed(self) -> float:
        return time.perf_counter() - self.started

    def cancelled(self) -> bool:
        return self.cancel is not None and self.cancel.is_set()


@dataclass(frozen=True)
class _Built:
    """The model, its variables, its objective terms (admission first) and the stage-2 term as
    a linear :class:`StageObjective` (None for ``max_margin``)."""

    model: cp_model.CpModel
    v: ChoiceVars
    terms: list[Term]
    stage: StageObjective | None

    @property
    def admission(self) -> Term:
        """The first term: Σ admission weight · served."""
        return self.terms[0]

    @property
    def everyone(self) -> int:
        """Admission value of a plan that serves every demand with an item."""
        return self.admission.upper

    @property
    def linear(self) -> dict[Key, int] | None:
        """Per-item coefficients of a stage-2 term linear in the half-widths, if it is one."""
        return self.terms[1].coefficients if len(self.terms) == 2 else None

    @property
    def slack(self) -> float:
        """The stopping gap, in units of the last term (see :data:`GAP_TOLERANCE`)."""
        return GAP_TOLERANCE * self.terms[-1].upper


@dataclass(frozen=True)
class _Admission:
    """What stage 1 settled: the admission value every plan must keep, the start of stage 2
    (half-width per item), whether the admission is proven optimal and the level search behind
    it; ``value`` is the start's stage-2 value and ``bound`` the bound on every plan (None and
    infinity without a linear stage objective)."""

    admitted: int
    start: dict[Key, int]
    proven: bool
    search: LevelSearch
    value: float | None
    bound: float


@dataclass(frozen=True)
class _Second:
    """Stage 2's whole-model solve: the result so far, the bound known beside CP-SAT's, the
    solver and whether it found a plan."""

    result: PackingResult
    bound: float
    solver: cp_model.CpSolver
    found: bool


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
    call = _Call(started, started + max(0.05, data.time_limit_s), progress, cancel)
    built = _build(data)
    admission = _admit(data, built, call)
    if admission is None:
        return no_solution(call.elapsed())
    return _improve(data, built, admission, call)


def _build(data: PackingInput) -> _Built:
    """The model in its fixed order: variables, constraints, objective terms."""
    model = cp_model.CpModel()
    v = make_choice_vars(model, data)
    at_most_one_carrier_per_demand(model, v)
    segment_levels(model, data, v)
    used = segment_capacity(model, data, v)
    terms = objective_terms(model, data, v, used)
    return _Built(model, v, terms, stage_objective(data, v, terms))


def _admission(
    data: PackingInput,
    built: _Built,
    admitted: int,
    start: dict[Key, int],
    proven: bool,
    search: LevelSearch,
) -> _Admission:
    """Stage 1's outcome with the start's stage-2 value and the level search's bound."""
    if built.stage is None:
        return _Admission(admitted, start, proven, search, None, math.inf)
    return _Admission(admitted, start, proven, search, built.stage.value(data, start), search.bound)


def _admit(data: PackingInput, built: _Built, call: _Call) -> _Admission | None:
    """Stage 1: admission (serve demands in priority order).

    A rounded plan from the level search that serves everyone settles it without a solve,
    whatever the objective; otherwise CP-SAT maximises admission (:func:`_admit_by_solve`).
    None when not even that finds a plan.
    """
    everyone = built.everyone
    probe = built.stage or StageObjective(
        throughput_term(data, built.v, INT_HEADROOM // (everyone + 1)).coefficients or {}
    )
    deadline = call.started + data.time_limit_s * SEARCH_SHARE
    search = _search(data, built.v, probe, everyone, deadline)
    if search.choice is None:
        return _admit_by_solve(data, built, call, search)
    start = search.choice
    if built.stage is None:  # max_margin starts from the narrowest members
        start = {key: data.family_of(key).lo_half for key in start}
    return _admission(data, built, everyone, start, True, search)


def _admit_by_solve(
    data: PackingInput, built: _Built, call: _Call, search: LevelSearch
) -> _Admission | None:
    """Stage 1 by CP-SAT: admission alone, from the hinted decisions.  Its plan, grown
    (:func:`~solver.packing.capacity.grown_start`), starts stage 2 unless the level search at
    the admission reached rounds a better one."""
    model, v, stage = built.model, built.v, built.stage
    model.maximize(built.admission.expr)
    add_hints(model, data, v)
    budget = max(0.05, data.time_limit_s * STAGE_ONE_SHARE)
    first, status = _run(model, data, budget, 0.5, None, call.cancel)
    if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return None
    admitted = round(first.objective_value)
    start = grown_start(data, list(v.x), v.read(first))
    if stage is not None and admitted != built.everyone:
        share = (call.deadline - time.perf_counter()) * SEARCH_SHARE
        search = _search(data, v, stage, admitted, time.perf_counter() + share)
        if search.choice is not None:
            start = max(start, search.choice, key=lambda c: stage.value(data, c))
    return _admission(data, built, admitted, start, status == cp_model.OPTIMAL, search)


def _improve(data: PackingInput, built: _Built, adm: _Admission, call: _Call) -> PackingResult:
    """Stage 2: keep that admission, optimise the rest (the CP-SAT notes' two-stage order,
    rather than one objective with weights large enough to drown the LP bound).

    The start is the answer when the level search's bound is already within the slack.
    Otherwise the whole model is solved from it; when that cannot prove its plan, the level
    combinations are solved one by one, or the bound is tightened by the LP relaxation.
    """
    _report_start(adm, call)
    if adm.proven and adm.value is not None and closed(adm.bound, adm.value, built.slack):
        settled = from_choice(adm.start, call.elapsed(), adm.value)
        return bounded(settled, adm.bound, proven=True, slack=built.slack)
    outside = _stage_two_model(data, built, adm)
    lp_reserve = built.linear is not None and adm.bound == math.inf
    reserve = data.time_limit_s * LP_BOUND_SHARE if lp_reserve else 0
    remaining = max(0.05, call.deadline - reserve - time.perf_counter())
    stage = built.stage
    by_levels = stage is not None and adm.proven and outside is None and bool(adm.search.bounds)
    budget = remaining * FULL_MODEL_SHARE if by_levels else remaining
    second = _solve_whole(data, built, adm, call, budget, outside)
    result = second.result
    if result.status is SolveStatus.OPTIMAL or stage is None:
        return result
    if by_levels and not call.cancelled():
        return _by_levels(data, built, stage, adm, call, second)
    if second.bound < math.inf:
        return bounded(result, second.bound, proven=adm.proven, slack=built.slack)
    if built.linear is None:
        return result
    return _tighten(data, built, built.linear, result, adm, reserve, call)


def _report_start(adm: _Admission, call: _Call) -> None:
    """Report the start of stage 2 as the first progress, once its admission is proven."""
    if call.progress is not None and adm.value is not None and adm.proven:
        event = ProgressEvent(call.elapsed(), adm.value, adm.bound, gap(adm.value, adm.bound))
        call.progress(event)


def _stage_two_model(data: PackingInput, built: _Built, adm: _Admission) -> float | None:
    """Make the model stage 2's: the admission reached is kept (hard), the start's levels too
    where nothing else can win (:func:`_keep_levels`), the start is hinted, and the other
    terms are maximised in order.  Returns the bound on the plans outside kept levels (None
    when none are kept)."""
    model = built.model
    model.add(built.admission.expr >= adm.admitted)
    outside = _keep_levels(model, data, built.v, adm.search, adm.start, built.stage)
    hint_solution(model, built.v, adm.start)
    model.clear_objective()  # type: ignore[no-untyped-call]
    lexicographic(model, built.terms[1:])
    return outside


def _solve_whole(
    data: PackingInput,
    built: _Built,
    adm: _Admission,
    call: _Call,
    budget_s: float,
    outside: float | None,
) -> _Second:
    """Stage 2 on the whole model within ``budget_s``.  The start stays the answer when CP-SAT
    finds nothing better: it is feasible by construction."""
    solver, status = _run(built.model, data, budget_s, built.slack, call.progress, call.cancel)
    elapsed = call.elapsed()
    if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        # Stage 2 found nothing in its time: the start is the answer, with whatever bound is
        # known.
        return _Second(from_choice(adm.start, elapsed, adm.value), adm.bound, solver, False)
    done = adm.proven and status == cp_model.OPTIMAL and outside is None
    result = extract(solver, built.v, elapsed, proven=done)
    bound = adm.bound
    if outside is not None:  # CP-SAT's bound covers the kept levels only
        bound = max(outside, min(result.best_bound, bound))
        result = replace(result, best_bound=math.inf)
    if adm.value is not None and adm.value > result.objective_value:
        result = replace(from_choice(adm.start, elapsed, adm.value), best_bound=result.best_bound)
    return _Second(result, bound, solver, True)


def _by_levels(
    data: PackingInput,
    built: _Built,
    stage: StageObjective,
    adm: _Admission,
    call: _Call,
    second: _Second,
) -> PackingResult:
    """Stage 2 continued one level combination at a time (:func:`_by_combination`) from the
    better of the whole model's plan and the start, bounded by both searches."""
    incumbent = built.v.read(second.solver) if second.found else dict(adm.start)
    if second.result.objective_value > stage.value(data, incumbent):  # the start was better
        incumbent = dict(adm.start)
    cp_bound = second.solver.best_objective_bound if second.found else math.inf
    value = second.result.objective_value
    choice, value, bound = _by_combination(data, built, adm.search, incumbent, value, call)
    result = from_choice(choice, call.elapsed(), value)
    return bounded(result, min(bound, cp_bound), proven=adm.proven, slack=built.slack)


def _by_combination(
    data: PackingInput,
    built: _Built,
    search: LevelSearch,
    incumbent: dict[Key, int],
    value: float,
    call: _Call,
) -> tuple[dict[Key, int], float, float]:
    """Stage 2 one protection-level combination at a time, best LP optimum first, after the
    whole model could not prove its plan: each solve sees one level per segment (a model a
    fraction of the size), and none is needed once the incumbent is within the slack of every
    combination left.  Returns the best choice, its value and a bound on every plan (the
    solved combinations' proven bounds and the others' LP optima)."""
    model, v, slack = built.model, built.v, built.slack
    order = sorted(search.bounds, key=lambda cb: (-cb.value, sorted(cb.levels)))
    bounds = {cb.levels: cb.value for cb in order}
    for n, (combo, lp) in enumerate(order):
        left = call.deadline - time.perf_counter()
        if closed(lp, value, slack) or left <= 0.05 or call.cancelled():
            break
        rivals = sum(1 for other in order[n:] if not closed(other.value, value, slack))
        if all(k.segment_level in combo for k in incumbent):
            hint_solution(model, v, incumbent)
        else:
            model.clear_hints()  # type: ignore[no-untyped-call]
        with switched_off(model, v.outside(combo)):
            solver, status = _run(model, data, left / rivals, slack, None, call.cancel)
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
    data: PackingInput,
    built: _Built,
    linear: dict[Key, int],
    result: PackingResult,
    adm: _Admission,
    budget_s: float,
    call: _Call,
) -> PackingResult:
    """Report the tighter of CP-SAT's bound and the LP relaxation's (of the term ``linear``)."""
    lp = throughput_lp_bound(data, list(built.v.x), linear, adm.admitted, max(1.0, budget_s))
    if math.isfinite(lp):
        result = bounded(result, lp, proven=adm.proven, slack=built.slack)
    return replace(result, solve_time_s=call.elapsed())
