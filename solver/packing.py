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

import contextlib
import itertools
import logging
import math
import threading
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace
from enum import StrEnum
from typing import TYPE_CHECKING

import ortools
from ortools.sat.python import cp_model

from solver.candidates import Candidate, DemandOptions, Family
from solver.model import Demand, Objective, ProgressEvent, SolveStatus
from solver.spacing import Wall

if TYPE_CHECKING:
    from solver.levelsearch import LevelSearch

__all__ = [
    "GAP_TOLERANCE",
    "SCALE",
    "Boundary",
    "ItemCoefficients",
    "Key",
    "PackingInput",
    "PackingResult",
    "Segment",
    "StageObjective",
    "admission_weights",
    "fit_segment",
    "item_coefficients",
    "place_segment",
    "segment_room",
    "solve_packing",
]

log = logging.getLogger(__name__)

_INT_HEADROOM = 2**60
"""Largest objective magnitude we allow; CP-SAT works on int64."""

_THROUGHPUT_LEVELS = 1_000_000
"""Finest resolution of the throughput term: the largest target maps to this many units (fewer
when the admission weights leave less integer headroom)."""

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
    left_wall: Wall = field(default_factory=Wall)
    """The fixed carrier beyond the left end (its family and half-width), if any."""
    right_wall: Wall = field(default_factory=Wall)

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
    hints: dict[str, tuple[int, int, int]] = field(default_factory=dict)
    """Per demand id: (family index, half-width, segment index) of a known solution."""
    levels: tuple[float, ...] = ()
    """Protection levels (dB) a segment may take; empty: every family at its own sensitivity."""

    def allowed_levels(self, fam: Family) -> list[int]:
        """Indices of the levels at which ``fam`` may sit (all of them when levels are off)."""
        if not self.levels:
            return [0]
        return [i for i, level in enumerate(self.levels) if level >= fam.sensitivity_db - 1e-9]

    def level(self, index: int) -> float | None:
        return self.levels[index] if self.levels else None


@dataclass(frozen=True)
class PackingResult:
    """The solver's choice: per segment, the (demand index, candidate index) pairs it holds."""

    status: SolveStatus
    chosen: dict[int, list[tuple[int, int, int]]]
    segment_levels: dict[int, int]
    objective_value: float
    best_bound: float
    optimality_gap: float
    solve_time_s: float
    solver_version: str


SCALE = 1000
"""Capacity rows are scaled by this so that guard-per-width coefficients stay integers."""


Key = tuple[int, int, int, int]
"""(demand, family, segment, protection level) indices of one item."""


@dataclass
class _Vars:
    x: dict[Key, cp_model.IntVar]
    half: dict[Key, cp_model.LinearExpr]
    served: dict[int, cp_model.LinearExpr]
    level: dict[tuple[int, int], cp_model.IntVar] = field(default_factory=dict)


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
    """One item per (demand, family, segment, level) where the family's narrowest member fits
    the segment alone at that level: a boolean x and the half-width h (an integer in
    [lo, hi] when x, else 0; a constant for single points)."""
    x: dict[Key, cp_model.IntVar] = {}
    half: dict[Key, cp_model.LinearExpr] = {}
    for d, opts in enumerate(data.options):
        for k, fam in enumerate(opts.candidates):
            if (opts.demand.id, k) in data.forbidden:
                continue
            for i in data.allowed_levels(fam):
                narrowest = fam.at(fam.lo_half, data.level(i))
                for s, seg in enumerate(data.segments):
                    if seg.fits_alone(narrowest):
                        key = (d, k, s, i)
                        x[key], half[key] = _item_vars(model, fam, key)
    served: dict[int, cp_model.LinearExpr] = {}
    for d in range(len(data.options)):
        choices = [var for key, var in x.items() if key[0] == d]
        if choices:
            served[d] = cp_model.LinearExpr.sum(choices)
    return _Vars(x, half, served)


