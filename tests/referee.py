"""A slow, exhaustive reference planner for small instances: the ground truth of the tests.

It is not part of the product and shares none of the product's packing (no candidate families,
no segment capacity formula, no CP-SAT).  From the product it borrows only the physics layer
and the independent checks:

* :func:`solver.candidates.candidate_for` fills a :class:`CarrierConfig` for one exact
  (modulation, code rate, roll-off, symbol rate): link figures, guards, throughput;
* the spectrum profiles of :mod:`solver.physics.emission`, to find where a carrier may sit next
  to its neighbour (the same leakage ratio :func:`solver.verify_plan` measures);
* :func:`solver.verify_plan`, which alone decides whether a plan is accepted;
* :func:`solver.summary.with_guards` and :func:`solver.geometry.free_segments_hz`, the
  definition of a plan's used bandwidth (``PlanSummary.used_bandwidth_hz``).

How it searches
---------------
For every demand, a handful of carrier configurations (:func:`configurations`): every finite
entry of the demand's MODCOD table (:func:`solver.equipment.modcod_table`) × every roll-off ×
symbol rates whose allocated width Rs(1 + α) is an even number
of raster steps (centres on the raster), from the narrowest that carries the minimum rate up to
the first that reaches the target (or the last at which the link still closes with the demand's
margin).  Dominated configurations are pruned and the rest thinned to at most
:data:`MAX_CONFIGS`, always keeping the narrowest and the best-throughput one.

Then every choice of pinned carriers (each served at its pinned centre, or not), and on top of it
every sequence of further carriers laid left to right: each next carrier at the smallest raster
gap after the previous one (or after an exclusion or pinned carrier further right) that passes
the pairwise leakage check, and up to :data:`EXTRA_GAPS` raster steps wider: for ``max_margin``
always (a wider gap lowers interference), for the other objectives only while the narrower
gap's plan fails its interference check (there a wider gap only costs spectrum).  Nothing is
placed beyond the block end.  Every prefix of a sequence is itself a candidate plan, accepted
only if ``verify_plan(...).passed``.  A branch is cut when its interference check already fails
(adding carriers only adds interference), or when an upper bound on what it can still reach
(:meth:`_Search.bound`) does not beat the best plan found.

Objectives, lexicographically (higher is better):

1. admission — the served set in priority order: the count of served demands at each priority,
   highest priority first (equivalently :func:`admission_value`, where one demand outweighs every
   lower-priority demand together);
2. the objective's own value, :func:`objective_value`:
   ``max_throughput`` Σ priority·min(throughput, target);
   ``min_bandwidth`` the free bandwidth, i.e. the usable width less ``used_bandwidth_hz`` as
   :func:`solver.summary.summarise` defines it (the union of every carrier widened by the guards
   :func:`solver.summary.with_guards` gives it: the larger guard of a neighbouring pair, or its
   own edge guard);
   ``max_margin`` the smallest margin after interference above each demand's own ``margin_db``.

Because the grid is coarse (a few configurations, raster positions only, few gaps), the best
plan found is a lower bound on the true optimum, and every plan it returns is verified.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from numpy.typing import NDArray

from solver import (
    Carrier,
    CarrierConfig,
    Demand,
    Objective,
    Problem,
    equipment,
    verify_plan,
)
from solver.candidates import candidate_for
from solver.geometry import free_segments_hz
from solver.physics import distortion, emission, link
from solver.summary import with_guards
from solver.verify import ViolationKind

__all__ = [
    "EXTRA_GAPS",
    "LEAKAGE_TOLERANCE_DB",
    "MAX_CONFIGS",
    "RefereeLimitError",
    "RefereePlan",
    "Refereed",
    "admission_key",
    "admission_value",
    "configurations",
    "objective_value",
    "referee",
    "servable_alone",
    "served_value",
    "used_bandwidth_hz",
]

MAX_CONFIGS = 6
"""Configurations kept per demand after pruning."""

EXTRA_GAPS = 2
"""Larger gaps tried beyond the smallest passing one (+1 … +EXTRA_GAPS raster steps)."""

WIDTHS_PER_FAMILY = 4
"""Even raster widths sampled per (MODCOD, roll-off) before pruning: the narrowest, the top and
evenly spaced ones between."""

LEAKAGE_TOLERANCE_DB = 0.05
"""Slack on the local leakage check, the same numerical slack verify allows (profile
interpolation); verify_plan still decides every plan."""

NODE_LIMIT = 60_000
"""Search nodes after which the referee gives up (the instance is too large for it)."""

_FATAL = frozenset(
    {
        ViolationKind.INTERFERENCE,
        ViolationKind.OVERLAP,
        ViolationKind.OUTSIDE_BLOCK,
        ViolationKind.IN_EXCLUSION,
    }
)
"""Violations no carrier added to the right can remove (interference only grows)."""


class RefereeLimitError(RuntimeError):
    """The instance is too large for exhaustive search within :data:`NODE_LIMIT` nodes."""


# ---------------------------------------------------------------- values


def _priority_weights(demands: Sequence[Demand]) -> dict[str, int]:
    """Weights in which one demand outweighs every lower-priority demand together."""
    weights: dict[str, int] = {}
    below = 0
    for level in sorted({d.priority for d in demands}):
        weight = below + 1
        at_level = [d for d in demands if d.priority == level]
        weights.update({d.id: weight for d in at_level})
        below += weight * len(at_level)
    return weights


def admission_key(problem: Problem, served: Sequence[str] | frozenset[str]) -> tuple[int, ...]:
    """Served count at each priority, highest priority first (compare lexicographically)."""
    ids = set(served)
    levels = sorted({d.priority for d in problem.demands}, reverse=True)
    return tuple(sum(1 for d in problem.demands if d.priority == p and d.id in ids) for p in levels)


def admission_value(problem: Problem, served: Sequence[str] | frozenset[str]) -> int:
    """Σ weight over served demands, one demand outweighing all lower priorities together."""
    weights = _priority_weights(problem.demands)
    return sum(weights[d] for d in set(served))


def served_value(problem: Problem, served: Sequence[str] | frozenset[str]) -> float:
    """Priority-weighted served value: Σ priority × min_rate_bps over served demands."""
    ids = set(served)
    return sum(d.priority * d.min_rate_bps for d in problem.demands if d.id in ids)


def used_bandwidth_hz(problem: Problem, carriers: Sequence[Carrier]) -> float:
    """Used spectrum exactly as ``summarise`` reports ``used_bandwidth_hz``: the usable width
    less the free stretches left beside the carriers widened by their guards."""
    free = free_segments_hz(problem, with_guards(problem, carriers))
    return problem.block.usable_width_hz - sum(free)


def objective_value(problem: Problem, carriers: Sequence[Carrier], objective: Objective) -> float:
    """The objective's own value of verified carriers (higher is better; see the module doc).

    ``carriers`` must carry ``margin_after_interference_db`` (as ``verify_plan`` fills it) for
    ``max_margin``; an empty plan scores 0 there, as the planner scores it.
    """
    demands = {d.id: d for d in problem.demands}
    if objective is Objective.MAX_THROUGHPUT:
        return sum(
            demands[c.demand_id].priority
            * min(c.config.throughput_bps, demands[c.demand_id].target_rate_bps)
            for c in carriers
        )
    if objective is Objective.MIN_BANDWIDTH:
        return problem.block.usable_width_hz - used_bandwidth_hz(problem, carriers)
    excess = [c.margin_after_interference_db - demands[c.demand_id].margin_db for c in carriers]
    return min(excess, default=0.0)


# ---------------------------------------------------------------- configurations


def _symbol_rates(
    problem: Problem,
    demand: Demand,
    entry: equipment.TableEntry,
    rolloff: float,
    option: equipment.BackoffOption,
) -> list[float]:
    """Symbol rates filling an even number of raster steps, from the minimum rate to the first
    width that reaches the target (the top), sampled at :data:`WIDTHS_PER_FAMILY` widths; the
    link measured at the back-off ``option`` (its Es/N0 offset and error-vector floor)."""
    raster = problem.block.raster_hz
    per_baud = entry.net_bits_per_symbol
    profile = equipment.profile_for(problem, demand)
    evm = equipment.carrier_evm_pct(profile, option.output_backoff_db, entry.modulation, rolloff)
    thermal_needed = distortion.thermal_esn0_needed_db(
        entry.required_esn0_db + demand.margin_db, evm
    )
    if demand.cn0_dbhz is not None:
        rs_link = link.max_symbol_rate_for_esn0(
            demand.cn0_dbhz + option.esn0_offset_db, thermal_needed
        )
    else:
        esn0 = demand.esn0_db if demand.esn0_db is not None else -math.inf
        rs_link = math.inf if esn0 + option.esn0_offset_db >= thermal_needed else 0.0
    step_baud = 2 * raster / (1 + rolloff)  # one even raster step of width
    lo = max(1, math.ceil(demand.min_rate_bps * (1 - 1e-9) / per_baud / step_baud - 1e-9))
    top = max(lo, math.ceil(demand.target_rate_bps * (1 - 1e-9) / per_baud / step_baud - 1e-9))
    if math.isfinite(rs_link):
        top = min(top, math.floor(rs_link * (1 + 1e-12) / step_baud))
    top = min(top, math.floor(problem.block.width_hz / (2 * raster) + 1e-9))
    if top < lo:
        return []
    picks = np.unique(np.round(np.linspace(lo, top, WIDTHS_PER_FAMILY)).astype(int))
    return [float(k * step_baud) for k in picks]


@dataclass(frozen=True)
class _Scored:
    config: CarrierConfig
    capped_bps: float
    excess_margin_db: float

    @property
    def width_hz(self) -> float:
        return self.config.allocated_bandwidth_hz

    def dominates(self, other: _Scored, objective: Objective) -> bool:
        """No wider, no larger guards, no less capped throughput (and for ``max_margin`` no
        less margin); a duplicate dominates too (one is kept)."""
        a, b = self.config, other.config
        return (
            a.allocated_bandwidth_hz <= b.allocated_bandwidth_hz * (1 + 1e-12)
            and a.guard_hz <= b.guard_hz * (1 + 1e-12)
            and a.edge_guard_hz <= b.edge_guard_hz * (1 + 1e-12)
            and self.capped_bps >= other.capped_bps * (1 - 1e-12)
            and (
                objective is not Objective.MAX_MARGIN
                or self.excess_margin_db >= other.excess_margin_db - 1e-12
            )
        )


def _raw_configurations(problem: Problem, demand: Demand) -> list[_Scored]:
    out: list[_Scored] = []
    profile = equipment.profile_for(problem, demand)
    table = equipment.modcod_table(profile, problem.coding, tuple(demand.modulations))
    settings = itertools.product(table, profile.rolloffs, equipment.backoff_options(profile))
    for entry, rolloff, option in settings:
        for rs in _symbol_rates(problem, demand, entry, rolloff, option):
            cand = candidate_for(
                problem,
                demand,
                entry.modulation,
                entry.code_rate,
                rolloff,
                rs,
                output_backoff_db=option.output_backoff_db,
            )
            if cand is None:
                continue
            cfg = cand.config
            capped = min(cfg.throughput_bps, demand.target_rate_bps)
            out.append(_Scored(cfg, capped, cfg.margin_db - demand.margin_db))
    return out


def _undominated(scored: list[_Scored], objective: Objective) -> list[_Scored]:
    ordered = sorted(scored, key=lambda s: (s.width_hz, s.config.guard_hz, -s.capped_bps))
    kept: list[_Scored] = []
    for s in ordered:
        if not any(k.dominates(s, objective) for k in kept):
            kept.append(s)
    return kept


def _thin(front: list[_Scored], objective: Objective, limit: int) -> list[_Scored]:
    """At most ``limit``: the narrowest, the smallest footprints with guards, the best capped
    throughput (and best margin for ``max_margin``), then evenly spread in throughput."""
    if len(front) <= limit:
        return front
    by_throughput = sorted(front, key=lambda s: (s.capped_bps, -s.width_hz))
    must = [
        min(front, key=lambda s: (s.width_hz, s.config.guard_hz)),
        min(front, key=lambda s: (s.width_hz + s.config.guard_hz, s.width_hz)),
        min(front, key=lambda s: (s.width_hz + 2 * s.config.edge_guard_hz, s.width_hz)),
        max(front, key=lambda s: (s.capped_bps, -s.width_hz)),
    ]
    if objective is Objective.MAX_MARGIN:
        must.append(max(front, key=lambda s: (s.excess_margin_db, -s.width_hz)))
    chosen = list(dict.fromkeys(must))[:limit]
    for index in np.round(np.linspace(0, len(by_throughput) - 1, limit)).astype(int):
        if len(chosen) < limit and by_throughput[index] not in chosen:
            chosen.append(by_throughput[index])
    return chosen


def configurations(
    problem: Problem,
    demand: Demand,
    objective: Objective | None = None,
    *,
    limit: int = MAX_CONFIGS,
) -> tuple[CarrierConfig, ...]:
    """The referee's configurations of ``demand``, narrowest first (see the module doc).

    Dominance: another configuration is no wider, has no larger guard or edge guard and carries
    no less capped throughput (and, for ``max_margin``, keeps no less margin).
    """
    goal = problem.objective if objective is None else objective
    front = _thin(_undominated(_raw_configurations(problem, demand), goal), goal, limit)
    ordered = sorted(front, key=lambda s: (s.width_hz, s.config.guard_hz, -s.capped_bps))
    return tuple(s.config for s in ordered)


# ---------------------------------------------------------------- geometry


@dataclass(frozen=True)
class _Fixed:
    """Something a free carrier cannot overlap: the block outside, an exclusion (a wall) or a
    pinned carrier."""

    lower_hz: float
    upper_hz: float
    carrier: Carrier | None = None


def _ratios(
    problem: Problem,
    cfg: CarrierConfig,
    gaps_hz: NDArray[np.float64],
    side: Literal["below", "above"],
) -> NDArray[np.float64]:
    """Leakage ratio (dB) of ``cfg`` at each gap, clamped to the profile's reach like verify."""
    key = emission.EmissionKey.for_carrier(problem.transmitter, cfg.modulation, cfg.rolloff)
    profile = emission.get_profile(key)
    rs = cfg.symbol_rate_baud
    gaps = np.clip(gaps_hz / rs, 0.0, profile.max_gap * (1 - 1e-9))
    return np.asarray(profile.leakage_ratio_db(gaps, side), dtype=np.float64)


