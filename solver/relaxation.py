"""The linear relaxation of the packing model's throughput stage: a valid upper bound, and a
fractional solution to round.

The relaxation has exactly the model's rows — the same items, the same scaled coefficients
(:func:`solver.packing.item_coefficients`), the same objective coefficients and the admission
reached in stage 1 — solved by HiGHS through :func:`scipy.optimize.milp` with no integrality.
It bounds the best integer plan over the same items from above.  Given only the items of one
protection level per segment it is nearly tight (a multiple-choice knapsack's relaxation has few
fractional items), which is what :mod:`solver.levelsearch` relies on.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, sparse

from solver.packing import (
    SCALE,
    ItemCoefficients,
    Key,
    PackingInput,
    StageObjective,
    item_coefficients,
)

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
    index = {key: n for n, key in enumerate(keys)}
    n_items = len(keys)
    levels = sorted({(key[2], key[3]) for key in keys})
    z_col = {sl: 2 * n_items + n for n, sl in enumerate(levels)}
    seg_ids = sorted({key[2] for key in keys})
    delta_col = {s: 2 * n_items + len(levels) + 2 * n for n, s in enumerate(seg_ids)}
    n_cols = 2 * n_items + len(levels) + 2 * len(seg_ids)
    rows = _Rows()
    upper = np.ones(n_cols)
    cost = np.zeros(n_cols)
    for key, j in index.items():
        fam = data.options[key[0]].candidates[key[1]]
        upper[n_items + j] = fam.hi_half
        cost[n_items + j] = -objective.h.get(key, 0.0)
        cost[j] = -objective.x.get(key, 0.0)
        rows.add([(n_items + j, 1.0), (j, -float(fam.lo_half))], 0.0, np.inf)
        rows.add([(n_items + j, 1.0), (j, -float(fam.hi_half))], -np.inf, 0.0)
        if len(levels) > len(seg_ids):  # one level per segment needs no level rows
            rows.add([(j, 1.0), (z_col[key[2], key[3]], -1.0)], -np.inf, 0.0)
    for s in seg_ids:
        upper[delta_col[s]] = upper[delta_col[s] + 1] = np.inf
        cost[delta_col[s]] = cost[delta_col[s] + 1] = -objective.segment.get(s, 0.0)
        rows.add([(z_col[sl], 1.0) for sl in levels if sl[0] == s], 0.0, 1.0)
    if not _demand_rows(data, keys, index, rows, admitted):
        return Relaxation(-math.inf)
    _capacity_rows(data, keys, index, n_items, delta_col, rows)
    r, c, v = zip(*rows.entries, strict=True)
    matrix = sparse.csr_array((v, (r, c)), shape=(len(rows.lower), n_cols))
    result = optimize.milp(  # no integrality: the LP relaxation, by HiGHS
        cost,
        constraints=optimize.LinearConstraint(matrix, rows.lower, rows.upper),
        bounds=optimize.Bounds(np.zeros(n_cols), upper),
        options={"time_limit": max(0.05, time_limit_s), "presolve": True},
    )
    if result.status == 2:
        return Relaxation(-math.inf)
    if result.status != 0 or result.x is None:
        log.info("LP relaxation not solved: %s", result.message)
        return Relaxation(math.inf)
    xs = {key: float(result.x[j]) for key, j in index.items()}
    hs = {key: float(result.x[n_items + j]) for key, j in index.items()}
    return Relaxation(float(-result.fun) + objective.offset, xs, hs)


def _demand_rows(
    data: PackingInput, keys: Sequence[Key], index: Mapping[Key, int], rows: _Rows, admitted: int
) -> bool:
    """At most one item per demand, and the admission stage 1 reached.

    When stage 1 served every demand that has an item in the model, each demand must be
    served; a demand with no item among ``keys`` then makes the rows infeasible (returns False).
    """
    by_demand: dict[int, list[int]] = {}
    for key in keys:
        by_demand.setdefault(key[0], []).append(index[key])
    present = sum(data.admission_weights[d] for d in by_demand)
    if present < admitted:
        return False
    everyone = present == admitted
    for cols in by_demand.values():
        rows.add([(j, 1.0) for j in cols], 1.0 if everyone else 0.0, 1.0)
    if 0 < admitted < present:
        weights = [(index[key], float(data.admission_weights[key[0]])) for key in keys]
        rows.add(weights, float(admitted), np.inf)
    return True


def _capacity_rows(
    data: PackingInput,
    keys: Sequence[Key],
    index: Mapping[Key, int],
    n_items: int,
    delta_col: Mapping[int, int],
    rows: _Rows,
) -> None:
    """The model's capacity row per segment, its maxima bounded by each (demand, family)."""
    for s, delta in delta_col.items():
        seg = data.segments[s]
        body: list[tuple[int, float]] = []
        groups: dict[tuple[int, int], list[tuple[int, ItemCoefficients]]] = {}
        for key in (k for k in keys if k[2] == s):
            j = index[key]
            fam = data.options[key[0]].candidates[key[1]]
            c = item_coefficients(seg, fam, data.level(key[3]))
            body += [(n_items + j, float(c.body_h)), (j, float(c.body_x))]
            groups.setdefault((key[0], key[1]), []).append((j, c))
        for group in groups.values():
            rows.add(
                [(delta, 1.0)]
                + [
                    t
                    for j, c in group
                    for t in ((j, -float(c.delta_x)), (n_items + j, -float(c.delta_h)))
                ],
                0.0,
                np.inf,
            )
            rows.add(
                [(delta + 1, 1.0)]
                + [
                    t
                    for j, c in group
                    for t in ((j, -float(c.right_x)), (n_items + j, -float(c.right_h)))
                ],
                0.0,
                np.inf,
            )
        rows.add([*body, (delta, 1.0), (delta + 1, 1.0)], -np.inf, float(seg.length * SCALE))
