"""The CP-SAT packing model: one candidate (or none) per demand, in one free segment each.

Exclusions and pinned carriers split the block into free segments.  Inside one segment the best
order of carriers is ascending guard need: the gap between neighbours is the larger of their two
guards, so each guard but the smallest is paid once between neighbours.  With ``w`` the width,
``g`` the guard, ``hL``/``hR`` the guard a carrier needs towards the segment's left/right
boundary and ``δ = max(hL - g, 0)``, the width a set of carriers needs is at most::

    Σ (w + g) + max δ + max hR

which is exact (Σ(w + g) + max g) when both boundaries are block edges at the plan's own limit.
The model is therefore a multiple-choice knapsack per segment, which CP-SAT proves quickly;
positions follow by sorting (:func:`place_segment`).

The model reads in a fixed order: data, variables, constraints, objective, solve, extract.
Every rule is one small function that says what it enforces and whether it is hard or soft.
"""

from __future__ import annotations

import itertools
import logging
import math
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from enum import StrEnum

import ortools
from ortools.sat.python import cp_model

from solver.candidates import Candidate, DemandOptions
from solver.model import Demand, Objective, ProgressEvent, SolveStatus

__all__ = [
    "Boundary",
    "PackingInput",
    "PackingResult",
    "Segment",
    "admission_weights",
    "place_segment",
    "solve_packing",
]

log = logging.getLogger(__name__)

_INT_HEADROOM = 2**60
"""Largest objective magnitude we allow; CP-SAT works on int64."""

_THROUGHPUT_LEVELS = 1_000_000
"""Finest resolution of the throughput term: the largest target maps to this many units (fewer
when the admission weights leave less integer headroom)."""

_MARGIN_STEP_DB = 0.1
"""Resolution of the margin term of ``max_margin``."""


class Boundary(StrEnum):
    """What lies beyond one end of a free segment."""

    EDGE = "edge"  # the block edge or an exclusion: the edge leakage limit applies
    CARRIER = "carrier"  # a pinned carrier: the gap is the larger of the two guards


@dataclass(frozen=True)
class Segment:
    """A free stretch of the block, in raster units from the block start."""

    start: int
    stop: int
    left: Boundary = Boundary.EDGE
    right: Boundary = Boundary.EDGE
    left_guard: int = 0
    right_guard: int = 0

    @property
    def length(self) -> int:
        return self.stop - self.start

    def left_need(self, cand: Candidate) -> int:
        """Guard ``cand`` needs towards the left boundary (raster units)."""
        if self.left is Boundary.EDGE:
            return cand.edge_units
        return max(cand.guard_units, self.left_guard)

    def right_need(self, cand: Candidate) -> int:
        """Guard ``cand`` needs towards the right boundary (raster units)."""
        if self.right is Boundary.EDGE:
            return cand.edge_units
        return max(cand.guard_units, self.right_guard)

    def fits_alone(self, cand: Candidate) -> bool:
        return self.left_need(cand) + cand.width_units + self.right_need(cand) <= self.length


@dataclass(frozen=True)
class PackingInput:
    """Everything the model needs, already on the raster grid."""

    options: Sequence[DemandOptions]
    segments: Sequence[Segment]
    objective: Objective
    admission_weights: Sequence[int]
    priorities: Sequence[int]
    time_limit_s: float
    num_workers: int
    seed: int
    forbidden: frozenset[tuple[str, int]] = frozenset()
    hints: dict[str, int] = field(default_factory=dict)


@dataclass(frozen=True)
class PackingResult:
    """The solver's choice: per segment, the (demand index, candidate index) pairs it holds."""

    status: SolveStatus
    chosen: dict[int, list[tuple[int, int]]]
    objective_value: float
    best_bound: float
    optimality_gap: float
    solve_time_s: float
    solver_version: str


@dataclass
class _Vars:
    x: dict[tuple[int, int, int], cp_model.IntVar]
    served: dict[int, cp_model.LinearExpr]


def admission_weights(demands: Sequence[Demand]) -> list[int]:
    """Weights that make serving one demand worth more than every lower-priority demand together."""
    levels = sorted({d.priority for d in demands})
    weight_of: dict[int, int] = {}
    below = 0
    for level in levels:
        weight_of[level] = below + 1
        below += weight_of[level] * sum(1 for d in demands if d.priority == level)
    return [weight_of[d.priority] for d in demands]


# ---------------------------------------------------------------- variables


def _make_choice_vars(model: cp_model.CpModel, data: PackingInput) -> _Vars:
    """One boolean per (demand, candidate, segment) where the candidate fits the segment alone."""
    x: dict[tuple[int, int, int], cp_model.IntVar] = {}
    served: dict[int, cp_model.LinearExpr] = {}
    for d, opts in enumerate(data.options):
        for k, cand in enumerate(opts.candidates):
            if (opts.demand.id, k) in data.forbidden:
                continue
            for s, seg in enumerate(data.segments):
                if seg.fits_alone(cand):
                    x[d, k, s] = model.new_bool_var(f"x_{d}_{k}_{s}")
        choices = [v for (dd, _, _), v in x.items() if dd == d]
        if choices:
            served[d] = cp_model.LinearExpr.sum(choices)
    return _Vars(x, served)