def _pair_ok(
    problem: Problem,
    left: CarrierConfig | None,
    right: CarrierConfig | None,
    gaps_hz: NDArray[np.float64],
) -> NDArray[np.bool_]:
    """Whether each gap passes the leakage check between ``left`` and ``right`` (``None``: a
    block edge or exclusion, where the edge limit applies to the carrier facing it)."""
    ok = np.ones(gaps_hz.shape, dtype=bool)
    if left is not None:
        limit = problem.edge_limit_db if right is None else problem.leakage_limit_db
        ok &= _ratios(problem, left, gaps_hz, "above") >= limit - LEAKAGE_TOLERANCE_DB
    if right is not None:
        limit = problem.edge_limit_db if left is None else problem.leakage_limit_db
        ok &= _ratios(problem, right, gaps_hz, "below") >= limit - LEAKAGE_TOLERANCE_DB
    return ok


def _walls(problem: Problem) -> list[_Fixed]:
    block = problem.block
    walls = [_Fixed(-math.inf, block.start_hz), _Fixed(block.stop_hz, math.inf)]
    walls += [_Fixed(x.start_hz, x.stop_hz) for x in block.exclusions]
    return walls


def _config_of(item: _Fixed) -> CarrierConfig | None:
    return None if item.carrier is None else item.carrier.config


