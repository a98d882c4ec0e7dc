"""The CP-SAT model's variables, hard rules and hints, one rule per function.

The model reads in a fixed order: data (:mod:`solver.packing.items`), variables
(:func:`make_choice_vars`), constraints (one demand one carrier, one level per segment, the
capacity row of every segment), objective (:mod:`solver.packing.terms`), hints, then the solve
(:mod:`solver.packing.driver`).
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal

from ortools.sat.python import cp_model

from solver.packing.capacity import SCALE, ItemCoefficients, key_coefficients
from solver.packing.families import Family
from solver.packing.items import DemandFamily, Key, PackingInput, SegmentLevel

__all__ = [
    "ChoiceVars",
    "add_hints",
    "at_most_one_carrier_per_demand",
    "hint_solution",
    "keep_levels",
    "linear",
    "make_choice_vars",
    "segment_capacity",
    "segment_levels",
    "switched_off",
]


@dataclass
class ChoiceVars:
    """The model's decision variables.

    ``x`` is each item's boolean (chosen or not), ``half`` its half-width (an integer variable,
    or a constant times ``x`` for a single-width family), ``served`` each demand's number of
    chosen items (0 or 1) and ``level`` each (segment, level)'s boolean (only with levels on).
    """

    x: dict[Key, cp_model.IntVar]
    half: dict[Key, cp_model.LinearExpr]
    served: dict[int, cp_model.LinearExpr]
    level: dict[SegmentLevel, cp_model.IntVar] = field(default_factory=dict)

    def read(self, solver: cp_model.CpSolver) -> dict[Key, int]:
        """The half-width of every chosen item in a solver's solution."""
        return {
            k: int(solver.value(self.half[k])) for k, x in self.x.items() if solver.boolean_value(x)
        }

    def outside(self, levels: set[SegmentLevel] | frozenset[SegmentLevel]) -> list[cp_model.IntVar]:
        """The booleans of the items in a segment of ``levels`` at another level."""
        segments = {sl.segment for sl in levels}
        return [
            x for k, x in self.x.items() if k.segment in segments and k.segment_level not in levels
        ]


def linear(terms: Sequence[tuple[cp_model.LinearExpr, int]]) -> cp_model.LinearExpr:
    """Σ coefficient·expression over the terms with a non-zero coefficient."""
    kept = [(t, c) for t, c in terms if c]
    return cp_model.LinearExpr.weighted_sum([t for t, _ in kept], [c for _, c in kept])


# ---------------------------------------------------------------- variables


def make_choice_vars(model: cp_model.CpModel, data: PackingInput) -> ChoiceVars:
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
                        key = Key(d, k, s, i)
                        x[key], half[key] = _item_vars(model, fam, key)
    by_demand: dict[int, list[cp_model.IntVar]] = {}
    for key, var in x.items():
        by_demand.setdefault(key.demand, []).append(var)
    served = {d: cp_model.LinearExpr.sum(by_demand[d]) for d in sorted(by_demand)}
    return ChoiceVars(x, half, served)


def _item_vars(
    model: cp_model.CpModel, fam: Family, key: Key
) -> tuple[cp_model.IntVar, cp_model.LinearExpr]:
    """An item's boolean and half-width."""
    name = "_".join(map(str, key))
    var = model.new_bool_var(f"x_{name}")
    if fam.lo_half == fam.hi_half:
        return var, cp_model.LinearExpr.term(var, fam.hi_half)
    h = model.new_int_var(0, fam.hi_half, f"h_{name}")
    model.add(h >= fam.lo_half * var)
    model.add(h <= fam.hi_half * var)
    return var, h


# ---------------------------------------------------------------- constraints


def at_most_one_carrier_per_demand(model: cp_model.CpModel, v: ChoiceVars) -> None:
    """Hard: a demand gets one configuration in one segment, or none."""
    by_demand: dict[int, list[cp_model.IntVar]] = {}
    for key, var in v.x.items():
        by_demand.setdefault(key.demand, []).append(var)
    for choices in by_demand.values():
        model.add(sum(choices) <= 1)  # linear, so the LP relaxation holds it


def segment_levels(model: cp_model.CpModel, data: PackingInput, v: ChoiceVars) -> None:
    """Hard: every item of a segment sits at the segment's one protection level."""
    if not data.levels:
        return
    for s in range(len(data.segments)):
        used = sorted({key.level for key in v.x if key.segment == s})
        if not used:
            continue
        z = {i: model.new_bool_var(f"z_{s}_{i}") for i in used}
        model.add(sum(z.values()) <= 1)
        for i, var in z.items():
            v.level[SegmentLevel(s, i)] = var
        for key, var in v.x.items():
            if key.segment == s:
                model.add(var <= z[key.level])


