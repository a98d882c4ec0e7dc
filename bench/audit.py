"""Measurements of a plan that rely on the independent verifier only, and the greedy admission
peer.

* :func:`idle_gaps` — how much of each gap between neighbouring carriers could be closed by
  sliding carriers down while the plan still passes :func:`solver.verify_plan`;
* :func:`greedy_admission` — demands in priority order, each at its narrowest minimum-rate
  configuration, first fit from the low end, kept only if the plan still verifies;
* :func:`served_weight` and :func:`served_by_priority` — what a set of served demands is worth.

Nothing here reads the packing model: positions, guards and acceptance come from the placed
carriers, the candidates' configuration check (via :mod:`scenarios`) and the verifier.
"""

from __future__ import annotations

import math
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace

from scenarios import min_rate_configurations

from solver import Carrier, Plan, Problem, verify_plan

# ---------------------------------------------------------------- idle gaps


@dataclass(frozen=True)
class IdleGap:
    """One gap below a carrier, inside a free stretch of the block.

    ``below`` is the demand id of the carrier under the gap, or ``"edge"`` / ``"exclusion"``;
    ``above`` is the carrier over it (the first of those that slide).  ``closable_hz`` is the
    largest downward slide, in whole raster steps, of ``above`` and every carrier beyond it in
    the same stretch that still passes verification; ``below_target`` lists the demands next to
    the gap whose carrier carries less than their target rate.  ``guard_hz`` is the separation
    the carriers' own configurations ask for (the larger ``guard_hz`` of two neighbours, the
    upper carrier's ``edge_guard_hz`` towards an edge or exclusion), so ``gap_hz - guard_hz``
    is spectrum the plan leaves beyond its own guards and the rest of ``closable_hz`` is guard
    the verifier does not need.
    """

    below: str
    above: str
    lower_hz: float
    gap_hz: float
    closable_hz: float
    guard_hz: float
    raster_hz: float
    below_target: tuple[str, ...]
    verify_calls: int

    @property
    def idle(self) -> bool:
        """Closable by more than one raster step (rounding slack is not counted)."""
        return self.closable_hz > self.raster_hz * (1 + 1e-9)

    @property
    def beyond_guard_hz(self) -> float:
        """The part of the closable slide that lies beyond the configurations' own guards."""
        return min(self.closable_hz, max(0.0, self.gap_hz - self.guard_hz))


def _stretches(problem: Problem) -> list[tuple[float, float, str]]:
    """Free stretches between the block edges and exclusions: (start, stop, what is below)."""
    block = problem.block
    cursor, below = block.start_hz, "edge"
    out = []
    for x in sorted(block.exclusions, key=lambda x: x.start_hz):
        if x.start_hz > cursor:
            out.append((cursor, x.start_hz, below))
        cursor, below = max(cursor, x.stop_hz), "exclusion"
    if block.stop_hz > cursor:
        out.append((cursor, block.stop_hz, below))
    return out


def _slid(carriers: Sequence[Carrier], moving: set[str], shift_hz: float) -> list[Carrier]:
    return [
        replace(c, center_hz=c.center_hz - shift_hz) if c.demand_id in moving else c
        for c in carriers
    ]


def _largest_slide(
    problem: Problem, carriers: Sequence[Carrier], moving: set[str], steps: int
) -> tuple[int, int]:
    """Largest k ≤ ``steps`` raster steps the ``moving`` carriers may slide down and still pass
    verification (binary search: a smaller slide of a passing slide is taken to pass too), and
    the verifier calls it took."""
    raster = problem.block.raster_hz

    def passes(k: int) -> bool:
        return verify_plan(problem, _slid(carriers, moving, k * raster)).passed

    if steps < 1 or not passes(1):
        return 0, 1 if steps >= 1 else 0
    good, bad, calls = 1, steps + 1, 1
    while bad - good > 1:
        mid = (good + bad) // 2
        calls += 1
        if passes(mid):
            good = mid
        else:
            bad = mid
    return good, calls


def idle_gaps(problem: Problem, plan: Plan) -> list[IdleGap]:
    """Every gap wider than one raster step below a carrier, with how much of it is idle.

    In each free stretch (between block edges and exclusions) the gap under each carrier — to
    the carrier below or to the stretch's lower end — is measured by sliding that carrier and
    every carrier above it in the same stretch down by whole raster steps; the largest slide
    that still passes :func:`solver.verify_plan` (binary search over raster steps) is what the
    gap could close.  Slides are tried one gap at a time from the plan as it is.  The gap above
    a stretch's top carrier has no carrier over it and is not measured (it is free spectrum,
    reported by the plan's summary).

    Parameters
    ----------
    problem : Problem
        The request the plan answers.
    plan : Plan
        A verified plan (its carriers must pass verification as placed).

    Returns
    -------
    list of IdleGap
        In frequency order; :attr:`IdleGap.idle` marks those closable by more than one step.
    """
    raster = problem.block.raster_hz
    targets = {d.id: d.target_rate_bps for d in problem.demands}
    carriers = sorted(plan.carriers, key=lambda c: c.center_hz)

    def short(c: Carrier) -> bool:
        return c.config.throughput_bps < targets[c.demand_id] * (1 - 1e-9)

    gaps: list[IdleGap] = []
    for start, stop, floor_name in _stretches(problem):
        inside = [c for c in carriers if start <= c.center_hz <= stop]
        lower_end, below_name, below_carrier = start, floor_name, None
        for j, c in enumerate(inside):
            gap = c.lower_edge_hz - lower_end
            if gap > raster * (1 + 1e-9):
                moving = {m.demand_id for m in inside[j:]}
                steps = math.floor(gap / raster + 1e-9)
                k, calls = _largest_slide(problem, carriers, moving, steps)
                side = [x for x in (below_carrier, c) if x is not None and short(x)]
                guard = (
                    c.config.edge_guard_hz
                    if below_carrier is None
                    else max(c.config.guard_hz, below_carrier.config.guard_hz)
                )
                gaps.append(
                    IdleGap(
                        below_name,
                        c.demand_id,
                        lower_end,
                        gap,
                        k * raster,
                        guard,
                        raster,
                        tuple(x.demand_id for x in side),
                        calls,
                    )
                )
            lower_end, below_name, below_carrier = c.upper_edge_hz, c.demand_id, c
    return gaps