def _raster_edges(
    problem: Problem, after_hz: float, before_hz: float, width_hz: float
) -> NDArray[np.float64]:
    """Every raster point at or above ``after_hz`` where a carrier of ``width_hz`` ends at or
    below ``before_hz`` (raster points counted from the block start)."""
    block = problem.block
    raster = block.raster_hz
    first = block.start_hz + math.ceil((after_hz - block.start_hz) / raster - 1e-9) * raster
    room = before_hz - width_hz - first
    count = math.floor(room / raster + 1e-9) + 1 if room > -1e-6 else 0
    return np.asarray(first + np.arange(count) * raster, dtype=np.float64)


def _lower_edges(
    problem: Problem,
    cfg: CarrierConfig,
    after: _Fixed,
    before: _Fixed,
    extra_gaps: int,
) -> list[float]:
    """Raster lower edges for ``cfg`` between ``after`` and ``before``: the smallest gap that
    passes the leakage check with ``after``, then up to ``extra_gaps`` raster steps more."""
    edges = _raster_edges(problem, after.upper_hz, before.lower_hz, cfg.allocated_bandwidth_hz)
    ok = _pair_ok(problem, _config_of(after), cfg, edges - after.upper_hz)
    passing = np.flatnonzero(ok)
    if passing.size == 0:
        return []
    wanted = passing[0] + np.arange(extra_gaps + 1)
    return [float(edges[i]) for i in wanted if i < edges.size and ok[i]]