def segment_capacity(
    model: cp_model.CpModel, data: PackingInput, v: ChoiceVars
) -> dict[int, cp_model.LinearExprT]:
    """Hard: Σ(w + g) + max δ + max hR fits in every segment (see :mod:`solver.packing`).

    Items carry the guards of their own level; since a segment's items share one level, one
    plain linear row per segment is exact.  The maxima are integer variables bounded below by
    each item's (linear) need, so the LP relaxation sees them.  Rows are scaled by
    :data:`~solver.packing.capacity.SCALE`.  Returns the scaled used width per segment.
    """
    used: dict[int, cp_model.LinearExprT] = {}
    for s, seg in enumerate(data.segments):
        keys = [key for key in v.x if key.segment == s]
        if keys:
            need = _capacity_row(model, data, v, keys, str(s))
            model.add(need <= seg.length * SCALE)
            used[s] = need
    return used


def _capacity_row(
    model: cp_model.CpModel, data: PackingInput, v: ChoiceVars, keys: Sequence[Key], name: str
) -> cp_model.LinearExpr:
    """Scaled width the items of ``keys`` (all in one segment) need."""
    coefs = {key: key_coefficients(data, key) for key in keys}
    tops = {key: data.family_of(key).hi_half for key in keys}
    delta_top = max(c.delta(tops[key]) for key, c in coefs.items())
    right_top = max(c.right(tops[key]) for key, c in coefs.items())
    delta_max = model.new_int_var(0, delta_top, f"delta_{name}")
    right_max = model.new_int_var(0, right_top, f"right_{name}")
    body_terms: list[tuple[cp_model.LinearExpr, int]] = []
    groups: dict[DemandFamily, list[Key]] = {}
    for key, c in coefs.items():
        body_terms += [(v.half[key], c.body_h), (v.x[key], c.body_x)]
        groups.setdefault(key.demand_family, []).append(key)
    # One row per (demand, family): at most one of its level items is chosen (the others'
    # x and h are 0), so the sum is that item's own need.
    for group in groups.values():
        model.add(delta_max >= _need(v, group, coefs, "delta"))
        model.add(right_max >= _need(v, group, coefs, "right"))
    return linear(body_terms) + delta_max + right_max


def _need(
    v: ChoiceVars,
    group: Sequence[Key],
    coefs: Mapping[Key, ItemCoefficients],
    side: Literal["delta", "right"],
) -> cp_model.LinearExpr:
    """Σ over ``group`` of each item's scaled need on one ``side`` ("delta" or "right")."""
    terms: list[tuple[cp_model.LinearExpr, int]] = []
    for key in group:
        c = coefs[key]
        per_x, per_h = (c.delta_x, c.delta_h) if side == "delta" else (c.right_x, c.right_h)
        terms += [(v.x[key], per_x), (v.half[key], per_h)]
    return linear(terms)


def keep_levels(model: cp_model.CpModel, v: ChoiceVars, levels: set[SegmentLevel]) -> None:
    """Hard (stage 2, when nothing else can win): the segments of ``levels`` keep those levels."""
    for var in v.outside(levels):
        model.add(var == 0)


@contextlib.contextmanager
def switched_off(model: cp_model.CpModel, booleans: Sequence[cp_model.IntVar]) -> Iterator[None]:
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


# ---------------------------------------------------------------- hints


def add_hints(model: cp_model.CpModel, data: PackingInput, v: ChoiceVars) -> None:
    """Hint the decisions only (family, segment and half-width), as the CP-SAT notes advise.

    A hint is (family, half-width, segment); the item at the lowest level the segment could
    take is hinted on, every other item of the demand off.
    """
    on: dict[int, Key] = {}
    for key in v.x:
        wanted = data.hint(key.demand)
        if wanted is None or (key.family, key.segment) != (wanted.family, wanted.segment):
            continue
        if key.demand not in on or key.level < on[key.demand].level:
            on[key.demand] = key
    for key, var in v.x.items():
        wanted = data.hint(key.demand)
        if wanted is None:
            continue
        model.add_hint(var, 1 if on.get(key.demand) == key else 0)
        h = v.half[key]
        if on.get(key.demand) == key and isinstance(h, cp_model.IntVar):
            model.add_hint(h, wanted.half)


def hint_solution(model: cp_model.CpModel, v: ChoiceVars, chosen: Mapping[Key, int]) -> None:
    """Hint every decision of a known solution (a complete, feasible hint)."""
    model.clear_hints()  # type: ignore[no-untyped-call]
    levels = {key.segment_level for key in chosen}
    for key, var in v.x.items():
        model.add_hint(var, key in chosen)
        h = v.half[key]
        if isinstance(h, cp_model.IntVar):
            model.add_hint(h, chosen.get(key, 0))
    for sl, var in v.level.items():
        model.add_hint(var, sl in levels)
