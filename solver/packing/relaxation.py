"""The linear relaxation of the packing model's throughput stage: a valid upper bound, and a
fractional solution to round.

The relaxation has exactly the model's rows — the same items, the same scaled coefficients
(:func:`solver.packing.item_coefficients`), the same objective coefficients and the admission
reached in stage 1 — solved by HiGHS through :func:`scipy.optimize.milp` with no integrality.
It bounds the best integer plan over the same items from above.  Given only the items of one
protection level per segment it is nearly tight (a multiple-choice knapsack's relaxation has few
fractional items), which is what :mod:`solver.packing.levelsearch` relies on.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import numpy.typing as npt
from scipy import optimize, sparse

from solver.packing.capacity import SCALE, ItemCoefficients, key_coefficients
from solver.packing.items import DemandFamily, Key, PackingInput, SegmentLevel
from solver.packing.objective import StageObjective

__all__ = ["Relaxation", "solve_relaxation", "throughput_lp_bound"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Relaxation:
    """The LP optimum and its fractional solution.

    ``value`` is ``-math.inf`` when the rows cannot all hold (no plan with this admission over
    these items) and ``math.inf`` when HiGHS stopped without an answer (no bound known).
    """

    value: float
    x: dict[Key, float] = field(default_factory=dict)
    h: dict[Key, float] = field(default_factory=dict)

    @property
    def solved(self) -> bool:
        return math.isfinite(self.value)


class _Rows:
    """Sparse rows ``lower <= a·x <= upper`` under construction."""

    def __init__(self) -> None:
        self.lower: list[float] = []
        self.upper: list[float] = []
        self.entries: list[tuple[int, int, float]] = []

    def add(self, terms: Sequence[tuple[int, float]], lower: float, upper: float) -> None:
        row = len(self.lower)
        self.entries.extend((row, col, val) for col, val in terms if val)
        self.lower.append(lower)
        self.upper.append(upper)


@dataclass(frozen=True)
class _Columns:
    """Where each variable sits among the LP's columns: per item its choice ``x`` and its
    half-width ``h``, per (segment, level) the level's choice ``z``, per segment its two maxima
    (``max δ`` and ``max hR``), in that order."""

    index: dict[Key, int]
    z_col: dict[SegmentLevel, int]
    delta_col: dict[int, int]

    @classmethod
    def of(cls, keys: Sequence[Key]) -> _Columns:
        index = {key: n for n, key in enumerate(keys)}
        levels = sorted({key.segment_level for key in keys})
        z_col = {sl: 2 * len(index) + n for n, sl in enumerate(levels)}
        seg_ids = sorted({key.segment for key in keys})
        delta_col = {s: 2 * len(index) + len(levels) + 2 * n for n, s in enumerate(seg_ids)}
        return cls(index, z_col, delta_col)

    @property
    def count(self) -> int:
        return 2 * len(self.index) + len(self.z_col) + 2 * len(self.delta_col)

    def x(self, key: Key) -> int:
        return self.index[key]

    def h(self, key: Key) -> int:
        return len(self.index) + self.index[key]

    def delta(self, segment: int) -> int:
        return self.delta_col[segment]

    def right(self, segment: int) -> int:
        return self.delta_col[segment] + 1


def throughput_lp_bound(
    data: PackingInput,
    keys: Sequence[Key],
    objective: Mapping[Key, int],
    admitted: int,
    time_limit_s: float,
) -> float:
    """Upper bound on the stage-2 objective Σ objective[key]·h[key] (``math.inf`` if unknown)."""
    stage = StageObjective(dict(objective))
    value = solve_relaxation(data, keys, stage, admitted, time_limit_s).value
    return max(value, 0.0)


def solve_relaxation(
    data: PackingInput,
    keys: Sequence[Key],
    objective: StageObjective,
    admitted: int,
    time_limit_s: float,
) -> Relaxation:
    """The LP relaxation of the throughput stage over the items ``keys``.

    Parameters
    ----------
    data : PackingInput
        The packing data the model was built from.
    keys : sequence of Key
        Items (demand, family, segment, level) the relaxation may use.
    objective : StageObjective
        The stage's linear objective (half-widths, choices and each segment's maxima).
    admitted : int
        Admission value stage 1 reached (Σ admission weight · served ≥ admitted); when it is
        every demand's, each demand with an item here must be served.
    time_limit_s : float
        Time the LP may take.

    Returns
    -------
    Relaxation
        The optimum and the fractional choice and half-widths.
    """
    if not keys:
        return Relaxation(objective.offset if admitted <= 0 else -math.inf)
    cols = _Columns.of(keys)
    rows = _Rows()
    upper, cost = np.ones(cols.count), np.zeros(cols.count)
    _item_rows(data, cols, objective, rows, upper, cost)
    _level_rows(cols, objective, rows, upper, cost)
    if not _demand_rows(data, keys, cols, rows, admitted):
        return Relaxation(-math.inf)
    _capacity_rows(data, keys, cols, rows)
    return _solve(cols, rows, upper, cost, objective.offset, time_limit_s)


def _item_rows(
    data: PackingInput,
    cols: _Columns,
    objective: StageObjective,
    rows: _Rows,
    upper: npt.NDArray[np.float64],
    cost: npt.NDArray[np.float64],
) -> None:
    """Each item's half-width in [lo·x, hi·x], and its x at most its level's z (needed only
    where a segment has more than one level); the objective's item coefficients."""
    choose_level = len(cols.z_col) > len(cols.delta_col)
    for key in cols.index:
        fam = data.family_of(key)
        x, h = cols.x(key), cols.h(key)
        upper[h] = fam.hi_half
        cost[h] = -objective.h.get(key, 0.0)
        cost[x] = -objective.x.get(key, 0.0)
        rows.add([(h, 1.0), (x, -float(fam.lo_half))], 0.0, np.inf)
        rows.add([(h, 1.0), (x, -float(fam.hi_half))], -np.inf, 0.0)
        if choose_level:
            rows.add([(x, 1.0), (cols.z_col[key.segment_level], -1.0)], -np.inf, 0.0)