def _faces_ok(problem: Problem, lower: _Fixed, upper: _Fixed) -> bool:
    """The leakage check between two neighbours at their actual gap."""
    gap = np.array([upper.lower_hz - lower.upper_hz])
    return bool(_pair_ok(problem, _config_of(lower), _config_of(upper), gap)[0])


# ---------------------------------------------------------------- results


@dataclass(frozen=True)
class RefereePlan:
    """A verified plan: carriers as ``verify_plan`` returns them (sorted, figures filled)."""

    carriers: tuple[Carrier, ...]
    admission: tuple[int, ...]
    value: float

    @property
    def served(self) -> frozenset[str]:
        return frozenset(c.demand_id for c in self.carriers)


@dataclass(frozen=True)
class Refereed:
    """What the referee found for one problem and objective."""

    objective: Objective
    best: RefereePlan
    admission_value: int
    served_value: float
    """The smallest Σ priority × min_rate among the served sets found at the best admission:
    serving in priority order, a plan must carry at least this much (see the tests)."""
    alone: frozenset[str]
    """Demands the referee serves alone (a verified plan with that carrier and no other)."""
    configurations: Mapping[str, tuple[CarrierConfig, ...]]
    nodes: int


# ---------------------------------------------------------------- search


@dataclass
class _Search:
    problem: Problem
    objective: Objective
    configs: Mapping[str, tuple[CarrierConfig, ...]]
    extra_gaps: int
    node_limit: int
    fixed: list[_Fixed] = field(default_factory=list)
    best: RefereePlan | None = None
    demand: dict[str, Demand] = field(default_factory=dict)
    ordered: dict[str, tuple[CarrierConfig, ...]] = field(default_factory=dict)
    ties: dict[tuple[int, ...], float] = field(default_factory=dict)
    nodes: int = 0

    def __post_init__(self) -> None:
        self.demand = {d.id: d for d in self.problem.demands}
        self.ordered = {d: _search_order(cfgs, self.objective) for d, cfgs in self.configs.items()}

    # -- bookkeeping

    def consider(self, carriers: tuple[Carrier, ...]) -> None:
        served = frozenset(c.demand_id for c in carriers)
        key = admission_key(self.problem, served)
        value = objective_value(self.problem, carriers, self.objective)
        worth = served_value(self.problem, served)
        self.ties[key] = min(self.ties.get(key, math.inf), worth)
        if self.best is None or (key, value) > (self.best.admission, self.best.value):
            self.best = RefereePlan(carriers, key, value)

    def check(self, carriers: Sequence[Carrier]) -> tuple[bool, bool, tuple[Carrier, ...]]:
        """(accepted, extendable, verified carriers) of a plan."""
        self.nodes += 1
        if self.nodes > self.node_limit:
            raise RefereeLimitError(f"more than {self.node_limit} search nodes")
        verification = verify_plan(self.problem, carriers)
        kinds = {v.kind for v in verification.violations}
        return verification.passed, not (kinds & _FATAL), verification.carriers

    # -- bounds

    def _room_after(self, cursor_hz: float) -> float:
        """Widest stretch free of walls and pinned carriers to the right of ``cursor_hz``."""
        items = sorted(self.fixed, key=lambda f: f.lower_hz)
        widest, start = 0.0, cursor_hz
        for item in items:
            if item.upper_hz <= start:
                continue
            widest = max(widest, item.lower_hz - start)
            start = max(start, item.upper_hz)
        return widest

    def bound(
        self,
        carriers: tuple[Carrier, ...],
        remaining: frozenset[str],
        cursor_hz: float,
        margin_bound_db: float,
    ) -> tuple[tuple[int, ...], float]:
        """An upper bound on (admission, value) of every plan extending ``carriers`` with
        carriers from ``remaining`` to the right of ``cursor_hz``.

        Admission: every remaining demand whose narrowest configuration fits the widest free
        stretch to the right.  Value: ``max_throughput`` adds each such demand's best capped
        throughput; ``min_bandwidth`` counts the carriers' own widths (the used bandwidth
        covers them) and, to reach the best admission, the narrowest widths of the demands
        still missing at each priority; ``max_margin`` takes ``margin_bound_db``, the
        smallest margin so far (more carriers only add interference).
        """
        problem = self.problem
        room = self._room_after(cursor_hz)
        fits = {
            d: [c for c in self.configs[d] if c.allocated_bandwidth_hz <= room + 1e-6]
            for d in remaining
        }
        reachable = [d for d, cfgs in fits.items() if cfgs]
        served = [c.demand_id for c in carriers]
        key = admission_key(problem, [*served, *reachable])
        if self.objective is Objective.MAX_THROUGHPUT:
            extra = sum(
                self.demand[d].priority
                * min(max(c.throughput_bps for c in fits[d]), self.demand[d].target_rate_bps)
                for d in reachable
            )
            return key, objective_value(problem, carriers, self.objective) + extra
        if self.objective is Objective.MIN_BANDWIDTH:
            widths = sum(c.config.allocated_bandwidth_hz for c in carriers)
            if self.best is not None and key == self.best.admission:
                widths += self._missing_widths(served, {d: fits[d] for d in reachable})
            return key, problem.block.usable_width_hz - widths
        if self.best is not None and key == self.best.admission:
            for d in self._forced(served, reachable):
                best_excess = max(c.margin_db for c in fits[d]) - self.demand[d].margin_db
                margin_bound_db = min(margin_bound_db, best_excess)
        return key, margin_bound_db

    def _forced(self, served: list[str], reachable: list[str]) -> list[str]:
        """Remaining demands every plan matching the best admission must serve: those of a
        priority where all that are left are needed."""
        assert self.best is not None
        have = admission_key(self.problem, served)
        levels = sorted({d.priority for d in self.problem.demands}, reverse=True)
        forced: list[str] = []
        for level, want, got in zip(levels, self.best.admission, have, strict=True):
            at_level = [d for d in reachable if self.demand[d].priority == level]
            if want - got >= len(at_level):
                forced += at_level
        return forced

    def _missing_widths(self, served: list[str], fits: Mapping[str, list[CarrierConfig]]) -> float:
        """Least width the demands still needed to match the best admission take."""
        assert self.best is not None
        have = admission_key(self.problem, served)
        levels = sorted({d.priority for d in self.problem.demands}, reverse=True)
        total = 0.0
        for level, want, got in zip(levels, self.best.admission, have, strict=True):
            narrowest = sorted(
                min(c.allocated_bandwidth_hz for c in cfgs)
                for d, cfgs in fits.items()
                if self.demand[d].priority == level
            )
            total += sum(narrowest[: max(0, want - got)])
        return total

    def hopeless(
        self,
        carriers: tuple[Carrier, ...],
        remaining: frozenset[str],
        cursor_hz: float,
        margin_bound_db: float,
    ) -> bool:
        """Whether neither ``carriers`` nor any extension can beat the best plan strictly."""
        if self.best is None:
            return False
        key, value = self.bound(carriers, remaining, cursor_hz, margin_bound_db)
        return key < self.best.admission or (
            key == self.best.admission and value <= self.best.value
        )

    # -- placement

    def anchors(self, last: _Fixed) -> Iterator[tuple[_Fixed, _Fixed]]:
        """(thing after which, thing before which) a next carrier may sit, left to right: the
        gap after ``last``, then the gaps after each later wall or pinned carrier."""
        later = sorted(
            (f for f in self.fixed if f.lower_hz >= last.upper_hz - 1e-6),
            key=lambda f: f.lower_hz,
        )
        if not later:
            return
        yield last, later[0]
        yield from itertools.pairwise(later)

    def extend(
        self,
        carriers: tuple[Carrier, ...],
        remaining: frozenset[str],
        last: _Fixed,
        same_gap_only: bool,
    ) -> None:
        """Every next carrier (demand, gap, configuration, position) after ``last``."""
        margin = (
            objective_value(self.problem, carriers, Objective.MAX_MARGIN) if carriers else math.inf
        )
        order = sorted(remaining, key=lambda d: (-self.demand[d].priority, d))
        for d, (after, before) in itertools.product(order, list(self.anchors(last))):
            if same_gap_only and after is not last:
                continue
            for cfg in self.ordered[d]:
                self.place(carriers, remaining - {d}, cfg, after, before, margin)

    def place(
        self,
        carriers: tuple[Carrier, ...],
        remaining: frozenset[str],
        cfg: CarrierConfig,
        after: _Fixed,
        before: _Fixed,
        margin_bound_db: float,
    ) -> None:
        """``cfg`` at the smallest passing gap after ``after`` (and larger ones: for
        ``max_margin`` always, otherwise only while the smaller gap fails verification)."""
        width = cfg.allocated_bandwidth_hz
        for lower in _lower_edges(self.problem, cfg, after, before, self.extra_gaps):
            new = Carrier(cfg, lower + width / 2, 0.0, 0.0)
            plan = (*carriers, new)
            if self.hopeless(plan, remaining, new.upper_edge_hz, margin_bound_db):
                return
            accepted, extendable, verified = self.check(plan)
            if accepted:
                self.consider(verified)
            if not extendable:
                continue
            here = _Fixed(new.lower_edge_hz, new.upper_edge_hz, new)
            if remaining:
                # A carrier that fails towards what follows it needs another one in between.
                dangling = not _faces_ok(self.problem, here, before)
                self.extend(verified, remaining, here, dangling)
            if self.objective is not Objective.MAX_MARGIN:
                return