def _item_vars(
    model: cp_model.CpModel, fam: Family, key: Key
) -> tuple[cp_model.IntVar, cp_model.LinearExpr]:
    name = "_".join(map(str, key))
    var = model.new_bool_var(f"x_{name}")
    if fam.lo_half == fam.hi_half:
        return var, cp_model.LinearExpr.term(var, fam.hi_half)
    h = model.new_int_var(0, fam.hi_half, f"h_{name}")
    model.add(h >= fam.lo_half * var)
    model.add(h <= fam.hi_half * var)
    return var, h


# ---------------------------------------------------------------- constraints


def _at_most_one_carrier_per_demand(model: cp_model.CpModel, v: _Vars) -> None:
    """Hard: a demand gets one configuration in one segment, or none."""
    by_demand: dict[int, list[cp_model.IntVar]] = {}
    for key, var in v.x.items():
        by_demand.setdefault(key[0], []).append(var)
    for choices in by_demand.values():
        model.add(sum(choices) <= 1)  # linear, so the LP relaxation holds it


def _up(value: float) -> int:
    return math.ceil(value * SCALE - 1e-6)


@dataclass(frozen=True)
class ItemCoefficients:
    """Scaled, linear upper bounds of one item's needs: ``a·h + b·x`` each.

    ``body`` is width plus guard, ``delta`` the extra guard towards the left boundary and
    ``right`` the guard towards the right boundary; ``*_top`` are their largest values.
    Single points are exact; a family's rounded-up guards cost at most one unit more.
    """

    body_h: int
    body_x: int
    delta_h: int
    delta_x: int
    right_h: int
    right_x: int

    def top(self, hi_half: int) -> tuple[int, int]:
        return self.delta(hi_half), self.right(hi_half)

    def delta(self, half: int) -> int:
        """Scaled extra guard towards the left boundary of the member ``half`` wide."""
        return self.delta_h * half + self.delta_x

    def right(self, half: int) -> int:
        """Scaled guard towards the right boundary of the member ``half`` wide."""
        return self.right_h * half + self.right_x

    @property
    def growth(self) -> int:
        """Most the segment's need can grow per extra half-width unit of this item."""
        return self.body_h + self.delta_h + self.right_h


def _lin(terms: Sequence[tuple[cp_model.LinearExpr, int]]) -> cp_model.LinearExpr:
    kept = [(t, c) for t, c in terms if c]
    return cp_model.LinearExpr.weighted_sum([t for t, _ in kept], [c for _, c in kept])


def item_coefficients(seg: Segment, fam: Family, level_db: float | None = None) -> ItemCoefficients:
    """Capacity-row coefficients of family ``fam`` in segment ``seg`` at a protection level."""
    if fam.lo_half == fam.hi_half:
        c = fam.at(fam.hi_half, level_db)
        delta = max(seg.left_need(c) - c.guard_units, 0) * SCALE
        return ItemCoefficients(
            0, (c.width_units + c.guard_units) * SCALE, 0, delta, 0, seg.right_need(c) * SCALE
        )
    # Every need grows linearly with the half-width (guards scale with the symbol rate); the
    # rounding up of a guard to the raster costs at most one unit, carried by the constant.
    g, e = fam.guard_per_half(level_db), fam.edge_per_half
    if seg.left is Boundary.EDGE:
        delta_h, delta_x = _up(max(e - g, 0.0)), SCALE
    else:  # max(g, left_guard) - g never exceeds the pinned neighbour's guard
        delta_h, delta_x = 0, seg.left_guard * SCALE
    if seg.right is Boundary.EDGE:
        right_h, right_x = _up(e), SCALE
    else:  # max(g, right_guard) <= g + right_guard
        right_h, right_x = _up(g), SCALE + seg.right_guard * SCALE
    return ItemCoefficients(2 * SCALE + _up(g), SCALE, delta_h, delta_x, right_h, right_x)


def _segment_levels(model: cp_model.CpModel, data: PackingInput, v: _Vars) -> None:
    """Hard: every item of a segment sits at the segment's one protection level."""
    if not data.levels:
        return
    for s in range(len(data.segments)):
        used = sorted({key[3] for key in v.x if key[2] == s})
        if not used:
            continue
        z = {i: model.new_bool_var(f"z_{s}_{i}") for i in used}
        model.add(sum(z.values()) <= 1)
        for i, var in z.items():
            v.level[s, i] = var
        for key, var in v.x.items():
            if key[2] == s:
                model.add(var <= z[key[3]])


