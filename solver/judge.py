"""How good a verified plan is: its objective value, a bound that holds for every plan the
verifier passes, the gap between them, and whether the plan is proven optimal.

The bound must hold for plans the planner cannot make (other configurations, other orders,
other positions), or an "optimal" plan could be beaten.  So it leaves out everything the
verifier does not demand of *every* plan:

* carriers need no more spacing between them than their own leakage guards (the verifier's
  interference rule can let two neighbours closer than their spectral masks suggest), and
  each keeps its own guard towards a block edge or an exclusion, which the verifier always
  checks;
* pinned carriers and carriers kept in place by a replan may sit anywhere;
* every configuration that closes its link counts, pruned only where another carries more
  per hertz, reaches as high and needs no more guard per bit towards an edge or a neighbour
  (:func:`bound_candidates`); each counts every width from its exact minimum-rate width to
  its exact top, valued at exactly what it carries.

Admission comes first: a plan is *proven* to serve the most it can when the relaxation cannot
serve more (admission weight one higher is infeasible).  Then, by objective:

* ``max_throughput``: Σ priority × min(throughput, target), bounded by the linear relaxation of
  :func:`~solver.packing.spacing.throughput_bound`;
* ``min_bandwidth``: free spectrum, bounded by the usable width less the narrowest minimum-rate
  allocation of as many demands of each priority as the plan serves;
* ``max_margin``: the least margin beyond each demand's own after interference, bounded by
  the best clear-sky margin of the demands of each priority that could be served.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from solver.candidates import best_margin_db, least_guard_per_baud, least_width_hz
from solver.geometry import free_segments_hz
from solver.model import Carrier, Demand, Objective, Problem, SolveStatus
from solver.packing import Segment, admission_weights
from solver.packing.arrangement import FINE, fine_slot
from solver.packing.families import Family
from solver.packing.spacing import BoundItem, Slot, throughput_bound
from solver.summary import with_guards

__all__ = ["BOUND_TOLERANCE", "Judgement", "branches", "judge"]

BOUND_TOLERANCE = 1e-4
"""A plan is optimal when its bound lies within this fraction of it (0.01 %)."""

INTEGRAL_S = 1.0
"""Time (s) the bound's mixed-integer version may branch (each carrier whole, in one stretch);
its proven dual bound stands when it stops early."""

INTEGRAL_ITEMS = 4000
"""Above this many relaxation columns only the linear relaxation is solved."""

MARGIN_TOLERANCE_DB = 0.01
"""For ``max_margin``: optimal when the bound lies within this many dB."""


@dataclass(frozen=True)
class Judgement:
    status: SolveStatus
    value: float
    bound: float
    gap: float
    proven_admission: bool


def judge(
    problem: Problem,
    carriers: Sequence[Carrier],
    segments: Sequence[Segment],
    families: Mapping[str, Sequence[Family]],
    integral_s: float = 0.0,
) -> Judgement:
    """Judge verified ``carriers`` (with their margins after interference) of ``problem``.

    ``segments`` are the free stretches of the block with no carrier fixed (edges and
    exclusions only); ``families`` are each demand's :func:`bound_candidates`; the bound's
    mixed-integer version may branch for ``integral_s`` (at most :data:`INTEGRAL_S` is
    useful; 0 keeps the linear relaxation).
    """
    weights = dict(
        zip((d.id for d in problem.demands), admission_weights(problem.demands), strict=True)
    )
    served = [c.demand_id for c in carriers]
    admitted = sum(weights[d] for d in served)
    items = _items(problem, segments, families)
    lengths = [FINE * s.length for s in segments]
    order = [weights[d.id] for d in problem.demands]
    branch = integral_s if len(items) <= INTEGRAL_ITEMS else 0.0  # see branches()
    proven = throughput_bound(items, lengths, order, admitted + 1, integral_s=branch) == -math.inf
    if problem.objective is Objective.MAX_THROUGHPUT:
        value = _throughput(problem, carriers)
        bound = max(throughput_bound(items, lengths, order, admitted, integral_s=branch), value)
        closed = bound - value <= BOUND_TOLERANCE * max(bound, 1.0)
        gap = (bound - value) / max(value, 1.0)
    elif problem.objective is Objective.MIN_BANDWIDTH:
        value = sum(free_segments_hz(problem, with_guards(problem, carriers)))
        bound = max(_free_bound(problem, served), value)
        closed = bound - value <= BOUND_TOLERANCE * max(bound, 1.0)
        gap = (bound - value) / max(value, problem.block.raster_hz)
    else:
        demands = {d.id: d for d in problem.demands}
        excess = [c.margin_after_interference_db - demands[c.demand_id].margin_db for c in carriers]
        value = min(excess, default=0.0)
        bound = max(_margin_bound(problem, served, segments), value)
        closed = bound - value <= MARGIN_TOLERANCE_DB
        gap = (bound - value) / max(abs(value), 0.1)
    status = SolveStatus.OPTIMAL if proven and closed else SolveStatus.FEASIBLE
    return Judgement(status, value, bound, gap, proven)


def branches(families: Mapping[str, Sequence[Family]], segments: Sequence[Segment]) -> bool:
    """Whether :func:`judge` may run the bound's mixed-integer version for these families
    (at most :data:`INTEGRAL_ITEMS` columns, counting each family in every segment)."""
    return sum(len(f) for f in families.values()) * max(len(segments), 1) <= INTEGRAL_ITEMS


def _throughput(problem: Problem, carriers: Sequence[Carrier]) -> float:
    demands = {d.id: d for d in problem.demands}
    return sum(
        demands[c.demand_id].priority
        * min(c.config.throughput_bps, demands[c.demand_id].target_rate_bps)
        for c in carriers
    )


def _items(
    problem: Problem, segments: Sequence[Segment], families: Mapping[str, Sequence[Family]]
) -> list[BoundItem]:
    """Relaxation columns: each demand's families in each stretch they fit.

    Verification holds every carrier's leakage ratio towards its neighbour at the gap between
    them (measured in a band of the carrier's own width, whatever the neighbour), so a gap is
    at least the larger of the two carriers' leakage guards, and so at least their mean ``a``;
    towards a block edge or exclusion each keeps its edge guard ``e``.  Both are taken on the
    kinder side and at the verifier's tolerance below the limit.
    """
    items = []
    for d, demand in enumerate(problem.demands):
        for family in families.get(demand.id, ()):
            slot = _span(fine_slot(family, demand, demand.priority), family, demand)
            fam = slot.family
            top = family.top.config  # guards in grid units per half-width unit, exactly
            per_half = 2.0 * top.symbol_rate_baud / top.allocated_bandwidth_hz
            leak = _least_guard_per_baud(fam, problem.leakage_limit_db) * per_half
            edge = _least_guard_per_baud(fam, problem.edge_limit_db) * per_half
            leak = 0.0 if math.isinf(leak) else leak  # alone in its reach: no neighbour gap
            for s, seg in enumerate(segments):
                if 2 * slot.lo_half > FINE * seg.length:
                    continue
                walls = (seg.left_wall.family, seg.right_wall.family)
                end = edge - leak / 2 if walls == (None, None) else -leak / 2
                items.append(
                    BoundItem(
                        d, s, slot.lo_half, slot.hi_half, slot.value_per_half, 2.0 + leak, end
                    )
                )
    return items


@dataclass(frozen=True)
class _Span:
    """A family on the fine grid with the half-widths a carrier of it can really take: from the
    one that carries the demand's minimum rate exactly to the one that carries the family's
    top exactly (the link's limit or the target), neither rounded to the grid; and its value
    per half-width unit, the exact throughput a half-width unit carries."""

    family: Family
    lo_half: float
    hi_half: float
    value_per_half: float


def _span(slot: Slot, family: Family, demand: Demand) -> _Span:
    """``slot`` (``family`` on the fine grid) widened to every half-width a carrier of the
    family can take, each valued at exactly what it carries: the fine grid rounds the least
    width up, a power-limited family's widest down to the last grid step that keeps the
    margin, and caps the value per unit at the target over the rounded-up top, which would
    count a carrier narrower than a grid step as carrying less than it does."""
    fam, top = slot.family, family.top.config
    per_half = top.throughput_bps * 2.0 * fam.raster_hz / top.allocated_bandwidth_hz
    widest = min(top.throughput_bps, demand.target_rate_bps) / per_half
    least = demand.min_rate_bps / per_half
    return _Span(fam, least, max(widest, least), demand.priority * per_half)


def _least_guard_per_baud(family: Family, limit_db: float) -> float:
    """The smaller of a family's two one-sided guards (symbol-rate units) for ``limit_db``,
    at the verifier's tolerance below it (0 for a family without a spectrum profile)."""
    return 0.0 if family.key is None else least_guard_per_baud(family.key, limit_db)


def _served_per_priority(problem: Problem, served: Sequence[str]) -> dict[int, int]:
    ids = set(served)
    counts: dict[int, int] = {}
    for d in problem.demands:
        if d.id in ids:
            counts[d.priority] = counts.get(d.priority, 0) + 1
    return counts


def _free_bound(problem: Problem, served: Sequence[str]) -> float:
    """Usable width less, per priority, the narrowest allocations of as many demands as the
    plan serves there (any plan of the same admission serves as many per priority)."""
    used = 0.0
    for priority, count in _served_per_priority(problem, served).items():
        widths = sorted(
            least_width_hz(problem, d) for d in problem.demands if d.priority == priority
        )
        used += sum(widths[:count])
    return problem.block.usable_width_hz - used


def _margin_bound(problem: Problem, served: Sequence[str], segments: Sequence[Segment]) -> float:
    """Per priority, the ``count``-th best clear-sky margin among its demands; the least of
    those over the priorities (any plan of the same admission serves as many per priority)."""
    widest = max((s.length for s in segments), default=0) * problem.block.raster_hz
    bound = math.inf
    for priority, count in _served_per_priority(problem, served).items():
        margins = sorted(
            (best_margin_db(problem, d, widest) for d in problem.demands if d.priority == priority),
            reverse=True,
        )
        bound = min(bound, margins[count - 1])
    return 0.0 if math.isinf(bound) else bound
