"""The CP-SAT model's objective: one soft term per function, maximised in order.

Admission comes first (serve demands in priority order); then, by objective, the
priority-weighted throughput (``max_throughput``), the weighted free spectrum
(``min_bandwidth``) or the smallest margin and then the throughput (``max_margin``).  Every term
is an integer expression with a known range, so the terms after admission can be combined
lexicographically (:func:`lexicographic`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from ortools.sat.python import cp_model

from solver.model import Objective
from solver.packing.capacity import SCALE, key_coefficients
from solver.packing.items import DemandFamily, Key, PackingInput
from solver.packing.model import ChoiceVars, linear
from solver.packing.objective import StageObjective

__all__ = [
    "INT_HEADROOM",
    "Term",
    "admission_term",
    "lexicographic",
    "margin_term",
    "objective_terms",
    "spectrum_term",
    "stage_objective",
    "throughput_term",
]

INT_HEADROOM = 2**60
"""Largest objective magnitude we allow; CP-SAT works on int64."""

_THROUGHPUT_LEVELS = 1_000_000
"""Finest resolution of the throughput term: the largest target maps to this many units (fewer
when the admission weights leave less integer headroom)."""

_MARGIN_STEP_DB = 0.1
"""Resolution of the margin term of ``max_margin``."""


@dataclass(frozen=True)
class Term:
    """One soft objective term, maximised; it lies in ``[0, upper]``."""

    expr: cp_model.LinearExprT
    upper: int
    coefficients: dict[Key, int] | None = None
    """Per half-width, for a term linear in the half-widths alone (the throughput)."""


def admission_term(data: PackingInput, v: ChoiceVars) -> Term:
    """Soft, first: serve demands in priority order (lower priorities are dropped first)."""
    weights = data.admission_weights
    expr = sum(weights[d] * served for d, served in v.served.items())
    return Term(expr, sum(weights[d] for d in v.served))


def _throughput_unit_bps(data: PackingInput, v: ChoiceVars, headroom: int) -> float:
    """The coarsest unit is used only when the integer range would otherwise overflow."""
    largest = max((o.demand.target_rate_bps for o in data.options), default=1.0)
    weight = sum(data.priorities[d] for d in v.served) or 1
    levels = max(1, min(_THROUGHPUT_LEVELS, headroom // weight))
    return max(largest / levels, 1e-9)


def throughput_term(data: PackingInput, v: ChoiceVars, headroom: int) -> Term:
    """Soft: priority-weighted throughput, each demand capped at its target rate.

    Throughput grows linearly with the half-width inside a family (rounded down to whole
    units, so the objective never credits more than the carrier carries).
    """
    unit = _throughput_unit_bps(data, v, headroom)
    coefficients: dict[Key, int] = {}
    for key in v.half:
        fam = data.family_of(key)
        target = data.options[key.demand].demand.target_rate_bps
        per_half = min(fam.throughput_per_half_bps, target / fam.hi_half)
        coefficients[key] = data.priorities[key.demand] * math.floor(per_half / unit)
    upper = sum(
        data.priorities[d] * math.ceil(data.options[d].demand.target_rate_bps / unit)
        for d in v.served
    )
    expr = linear([(v.half[key], c) for key, c in coefficients.items()])
    return Term(expr, upper, coefficients)


def spectrum_term(data: PackingInput, used: dict[int, cp_model.LinearExprT]) -> Term:
    """Soft (``min_bandwidth``): little spectrum, lower segments first (pack low).

    A unit of spectrum in segment s costs (n + s) for n segments, so the total used width
    dominates and ties go to the lower segments, keeping the upper free segments whole.
    """
    n = len(data.segments)
    cost = sum((n + s) * u for s, u in used.items())
    upper = sum((n + s) * data.segments[s].length * SCALE for s in used)
    return Term(upper - cost, upper)


def margin_term(model: cp_model.CpModel, data: PackingInput, v: ChoiceVars) -> Term:
    """Soft (``max_margin``): the smallest margin above each demand's own requirement."""
    steps: dict[DemandFamily, int] = {}
    for key in v.x:
        excess = data.family_of(key).config.margin_db - data.options[key.demand].demand.margin_db
        steps[key.demand_family] = max(0, math.floor(excess / _MARGIN_STEP_DB + 1e-9))
    top = max(steps.values(), default=0)
    floor_var = model.new_int_var(0, top, "min_margin")
    for d, served in v.served.items():
        per_choice = sum(
            steps[key.demand_family] * var for key, var in v.x.items() if key.demand == d
        )
        model.add(floor_var <= per_choice + top * (1 - served))
    return Term(floor_var, top)


def lexicographic(model: cp_model.CpModel, terms: Sequence[Term]) -> int:
    """Maximise the terms in order: each weight exceeds the whole range of the terms after it.

    Returns the weight of the first term (admission), for reporting the gap without it.
    """
    weight, total = 1, 0
    weighted: list[cp_model.LinearExprT] = []
    first_weight = weight
    for term in reversed(terms):
        weighted.append(weight * term.expr)
        total += weight * term.upper
        first_weight = weight
        weight = weight * (term.upper + 1)
    if total > INT_HEADROOM:
        raise OverflowError(f"objective range {total} exceeds the solver's integer headroom")
    model.maximize(sum(weighted))
    return first_weight


def objective_terms(
    model: cp_model.CpModel,
    data: PackingInput,
    v: ChoiceVars,
    used: dict[int, cp_model.LinearExprT],
) -> list[Term]:
    """The terms in the order they are maximised, admission first."""
    admission = admission_term(data, v)
    room = INT_HEADROOM // (admission.upper + 1)
    if data.objective is Objective.MIN_BANDWIDTH:
        return [admission, spectrum_term(data, used)]
    if data.objective is Objective.MAX_MARGIN:
        margin = margin_term(model, data, v)
        return [admission, margin, throughput_term(data, v, room // (margin.upper + 1))]
    return [admission, throughput_term(data, v, room)]


def stage_objective(
    data: PackingInput, v: ChoiceVars, terms: Sequence[Term]
) -> StageObjective | None:
    """The stage-2 term as a :class:`StageObjective` (None for ``max_margin``'s two terms)."""
    if data.objective is Objective.MIN_BANDWIDTH:
        n = len(data.segments)
        h: dict[Key, float] = {}
        x: dict[Key, float] = {}
        for key in v.x:
            c = key_coefficients(data, key)
            weight = n + key.segment
            h[key], x[key] = -weight * c.body_h, -weight * c.body_x
        segment = {s: -float(n + s) for s in range(n)}
        return StageObjective(h, x, segment, float(terms[1].upper), widen=False)
    if len(terms) == 2 and terms[1].coefficients is not None:
        return StageObjective(dict(terms[1].coefficients))
    return None