def _search_order(
    configs: tuple[CarrierConfig, ...], objective: Objective
) -> tuple[CarrierConfig, ...]:
    """Configurations in the order most likely to find a good plan first."""
    if objective is Objective.MAX_THROUGHPUT:
        return tuple(sorted(configs, key=lambda c: -c.throughput_bps))
    if objective is Objective.MAX_MARGIN:
        return tuple(sorted(configs, key=lambda c: -c.margin_db))
    return configs


def _pinned_choices(
    problem: Problem, configs: Mapping[str, tuple[CarrierConfig, ...]]
) -> Iterator[tuple[Carrier, ...]]:
    """Every choice of pinned carriers: each pinned demand at its centre with one of its
    configurations, or not served."""
    options: list[list[Carrier | None]] = []
    for d in problem.demands:
        if d.pinned_center_hz is None:
            continue
        inside = (Carrier(c, d.pinned_center_hz, 0.0, 0.0) for c in configs[d.id])
        options.append([None, *(c for c in inside if _in_block(problem, c))])
    for combo in itertools.product(*options):
        yield tuple(c for c in combo if c is not None)


def _in_block(problem: Problem, carrier: Carrier) -> bool:
    """Inside the block (verify_plan cannot measure a carrier that sticks out of it)."""
    block = problem.block
    return carrier.lower_edge_hz >= block.start_hz - 1e-6 and (
        carrier.upper_edge_hz <= block.stop_hz + 1e-6
    )