# ---------------------------------------------------------------- constraints


def _at_most_one_carrier_per_demand(model: cp_model.CpModel, v: _Vars) -> None:
    """Hard: a demand gets one configuration in one segment, or none."""
    by_demand: dict[int, list[cp_model.IntVar]] = {}
    for (d, _, _), var in v.x.items():
        by_demand.setdefault(d, []).append(var)
    for choices in by_demand.values():
        model.add_at_most_one(choices)


def _segment_capacity(
    model: cp_model.CpModel, data: PackingInput, v: _Vars
) -> dict[int, cp_model.LinearExprT]:
    """Hard: Σ(w + g) + max δ + max hR fits in every segment (see the module docstring)."""
    used: dict[int, cp_model.LinearExprT] = {}
    for s, seg in enumerate(data.segments):
        items = [(d, k, var) for (d, k, ss), var in v.x.items() if ss == s]
        if not items:
            continue
        cands = [data.options[d].candidates[k] for d, k, _ in items]
        deltas = [max(seg.left_need(c) - c.guard_units, 0) for c in cands]
        rights = [seg.right_need(c) for c in cands]
        delta_max = model.new_int_var(0, max(deltas), f"delta_{s}")
        right_max = model.new_int_var(0, max(rights), f"right_{s}")
        for (_, _, var), delta, right in zip(items, deltas, rights, strict=True):
            if delta:
                model.add(delta_max >= delta).only_enforce_if(var)
            if right:
                model.add(right_max >= right).only_enforce_if(var)
        body = sum(
            (c.width_units + c.guard_units) * var
            for c, (_, _, var) in zip(cands, items, strict=True)
        )
        model.add(body + delta_max + right_max <= seg.length)
        used[s] = body + delta_max + right_max
    return used


# ---------------------------------------------------------------- objective


@dataclass(frozen=True)
class _Term:
    expr: cp_model.LinearExprT
    upper: int  # the term lies in [0, upper]


def _admission_term(data: PackingInput, v: _Vars) -> _Term:
    """Soft, first: serve demands in priority order (lower priorities are dropped first)."""
    weights = data.admission_weights
    expr = sum(weights[d] * served for d, served in v.served.items())
    return _Term(expr, sum(weights[d] for d in v.served))