def _segment_capacity(
    model: cp_model.CpModel, data: PackingInput, v: _Vars
) -> dict[int, cp_model.LinearExprT]:
    """Hard: Σ(w + g) + max δ + max hR fits in every segment (see the module docstring).

    Items carry the guards of their own level; since a segment's items share one level, one
    plain linear row per segment is exact.  The maxima are integer variables bounded below by
    each item's (linear) need, so the LP relaxation sees them.  Rows are scaled by
    :data:`SCALE`.  Returns the scaled used width per segment.
    """
    used: dict[int, cp_model.LinearExprT] = {}
    for s, seg in enumerate(data.segments):
        keys = [key for key in v.x if key[2] == s]
        if keys:
            need = _capacity_row(model, data, v, seg, keys, str(s))
            model.add(need <= seg.length * SCALE)
            used[s] = need
    return used


def _capacity_row(
    model: cp_model.CpModel,
    data: PackingInput,
    v: _Vars,
    seg: Segment,
    keys: Sequence[Key],
    name: str,
) -> cp_model.LinearExpr:
    """Scaled width the items of ``keys`` need in ``seg``."""
    fams = [data.options[key[0]].candidates[key[1]] for key in keys]
    coefs = [
        item_coefficients(seg, fam, data.level(key[3])) for fam, key in zip(fams, keys, strict=True)
    ]
    tops = [c.top(fam.hi_half) for c, fam in zip(coefs, fams, strict=True)]
    delta_max = model.new_int_var(0, max(t[0] for t in tops), f"delta_{name}")
    right_max = model.new_int_var(0, max(t[1] for t in tops), f"right_{name}")
    body_terms: list[tuple[cp_model.LinearExpr, int]] = []
    needs: dict[tuple[int, int], list[tuple[cp_model.LinearExpr, ItemCoefficients]]] = {}
    for c, key in zip(coefs, keys, strict=True):
        h, x = v.half[key], v.x[key]
        body_terms += [(h, c.body_h), (x, c.body_x)]
        needs.setdefault((key[0], key[1]), []).append((x, c))
        needs[key[0], key[1]].append((h, c))
    # One row per (demand, family): at most one of its level items is chosen (the others'
    # x and h are 0), so the sum is that item's own need.
    for group in needs.values():
        pairs = list(zip(group[::2], group[1::2], strict=True))
        model.add(
            delta_max
            >= _lin([t for (x, c), (h, _) in pairs for t in ((x, c.delta_x), (h, c.delta_h))])
        )
        model.add(
            right_max
            >= _lin([t for (x, c), (h, _) in pairs for t in ((x, c.right_x), (h, c.right_h))])
        )
    return _lin(body_terms) + delta_max + right_max


@dataclass(frozen=True)
class StageObjective:
    """A linear stage-2 objective over items, in the model's own units::

        Σ h[k]·half-width + Σ x[k]·chosen + Σ_s segment[s]·(max δ + max hR) + offset

    ``max_throughput`` uses ``h`` alone; ``min_bandwidth`` is the weighted free width (the
    offset less each segment's weight times its capacity row).  ``widen`` says whether a
    rounded plan should grow its carriers into the room left (more throughput) or not.
    """

    h: Mapping[Key, float]
    x: Mapping[Key, float] = field(default_factory=dict)
    segment: Mapping[int, float] = field(default_factory=dict)
    offset: float = 0.0
    widen: bool = True

    def value(self, data: PackingInput, choice: Mapping[Key, int]) -> float:
        """The objective of a choice (half-width per chosen item)."""
        total = self.offset
        total += sum(self.h.get(k, 0.0) * h + self.x.get(k, 0.0) for k, h in choice.items())
        for s in {k[2] for k in choice} & set(self.segment):
            seg = data.segments[s]
            coefs = [
                (
                    item_coefficients(seg, data.options[k[0]].candidates[k[1]], data.level(k[3])),
                    h,
                )
                for k, h in choice.items()
                if k[2] == s
            ]
            tops = max(c.delta(h) for c, h in coefs) + max(c.right(h) for c, h in coefs)
            total += self.segment[s] * tops
        return float(total)