def servable_alone(
    problem: Problem, configs: Mapping[str, tuple[CarrierConfig, ...]] | None = None
) -> frozenset[str]:
    """Demands with a verified plan that holds their carrier and no other.

    Every configuration, every raster position that passes the leakage check towards the walls
    on both sides (pinned demands only at their centre); ``verify_plan`` confirms.
    """
    table = configs if configs is not None else _all_configurations(problem, problem.objective)
    walls = sorted(_walls(problem), key=lambda w: w.lower_hz)
    found: set[str] = set()
    for demand in problem.demands:
        for cfg in table[demand.id]:
            if _alone_ok(problem, demand, cfg, walls):
                found.add(demand.id)
                break
    return frozenset(found)


def _alone_ok(problem: Problem, demand: Demand, cfg: CarrierConfig, walls: list[_Fixed]) -> bool:
    width = cfg.allocated_bandwidth_hz
    if demand.pinned_center_hz is not None:
        pinned = Carrier(cfg, demand.pinned_center_hz, 0.0, 0.0)
        return _in_block(problem, pinned) and verify_plan(problem, [pinned]).passed
    for after, before in itertools.pairwise(walls):
        edges = _raster_edges(problem, after.upper_hz, before.lower_hz, width)
        ok = _pair_ok(problem, None, cfg, edges - after.upper_hz)
        ok &= _pair_ok(problem, cfg, None, before.lower_hz - (edges + width))
        for i in np.flatnonzero(ok)[:3]:
            carrier = Carrier(cfg, float(edges[i]) + width / 2, 0.0, 0.0)
            if verify_plan(problem, [carrier]).passed:
                return True
    return False