# ---------------------------------------------------------------- greedy admission peer


@dataclass(frozen=True)
class GreedyPlan:
    """The greedy peer's verified carriers, who was left out, and what it cost."""

    carriers: tuple[Carrier, ...]
    unserved: tuple[str, ...]
    verify_calls: int
    time_s: float


def _walls(problem: Problem, placed: Sequence[Carrier]) -> list[tuple[float, float, float]]:
    """Everything a new carrier must keep clear of: (start, stop, guard of a carrier there or
    NaN for an edge or exclusion), sorted."""
    block = problem.block
    walls = [(-math.inf, block.start_hz, math.nan), (block.stop_hz, math.inf, math.nan)]
    walls += [(x.start_hz, x.stop_hz, math.nan) for x in block.exclusions]
    walls += [(c.lower_edge_hz, c.upper_edge_hz, c.config.guard_hz) for c in placed]
    return sorted(walls)


def _first_fit_centres(
    problem: Problem, config_width_hz: float, guard_hz: float, edge_hz: float, placed: list[Carrier]
) -> Iterable[float]:
    """Lowest raster centre in each opening, from the low end: a neighbour is kept at the larger
    of the two guards, an edge or exclusion at the new carrier's edge guard."""
    block = problem.block
    raster = block.raster_hz
    half = config_width_hz / 2
    for (_, low_stop, low_guard), (high_start, _, high_guard) in zip(
        _walls(problem, placed)[:-1], _walls(problem, placed)[1:], strict=True
    ):
        lo = low_stop + (edge_hz if math.isnan(low_guard) else max(guard_hz, low_guard))
        hi = high_start - (edge_hz if math.isnan(high_guard) else max(guard_hz, high_guard))
        centre = block.start_hz + math.ceil((lo + half - block.start_hz) / raster - 1e-9) * raster
        if centre + half <= hi + 1e-6:
            yield centre


def greedy_admission(problem: Problem, *, configurations: int = 3) -> GreedyPlan:
    """Admit demands one by one, highest priority first (ties by id), each at its narrowest
    minimum-rate configuration, first fit from the low end, kept only if verification passes.

    A demand whose narrowest configuration fails verification in every opening tries the next
    narrowest, up to ``configurations`` of them; then it is left out.  No carrier already
    placed moves or widens.
    """
    started = time.perf_counter()
    placed: list[Carrier] = []
    unserved: list[str] = []
    calls = 0
    for demand in sorted(problem.demands, key=lambda d: (-d.priority, d.id)):
        accepted = None
        for cand in min_rate_configurations(problem, demand)[:configurations]:
            cfg = cand.config
            for centre in _first_fit_centres(
                problem, cfg.allocated_bandwidth_hz, cfg.guard_hz, cfg.edge_guard_hz, placed
            ):
                carrier = Carrier(cfg, centre, 0.0, 0.0)
                calls += 1
                if verify_plan(problem, [*placed, carrier]).passed:
                    accepted = carrier
                    break
            if accepted is not None:
                break
        if accepted is None:
            unserved.append(demand.id)
        else:
            placed.append(accepted)
    final = verify_plan(problem, placed)
    if not final.passed:  # every step verified, so this cannot happen; say so if it does
        raise RuntimeError(f"greedy plan fails verification: {final.violations[0].detail}")
    return GreedyPlan(final.carriers, tuple(unserved), calls, time.perf_counter() - started)


# ---------------------------------------------------------------- what admission is worth


def served_weight(problem: Problem, served: Iterable[str]) -> float:
    """Σ priority × minimum rate over the served demands (bit/s)."""
    ids = set(served)
    return sum(d.priority * d.min_rate_bps for d in problem.demands if d.id in ids)


def served_by_priority(problem: Problem, served: Iterable[str]) -> str:
    """Served/total per priority, highest first: ``"8:3/4 5:1/1 1:0/2"``."""
    ids = set(served)
    cells = []
    for p in sorted({d.priority for d in problem.demands}, reverse=True):
        group = [d for d in problem.demands if d.priority == p]
        cells.append(f"{p}:{sum(d.id in ids for d in group)}/{len(group)}")
    return " ".join(cells)
