"""The linear relaxation of the packing model's throughput stage: a valid upper bound.

CP-SAT's own bound on large models stays loose within a short time limit (its LP workers share
two cores with the search).  The relaxation of exactly the same rows — the same items, the same
scaled coefficients (:func:`solver.packing.item_coefficients`), the same objective
coefficients and the admission reached in stage 1 — solved by HiGHS through
:func:`scipy.optimize.milp` with no integrality, bounds the best integer plan from above as
well; the plan reports the tighter of the two bounds.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping, Sequence

import numpy as np
from scipy import optimize, sparse

from solver.packing import SCALE, Key, PackingInput, item_coefficients

__all__ = ["throughput_lp_bound"]

log = logging.getLogger(__name__)

_DENSE_ROW_LIMIT = 2000
"""Items above which the admission row is left out of the relaxation."""


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
    """Upper bound on the stage-2 objective Σ objective[key]·h[key] from the LP relaxation.

    Parameters
    ----------
    data : PackingInput
        The packing data the model was built from.
    keys : sequence of Key
        The model's items (demand, family, segment, level).
    objective : mapping
        Integer objective coefficient of each item's half-width.
    admitted : int
        Admission value stage 1 reached (Σ admission weight · served ≥ admitted).
    time_limit_s : float
        Time the LP may take.

    Returns
    -------
    float
        The LP optimum, or ``math.inf`` when the LP could not be solved in time.
    """
    if not keys:
        return 0.0
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
        cost[n_items + j] = -objective.get(key, 0)
        rows.add([(n_items + j, 1.0), (j, -float(fam.lo_half))], 0.0, np.inf)
        rows.add([(n_items + j, 1.0), (j, -float(fam.hi_half))], -np.inf, 0.0)
        rows.add([(j, 1.0), (z_col[key[2], key[3]], -1.0)], -np.inf, 0.0)
    for s in seg_ids:
        upper[delta_col[s]] = upper[delta_col[s] + 1] = np.inf
        rows.add([(z_col[sl], 1.0) for sl in levels if sl[0] == s], 0.0, 1.0)
    _demand_rows(data, keys, index, rows, admitted)
    _capacity_rows(data, keys, index, n_items, delta_col, rows)
    r, c, v = zip(*rows.entries, strict=True)
    matrix = sparse.csr_array((v, (r, c)), shape=(len(rows.lower), n_cols))
    result = optimize.milp(  # no integrality: the LP relaxation, by HiGHS
        cost,
        constraints=optimize.LinearConstraint(matrix, rows.lower, rows.upper),
        bounds=optimize.Bounds(np.zeros(n_cols), upper),
        options={"time_limit": max(0.05, time_limit_s), "presolve": True},
    )
    if result.status != 0:
        log.info("LP relaxation not solved: %s", result.message)
        return math.inf
    return float(-result.fun)


def _demand_rows(
    data: PackingInput, keys: Sequence[Key], index: Mapping[Key, int], rows: _Rows, admitted: int
) -> None:
    """At most one item per demand, and the admission stage 1 reached.

    On small models, when stage 1 served every demand that has an item, admission means each of
    them is served; otherwise the admission row is added.  On large models both are left out
    (they slow the simplex past its time share); leaving them out only loosens the bound.
    """
    by_demand: dict[int, list[int]] = {}
    for key in keys:
        by_demand.setdefault(key[0], []).append(index[key])
    everyone = sum(data.admission_weights[d] for d in by_demand)
    small = len(keys) <= _DENSE_ROW_LIMIT
    for cols in by_demand.values():
        rows.add([(j, 1.0) for j in cols], 1.0 if small and admitted >= everyone else 0.0, 1.0)
    if small and 0 < admitted < everyone:
        weights = [(index[key], float(data.admission_weights[key[0]])) for key in keys]
        rows.add(weights, float(admitted), np.inf)


def _capacity_rows(
    data: PackingInput,
    keys: Sequence[Key],
    index: Mapping[Key, int],
    n_items: int,
    delta_col: Mapping[int, int],
    rows: _Rows,
) -> None:
    for s, delta in delta_col.items():
        seg = data.segments[s]
        body: list[tuple[int, float]] = []
        groups: dict[tuple[int, int], list[tuple[int, int, int]]] = {}
        for key in (k for k in keys if k[2] == s):
            j = index[key]
            fam = data.options[key[0]].candidates[key[1]]
            c = item_coefficients(seg, fam, data.level(key[3]))
            body += [(n_items + j, float(c.body_h)), (j, float(c.body_x))]
            groups.setdefault((key[0], key[1]), []).append((j, c.delta_x, c.right_x))
        for group in groups.values():
            d_need = max(d for _, d, _ in group)
            r_need = max(r for _, _, r in group)
            rows.add([(delta, 1.0)] + [(j, -float(d_need)) for j, _, _ in group], 0.0, np.inf)
            rows.add([(delta + 1, 1.0)] + [(j, -float(r_need)) for j, _, _ in group], 0.0, np.inf)
        rows.add([*body, (delta, 1.0), (delta + 1, 1.0)], -np.inf, float(seg.length * SCALE))