def _stage_objective(data: PackingInput, v: _Vars, terms: Sequence[_Term]) -> StageObjective | None:
    """The stage-2 term as a :class:`StageObjective` (None for ``max_margin``'s two terms)."""
    if data.objective is Objective.MIN_BANDWIDTH:
        n = len(data.segments)
        h: dict[Key, float] = {}
        x: dict[Key, float] = {}
        for key in v.x:
            fam = data.options[key[0]].candidates[key[1]]
            c = item_coefficients(data.segments[key[2]], fam, data.level(key[3]))
            weight = n + key[2]
            h[key], x[key] = -weight * c.body_h, -weight * c.body_x
        segment = {s: -float(n + s) for s in range(n)}
        return StageObjective(h, x, segment, float(terms[1].upper), widen=False)
    if len(terms) == 2 and terms[1].coefficients is not None:
        return StageObjective(dict(terms[1].coefficients))
    return None


# ---------------------------------------------------------------- objective


@dataclass(frozen=True)
class _Term:
    expr: cp_model.LinearExprT
    upper: int  # the term lies in [0, upper]
    coefficients: dict[Key, int] | None = None  # per half-width, for a linear objective term


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
    """Soft: priority-weighted throughput, each demand capped at its target rate.

    Throughput grows linearly with the half-width inside a family (rounded down to whole
    units, so the objective never credits more than the carrier carries).
    """
    unit = _throughput_unit_bps(data, v, headroom)
    coefficients: dict[Key, int] = {}
    for key in v.half:
        opts = data.options[key[0]]
        fam = opts.candidates[key[1]]
        per_half = min(fam.throughput_per_half_bps, opts.demand.target_rate_bps / fam.hi_half)
        coefficients[key] = data.priorities[key[0]] * math.floor(per_half / unit)
    upper = sum(
        data.priorities[d] * math.ceil(data.options[d].demand.target_rate_bps / unit)
        for d in v.served
    )
    expr = _lin([(v.half[key], c) for key, c in coefficients.items()])
    return _Term(expr, upper, coefficients)


def _spectrum_term(data: PackingInput, used: dict[int, cp_model.LinearExprT]) -> _Term:
    """Soft (``min_bandwidth``): little spectrum, lower segments first (pack low).

    A unit of spectrum in segment s costs (n + s) for n segments, so the total used width
    dominates and ties go to the lower segments, keeping the upper free segments whole.
    """
    n = len(data.segments)
    cost = sum((n + s) * u for s, u in used.items())
    upper = sum((n + s) * data.segments[s].length * SCALE for s in used)
    return _Term(upper - cost, upper)


def _margin_term(model: cp_model.CpModel, data: PackingInput, v: _Vars) -> _Term:
    """Soft (``max_margin``): the smallest margin above each demand's own requirement."""
    steps: dict[tuple[int, int], int] = {}
    for d, k, _, _ in v.x:
        opts = data.options[d]
        excess = opts.candidates[k].config.margin_db - opts.demand.margin_db
        steps[d, k] = max(0, math.floor(excess / _MARGIN_STEP_DB + 1e-9))
    top = max(steps.values(), default=0)
    floor_var = model.new_int_var(0, top, "min_margin")
    for d, served in v.served.items():
        per_choice = sum(steps[dd, k] * var for (dd, k, _, _), var in v.x.items() if dd == d)
        model.add(floor_var <= per_choice + top * (1 - served))
    return _Term(floor_var, top)


def _lexicographic(model: cp_model.CpModel, terms: Sequence[_Term]) -> int:
    """Maximise the terms in order: each weight exceeds the whole range of the terms after it.

    Returns the weight of the first term (admission), for reporting the gap without it.
    """
    weight, total = 1, 0
    weighted: list[cp_model.LinearExprT] = []
    for term in reversed(terms):
        weighted.append(weight * term.expr)
        total += weight * term.upper
        first_weight = weight
        weight = weight * (term.upper + 1)
    if total > _INT_HEADROOM:
        raise OverflowError(f"objective range {total} exceeds the solver's integer headroom")
    model.maximize(sum(weighted))
    return first_weight


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