def _level_rows(
    cols: _Columns,
    objective: StageObjective,
    rows: _Rows,
    upper: npt.NDArray[np.float64],
    cost: npt.NDArray[np.float64],
) -> None:
    """At most one level per segment; each segment's maxima unbounded above and priced by the
    objective's segment weight."""
    for s in cols.delta_col:
        delta, right = cols.delta(s), cols.right(s)
        upper[delta] = upper[right] = np.inf
        cost[delta] = cost[right] = -objective.segment.get(s, 0.0)
        rows.add([(z, 1.0) for sl, z in cols.z_col.items() if sl.segment == s], 0.0, 1.0)


def _demand_rows(
    data: PackingInput, keys: Sequence[Key], cols: _Columns, rows: _Rows, admitted: int
) -> bool:
    """At most one item per demand, and the admission stage 1 reached.

    When stage 1 served every demand that has an item in the model, each demand must be
    served; a demand with no item among ``keys`` then makes the rows infeasible (returns False).
    """
    by_demand: dict[int, list[int]] = {}
    for key in keys:
        by_demand.setdefault(key.demand, []).append(cols.x(key))
    present = sum(data.admission_weights[d] for d in by_demand)
    if present < admitted:
        return False
    everyone = present == admitted
    for choices in by_demand.values():
        rows.add([(j, 1.0) for j in choices], 1.0 if everyone else 0.0, 1.0)
    if 0 < admitted < present:
        weights = [(cols.x(key), float(data.admission_weights[key.demand])) for key in keys]
        rows.add(weights, float(admitted), np.inf)
    return True


def _capacity_rows(data: PackingInput, keys: Sequence[Key], cols: _Columns, rows: _Rows) -> None:
    """The model's capacity row per segment, its maxima bounded by each (demand, family)."""
    for s in cols.delta_col:
        body: list[tuple[int, float]] = []
        groups: dict[DemandFamily, list[tuple[Key, ItemCoefficients]]] = {}
        for key in (k for k in keys if k.segment == s):
            c = key_coefficients(data, key)
            body += [(cols.h(key), float(c.body_h)), (cols.x(key), float(c.body_x))]
            groups.setdefault(key.demand_family, []).append((key, c))
        for group in groups.values():
            delta = [t for key, c in group for t in _need(cols, key, c.delta_x, c.delta_h)]
            rows.add([(cols.delta(s), 1.0), *delta], 0.0, np.inf)
            right = [t for key, c in group for t in _need(cols, key, c.right_x, c.right_h)]
            rows.add([(cols.right(s), 1.0), *right], 0.0, np.inf)
        length = float(data.segments[s].length * SCALE)
        rows.add([*body, (cols.delta(s), 1.0), (cols.right(s), 1.0)], -np.inf, length)


def _need(cols: _Columns, key: Key, per_x: int, per_h: int) -> list[tuple[int, float]]:
    """The terms ``-(per_x·x + per_h·h)`` of one item's need in a maximum's row."""
    return [(cols.x(key), -float(per_x)), (cols.h(key), -float(per_h))]


def _solve(
    cols: _Columns,
    rows: _Rows,
    upper: npt.NDArray[np.float64],
    cost: npt.NDArray[np.float64],
    offset: float,
    time_limit_s: float,
) -> Relaxation:
    """Minimise ``cost`` over the rows by HiGHS, with no integrality."""
    r, c, v = zip(*rows.entries, strict=True)
    matrix = sparse.csr_array((v, (r, c)), shape=(len(rows.lower), cols.count))
    result = optimize.milp(
        cost,
        constraints=optimize.LinearConstraint(matrix, rows.lower, rows.upper),
        bounds=optimize.Bounds(np.zeros(cols.count), upper),
        options={"time_limit": max(0.05, time_limit_s), "presolve": True},
    )
    if result.status == 2:
        return Relaxation(-math.inf)
    if result.status != 0 or result.x is None:
        log.info("LP relaxation not solved: %s", result.message)
        return Relaxation(math.inf)
    xs = {key: float(result.x[cols.x(key)]) for key in cols.index}
    hs = {key: float(result.x[cols.h(key)]) for key in cols.index}
    return Relaxation(float(-result.fun) + offset, xs, hs)