def _throughput_unit_bps(data: PackingInput, v: _Vars, headroom: int) -> float:
    """The coarsest unit is used only when the integer range would otherwise overflow."""
    largest = max((o.demand.target_rate_bps for o in data.options), default=1.0)
    weight = sum(data.priorities[d] for d in v.served) or 1
    levels = max(1, min(_THROUGHPUT_LEVELS, headroom // weight))
    return max(largest / levels, 1e-9)


def _throughput_term(data: PackingInput, v: _Vars, headroom: int) -> _Term:
    """Soft: priority-weighted throughput, each demand capped at its target rate."""
    unit = _throughput_unit_bps(data, v, headroom)
    terms, upper = [], 0
    for (d, k, _), var in v.x.items():
        opts = data.options[d]
        capped = min(opts.candidates[k].throughput_bps, opts.demand.target_rate_bps)
        terms.append(data.priorities[d] * round(capped / unit) * var)
    for d in v.served:
        upper += data.priorities[d] * round(data.options[d].demand.target_rate_bps / unit)
    return _Term(sum(terms), upper)


def _spectrum_term(data: PackingInput, used: dict[int, cp_model.LinearExprT]) -> _Term:
    """Soft (``min_bandwidth``): little spectrum, lower segments first (pack low).

    A unit of spectrum in segment s costs (n + s) for n segments, so the total used width
    dominates and ties go to the lower segments, keeping the upper free segments whole.
    """
    n = len(data.segments)
    cost = sum((n + s) * u for s, u in used.items())
    upper = sum((n + s) * data.segments[s].length for s in used)
    return _Term(upper - cost, upper)


def _margin_term(model: cp_model.CpModel, data: PackingInput, v: _Vars) -> _Term:
    """Soft (``max_margin``): the smallest margin above each demand's own requirement."""
    steps: dict[tuple[int, int], int] = {}
    for d, k, _ in v.x:
        opts = data.options[d]
        excess = opts.candidates[k].config.margin_db - opts.demand.margin_db
        steps[d, k] = max(0, math.floor(excess / _MARGIN_STEP_DB + 1e-9))
    top = max(steps.values(), default=0)
    floor_var = model.new_int_var(0, top, "min_margin")
    for d, served in v.served.items():
        per_choice = sum(steps[dd, k] * var for (dd, k, _), var in v.x.items() if dd == d)
        model.add(floor_var <= per_choice + top * (1 - served))
    return _Term(floor_var, top)


def _lexicographic(model: cp_model.CpModel, terms: Sequence[_Term]) -> None:
    """Maximise the terms in order: each weight exceeds the whole range of the terms after it."""
    weight, total = 1, 0
    weighted: list[cp_model.LinearExprT] = []
    for term in reversed(terms):
        weighted.append(weight * term.expr)
        total += weight * term.upper
        weight = weight * (term.upper + 1)
    if total > _INT_HEADROOM:
        raise OverflowError(f"objective range {total} exceeds the solver's integer headroom")
    model.maximize(sum(weighted))


def _objective_terms(
    model: cp_model.CpModel, data: PackingInput, v: _Vars, used: dict[int, cp_model.LinearExprT]
) -> list[_Term]:
    admission = _admission_term(data, v)
    room = _INT_HEADROOM // (admission.upper + 1)
    if data.objective is Objective.MIN_BANDWIDTH:
        return [admission, _spectrum_term(data, used)]
    if data.objective is Objective.MAX_MARGIN:
        margin = _margin_term(model, data, v)
        return [admission, margin, _throughput_term(data, v, room // (margin.upper + 1))]
    return [admission, _throughput_term(data, v, room)]


# ---------------------------------------------------------------- solve


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
                optimality_gap=_gap(obj, bound),
            )
        )


def _gap(objective: float, bound: float) -> float:
    return abs(bound - objective) / max(1.0, abs(objective))


def _configure(solver: cp_model.CpSolver, data: PackingInput) -> None:
    params = solver.parameters
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


def _add_hints(model: cp_model.CpModel, data: PackingInput, v: _Vars) -> None:
    for (d, k, _), var in v.x.items():
        wanted = data.hints.get(data.options[d].demand.id)
        if wanted is not None:
            model.add_hint(var, 1 if wanted == k else 0)


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
    model = cp_model.CpModel()
    v = _make_choice_vars(model, data)
    _at_most_one_carrier_per_demand(model, v)
    used = _segment_capacity(model, data, v)
    _lexicographic(model, _objective_terms(model, data, v, used))
    _add_hints(model, data, v)

    solver = cp_model.CpSolver()
    _configure(solver, data)
    done = threading.Event()
    if cancel is not None:
        threading.Thread(target=_watch_cancel, args=(solver, cancel, done), daemon=True).start()
    started = time.perf_counter()
    try:
        status = solver.solve(model, _Progress(progress, cancel))
    finally:
        done.set()
    elapsed = time.perf_counter() - started
    return _extract(solver, status, v, elapsed)


def _extract(
    solver: cp_model.CpSolver, status: cp_model.CpSolverStatus, v: _Vars, elapsed: float
) -> PackingResult:
    version = str(getattr(ortools, "__version__", "unknown"))
    if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        # No solution at all (UNKNOWN when the time ran out first): nothing is served.
        return PackingResult(SolveStatus.INFEASIBLE, {}, 0.0, 0.0, 0.0, elapsed, version)
    chosen: dict[int, list[tuple[int, int]]] = {}
    for (d, k, s), var in v.x.items():
        if solver.boolean_value(var):
            chosen.setdefault(s, []).append((d, k))
    obj, bound = solver.objective_value, solver.best_objective_bound
    state = SolveStatus.OPTIMAL if status == cp_model.OPTIMAL else SolveStatus.FEASIBLE
    return PackingResult(state, chosen, obj, bound, _gap(obj, bound), elapsed, version)


# ---------------------------------------------------------------- placement


def place_segment(seg: Segment, items: Sequence[Candidate], *, pack_low: bool) -> list[int]:
    """Lower-edge positions (raster units) for the candidates of one segment.

    Carriers go in ascending guard need (ties keep the given order), so every gap is the larger
    of the two neighbours' guards.  Slack is left at the high end when ``pack_low``, otherwise
    spread evenly over all gaps, which only lowers leakage and interference.

    Returns
    -------
    list of int
        Lower edges in the order of ``items``.
    """
    order = sorted(range(len(items)), key=lambda i: items[i].guard_units)
    gaps = [seg.left_need(items[order[0]])] if order else []
    for prev, cur in itertools.pairwise(order):
        gaps.append(max(items[prev].guard_units, items[cur].guard_units))
    need = sum(gaps) + sum(items[i].width_units for i in order)
    need += seg.right_need(items[order[-1]]) if order else 0
    slack = seg.length - need
    if slack < 0:
        raise ValueError(f"segment {seg} overfilled by {-slack} raster units")
    extra = [0] * len(gaps)
    if not pack_low and gaps:
        share, rest = divmod(slack, len(gaps) + 1)
        extra = [share + (1 if i < rest else 0) for i in range(len(gaps))]
    positions = [0] * len(items)
    cursor = seg.start
    for slot, i in enumerate(order):
        cursor += gaps[slot] + extra[slot]
        positions[i] = cursor
        cursor += items[i].width_units
    return positions