def _configure(solver: cp_model.CpSolver, data: PackingInput, gap_units: float, items: int) -> None:
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


def _add_hints(model: cp_model.CpModel, data: PackingInput, v: _Vars) -> None:
    """Hint the decisions only (family, segment and half-width), as the CP-SAT notes advise.

    A hint is (family, half-width, segment); the item at the lowest level the segment could
    take is hinted on, every other item of the demand off.
    """
    lowest: dict[tuple[int, int, int], int] = {}
    for d, k, s, i in v.x:
        lowest[d, k, s] = min(i, lowest.get((d, k, s), i))
    for (d, k, s, i), var in v.x.items():
        wanted = data.hints.get(data.options[d].demand.id)
        if wanted is None:
            continue
        on = (k, s, i) == (wanted[0], wanted[2], lowest[d, k, s])
        model.add_hint(var, 1 if on else 0)
        h = v.half[d, k, s, i]
        if on and isinstance(h, cp_model.IntVar):
            model.add_hint(h, wanted[1])


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
    v = _make_choice_vars(model, data)
    _at_most_one_carrier_per_demand(model, v)
    _segment_levels(model, data, v)
    used = _segment_capacity(model, data, v)
    terms = _objective_terms(model, data, v, used)
    linear = terms[1].coefficients if len(terms) == 2 else None
    stage = _stage_objective(data, v, terms)
    everyone = terms[0].upper

    # Stage 1: admission (serve demands in priority order).  A rounded plan from the level
    # search that serves everyone settles it without a solve, whatever the objective.
    probe = stage or StageObjective(
        _throughput_term(data, v, _INT_HEADROOM // (everyone + 1)).coefficients or {}
    )
    search = _search(data, v, probe, everyone, started + data.time_limit_s * SEARCH_SHARE)
    if search.choice is not None:
        admitted, start, proven = everyone, search.choice, True
        if stage is None:  # max_margin starts from the narrowest members
            start = {key: data.options[key[0]].candidates[key[1]].lo_half for key in start}
    else:
        model.maximize(terms[0].expr)
        _add_hints(model, data, v)
        budget = max(0.05, data.time_limit_s * STAGE_ONE_SHARE)
        first, first_status = _run(model, data, budget, 0.5, None, cancel)
        if first_status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            return _no_solution(time.perf_counter() - started)
        proven = first_status == cp_model.OPTIMAL
        admitted = round(first.objective_value)
        start = _grown(data, v, first)
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
        progress(ProgressEvent(elapsed, begun, bound, _gap(begun, bound)))
    slack = GAP_TOLERANCE * terms[-1].upper
    if proven and begun is not None and bound - begun <= slack:
        settled = _from_choice(start, time.perf_counter() - started, begun)
        return _bounded(settled, bound, proven=True, slack=slack)
    model.add(terms[0].expr >= admitted)
    outside = _keep_levels(model, data, v, search, start, stage)
    _hint_solution(model, data, v, start)
    model.clear_objective()  # type: ignore[no-untyped-call]
    _lexicographic(model, terms[1:])
    reserve = data.time_limit_s * LP_BOUND_SHARE if linear is not None and bound == math.inf else 0
    remaining = max(0.05, deadline - reserve - time.perf_counter())
    by_levels = stage is not None and proven and outside is None and bool(search.bounds)
    budget = remaining * FULL_MODEL_SHARE if by_levels else remaining
    second, second_status = _run(model, data, budget, slack, progress, cancel)
    elapsed = time.perf_counter() - started
    if second_status in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        done = proven and second_status == cp_model.OPTIMAL and outside is None
        result = _extract(second, second_status, v, elapsed, proven=done)
        if outside is not None:  # CP-SAT's bound covers the kept levels only
            bound = max(outside, min(result.best_bound, bound))
            result = replace(result, best_bound=math.inf)
        if begun is not None and begun > result.objective_value:
            result = replace(_from_choice(start, elapsed, begun), best_bound=result.best_bound)
    else:
        # Stage 2 found nothing in its time: the start is feasible by construction, so it is
        # the answer, with whatever bound is known.
        result = _from_choice(start, elapsed, begun)
    if result.status is SolveStatus.OPTIMAL or stage is None:
        return result
    if by_levels and not (cancel is not None and cancel.is_set()):
        found = second_status in (cp_model.OPTIMAL, cp_model.FEASIBLE)
        incumbent = _chosen(second, v) if found else dict(start)
        if result.objective_value > stage.value(data, incumbent):  # the start was better
            incumbent = dict(start)
        cp_bound = second.best_objective_bound if found else math.inf
        choice, value, bound = _by_combination(
            model, data, v, search, incumbent, result.objective_value, slack, deadline, cancel
        )
        result = _from_choice(choice, time.perf_counter() - started, value)
        return _bounded(result, min(bound, cp_bound), proven=proven, slack=slack)
    if bound < math.inf:
        return _bounded(result, bound, proven=proven, slack=slack)
    if linear is None:
        return result
    return _tighten(
        result, data, list(v.x), linear, admitted, reserve, started, proven=proven, slack=slack
    )


def _chosen(solver: cp_model.CpSolver, v: _Vars) -> dict[Key, int]:
    """The half-width of every chosen item in a solver's solution."""
    return {k: int(solver.value(v.half[k])) for k, x in v.x.items() if solver.boolean_value(x)}


def _by_combination(
    model: cp_model.CpModel,
    data: PackingInput,
    v: _Vars,
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
    order = sorted(search.bounds, key=lambda cb: (-cb[1], sorted(cb[0])))
    bounds = dict(order)
    for n, (combo, lp) in enumerate(order):
        left = deadline - time.perf_counter()
        if lp - value <= slack or left <= 0.05 or (cancel is not None and cancel.is_set()):
            break
        rivals = sum(1 for _, other in order[n:] if other - value > slack)
        segments = {s for s, _ in combo}
        off = [x for k, x in v.x.items() if k[2] in segments and (k[2], k[3]) not in combo]
        if all((k[2], k[3]) in combo for k in incumbent):
            _hint_solution(model, data, v, incumbent)
        else:
            model.clear_hints()  # type: ignore[no-untyped-call]
        with _switched_off(model, off):
            solver, status = _run(model, data, left / rivals, slack, None, cancel)
        if status == cp_model.INFEASIBLE:
            bounds[combo] = -math.inf
        elif status in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            if solver.objective_value > value:
                value, incumbent = solver.objective_value, _chosen(solver, v)
            bounds[combo] = min(lp, solver.best_objective_bound)
    return incumbent, value, max(value, *bounds.values())


@contextlib.contextmanager
def _switched_off(model: cp_model.CpModel, booleans: Sequence[cp_model.IntVar]) -> Iterator[None]:
    """Fix ``booleans`` to 0 for the duration (their domains are restored afterwards)."""
    domains = [model.proto.variables[b.index].domain for b in booleans]
    saved = [(d[0], d[1]) for d in domains]
    try:
        for d in domains:
            d[0], d[1] = 0, 0
        yield
    finally:
        for d, (lo, hi) in zip(domains, saved, strict=True):
            d[0], d[1] = lo, hi


def _keep_levels(
    model: cp_model.CpModel,
    data: PackingInput,
    v: _Vars,
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
    levels = {(key[2], key[3]) for key in start}
    outside = search.bound_outside(levels)
    if outside > stage.value(data, start):
        return None
    segments = {s for s, _ in levels}
    for key, var in v.x.items():
        if key[2] in segments and (key[2], key[3]) not in levels:
            model.add(var == 0)
    return outside


def _search(
    data: PackingInput, v: _Vars, stage: StageObjective, admitted: int, deadline: float
) -> LevelSearch:
    """The level search (bound and rounded plan) for a linear stage objective."""
    from solver.levelsearch import search_levels  # imports this module

    return search_levels(data, list(v.x), stage, admitted, deadline)


def _bounded(result: PackingResult, bound: float, *, proven: bool, slack: float) -> PackingResult:
    """``result`` with the tighter of its bound and ``bound``; optimal once the bound is within
    ``slack`` of the objective (the same stopping rule CP-SAT is given; see
    :data:`GAP_TOLERANCE`) and the admission before it was ``proven`` optimal."""
    best = min(result.best_bound, math.floor(bound + 1e-6))
    gap = _gap(result.objective_value, best)
    closed = best - result.objective_value <= slack
    status = SolveStatus.OPTIMAL if proven and closed else result.status
    return replace(result, best_bound=best, optimality_gap=gap, status=status)


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
    from solver.relaxation import throughput_lp_bound  # imports this module

    lp = throughput_lp_bound(data, keys, linear, admitted, max(1.0, budget_s))
    tightened = _bounded(result, lp, proven=proven, slack=slack) if math.isfinite(lp) else result
    return replace(tightened, solve_time_s=time.perf_counter() - started)


def _run(
    model: cp_model.CpModel,
    data: PackingInput,
    budget_s: float,
    gap_units: float,
    progress: Callable[[ProgressEvent], None] | None,
    cancel: threading.Event | None,
) -> tuple[cp_model.CpSolver, cp_model.CpSolverStatus]:
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


def _grown(data: PackingInput, v: _Vars, solver: cp_model.CpSolver) -> dict[Key, int]:
    """A strong start for stage 2 from the stage-1 solution: the same demands in the same
    segments at the same level, each switched to its family with the most throughput per unit
    of spectrum (where the narrowest members still fit), then widened greedily, best value
    first, until the segment is full."""
    stage_one = {
        key: int(solver.value(v.half[key])) for key, x in v.x.items() if solver.boolean_value(x)
    }
    options: dict[tuple[int, int, int], list[Key]] = {}
    for key in v.x:
        options.setdefault((key[0], key[2], key[3]), []).append(key)
    chosen: dict[Key, int] = {}
    for s, seg in enumerate(data.segments):
        keys = [key for key in stage_one if key[2] == s]
        if keys:
            chosen.update(_fill_segment(data, seg, keys, options))
    return chosen


def _fill_segment(
    data: PackingInput,
    seg: Segment,
    keys: list[Key],
    options: dict[tuple[int, int, int], list[Key]],
) -> dict[Key, int]:
    def fam(key: Key) -> Family:
        return data.options[key[0]].candidates[key[1]]

    def coef(key: Key) -> ItemCoefficients:
        return item_coefficients(seg, fam(key), data.level(key[3]))

    def room(choice: dict[Key, int]) -> int:
        return segment_room(data, seg, choice)

    def value(key: Key) -> float:
        return _value_per_unit(data, key, fam(key), coef(key))

    choice = {key: fam(key).lo_half for key in keys}
    for key in sorted(keys, key=value):
        best = max(options[key[0], key[2], key[3]], key=value)
        trial = {k: h for k, h in choice.items() if k != key} | {best: fam(best).lo_half}
        if best != key and room(trial) >= 0:
            choice = trial
    return fit_segment(data, seg, choice)


def fit_segment(
    data: PackingInput, seg: Segment, choice: Mapping[Key, int], *, widen: bool = True
) -> dict[Key, int]:
    """``choice`` made to fit ``seg`` exactly as far as half-widths allow: narrowed, least
    valuable spectrum first, while overfull; then (when ``widen``) widened, most valuable
    first, into the room left.  Items never leave their family's range, so an overfull choice
    may stay overfull."""
    fitted = dict(choice)
    coefs = {
        key: item_coefficients(seg, data.options[key[0]].candidates[key[1]], data.level(key[3]))
        for key in fitted
    }

    def fam(key: Key) -> Family:
        return data.options[key[0]].candidates[key[1]]

    def value(key: Key) -> float:
        return _value_per_unit(data, key, fam(key), coefs[key])

    spare = segment_room(data, seg, fitted)
    for key in sorted(fitted, key=value):
        step = coefs[key].body_h  # narrowing frees at least this much per unit
        if spare >= 0:
            break
        if step > 0:
            cut = min(fitted[key] - fam(key).lo_half, -(spare // step))
            fitted[key] -= cut
            spare = segment_room(data, seg, fitted)
    for key in sorted(fitted, key=value, reverse=True):
        step = coefs[key].growth  # widening costs at most this much per unit
        if spare <= 0 or not widen:
            break
        if step > 0:
            fitted[key] += min(fam(key).hi_half - fitted[key], spare // step)
            spare = segment_room(data, seg, fitted)
    return fitted


def segment_room(data: PackingInput, seg: Segment, choice: Mapping[Key, int]) -> int:
    """Scaled width ``seg`` has left with the items of ``choice`` at their half-widths, by the
    model's own capacity row (negative when overfull)."""
    if not choice:
        return seg.length * SCALE
    coefs = {
        key: item_coefficients(seg, data.options[key[0]].candidates[key[1]], data.level(key[3]))
        for key in choice
    }
    used = sum(c.body_h * choice[k] + c.body_x for k, c in coefs.items())
    used += max(c.delta(choice[k]) for k, c in coefs.items())
    used += max(c.right(choice[k]) for k, c in coefs.items())
    return seg.length * SCALE - used


def _value_per_unit(data: PackingInput, key: Key, fam: Family, coef: ItemCoefficients) -> float:
    demand = data.options[key[0]].demand
    per_half = min(fam.throughput_per_half_bps, demand.target_rate_bps / fam.hi_half)
    return data.priorities[key[0]] * per_half / max(coef.body_h, 1)


def _hint_solution(
    model: cp_model.CpModel, data: PackingInput, v: _Vars, chosen: dict[Key, int]
) -> None:
    """Hint every decision of a known solution (a complete, feasible hint)."""
    model.clear_hints()  # type: ignore[no-untyped-call]
    levels = {(key[2], key[3]) for key in chosen}
    for key, var in v.x.items():
        model.add_hint(var, key in chosen)
        h = v.half[key]
        if isinstance(h, cp_model.IntVar):
            model.add_hint(h, chosen.get(key, 0))
    for (s, i), var in v.level.items():
        model.add_hint(var, (s, i) in levels)


def _from_choice(chosen: Mapping[Key, int], elapsed: float, value: float | None) -> PackingResult:
    """A result made from a known choice: its objective ``value`` when known, and no bound yet
    (gap 1 until one is found)."""
    version = str(getattr(ortools, "__version__", "unknown"))
    picks: dict[int, list[tuple[int, int, int]]] = {}
    levels: dict[int, int] = {}
    for (d, k, s, i), h in sorted(chosen.items()):
        picks.setdefault(s, []).append((d, k, h))
        levels[s] = i
    bound = math.inf if value is not None else 0.0
    objective = value if value is not None else 0.0
    return PackingResult(
        SolveStatus.FEASIBLE, picks, levels, objective, bound, 1.0, elapsed, version
    )


def _no_solution(elapsed: float) -> PackingResult:
    version = str(getattr(ortools, "__version__", "unknown"))
    return PackingResult(SolveStatus.INFEASIBLE, {}, {}, 0.0, 0.0, 0.0, elapsed, version)


def _extract(
    solver: cp_model.CpSolver,
    status: cp_model.CpSolverStatus,
    v: _Vars,
    elapsed: float,
    *,
    proven: bool,
) -> PackingResult:
    """Read the choice, the objective of the last stage, its bound and relative gap."""
    version = str(getattr(ortools, "__version__", "unknown"))
    chosen: dict[int, list[tuple[int, int, int]]] = {}
    levels: dict[int, int] = {}
    for (d, k, s, i), var in v.x.items():
        if solver.boolean_value(var):
            chosen.setdefault(s, []).append((d, k, int(solver.value(v.half[d, k, s, i]))))
            levels[s] = i
    obj, bound = solver.objective_value, solver.best_objective_bound
    state = SolveStatus.OPTIMAL if proven else SolveStatus.FEASIBLE
    return PackingResult(state, chosen, levels, obj, bound, _gap(obj, bound), elapsed, version)


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