def _all_configurations(
    problem: Problem, objective: Objective
) -> dict[str, tuple[CarrierConfig, ...]]:
    return {d.id: configurations(problem, d, objective) for d in problem.demands}


def referee(
    problem: Problem,
    objective: Objective | None = None,
    *,
    extra_gaps: int = EXTRA_GAPS,
    node_limit: int = NODE_LIMIT,
) -> Refereed:
    """The best verified plan the exhaustive search finds (see the module doc).

    Parameters
    ----------
    problem : Problem
        A small instance (about five demands, a coarse raster).
    objective : Objective, optional
        Defaults to ``problem.objective``.
    extra_gaps : int
        Larger gaps tried beyond the smallest passing one, in raster steps.
    node_limit : int
        Plans checked before :class:`RefereeLimitError` is raised.

    Returns
    -------
    Refereed
        The best plan (lexicographically: admission, then the objective's value), the
        admission value, the served value, the demands servable alone and the configurations.
    """
    goal = problem.objective if objective is None else objective
    configs = _all_configurations(problem, goal)
    search = _Search(problem, goal, configs, extra_gaps, node_limit)
    free = frozenset(d.id for d in problem.demands if d.pinned_center_hz is None)
    search.consider(())
    for pinned in _pinned_choices(problem, configs):
        accepted, extendable, verified = search.check(pinned)
        if accepted:
            search.consider(verified)
        if not extendable:
            continue
        search.fixed = sorted(
            [*_walls(problem), *(_Fixed(c.lower_edge_hz, c.upper_edge_hz, c) for c in pinned)],
            key=lambda f: f.lower_hz,
        )
        if free:
            search.extend(verified, free, search.fixed[0], same_gap_only=False)
    best = search.best
    assert best is not None  # the empty plan is always considered
    return Refereed(
        objective=goal,
        best=best,
        admission_value=admission_value(problem, best.served),
        served_value=search.ties[best.admission],
        alone=servable_alone(problem, configs),
        configurations=configs,
        nodes=search.nodes,
    )
