"""Greedy admission through the verifier itself: the floor every plan must reach.

Demands in priority order (ties by id), each at the narrowest of its minimum-rate
configurations (every MODCOD and roll-off that closes its link, not only the families the
packing keeps; :func:`~solver.candidates.narrowest_at_min_rate`), at the lowest raster
centre found in the first opening where verification passes with everything placed so far.
Nothing placed moves or widens.  The planner compares its own plan with this one and keeps
the one that serves more (priority first), so no plan it returns serves less than greedy
admission through the same physics and verifier, when the greedy pass finishes within its
share of the time (each placement is verified, which on two cores takes tens of seconds
for a few hundred carriers).
"""

from __future__ import annotations

import itertools
import math
import threading
import time
from collections.abc import Callable, Iterator, Sequence

from solver.candidates import narrowest_at_min_rate
from solver.model import Carrier, CarrierConfig, Demand, Problem
from solver.verify import verify_plan

__all__ = ["CONFIGURATIONS_TRIED", "greedy_admission"]

CONFIGURATIONS_TRIED = 3
"""Narrowest minimum-rate configurations a demand tries before it is left out."""

REACH_SYMBOLS = 17.0
"""Symbol rates beyond which no spectrum profile reaches (the profiles span ±16 Rs): carriers
farther apart than this from a new one cannot change its verification, nor it theirs."""


def _openings(
    problem: Problem, placed: Sequence[Carrier], cfg: CarrierConfig, *, guards: bool = True
) -> Iterator[tuple[int, int]]:
    """Each opening's range of raster centres (in raster steps from the block start), low end
    first: a neighbour kept at the larger of the two guards (edge to edge without
    ``guards``), an edge or exclusion at the carrier's own edge guard."""
    block = problem.block
    walls = [(-math.inf, block.start_hz, math.nan), (block.stop_hz, math.inf, math.nan)]
    walls += [(x.start_hz, x.stop_hz, math.nan) for x in block.exclusions]
    walls += [(c.lower_edge_hz, c.upper_edge_hz, c.config.guard_hz) for c in placed]
    walls.sort()
    half = cfg.allocated_bandwidth_hz / 2
    edge, guard = cfg.edge_guard_hz, cfg.guard_hz
    for (_, low_stop, low_guard), (high_start, _, high_guard) in itertools.pairwise(walls):
        lo = low_stop + (edge if math.isnan(low_guard) else max(guard, low_guard) * guards)
        hi = high_start - (edge if math.isnan(high_guard) else max(guard, high_guard) * guards)
        raster = block.raster_hz
        first = math.ceil((lo + half - block.start_hz) / raster - 1e-9)
        last = math.floor((hi - half - block.start_hz) / raster + 1e-9)
        if last >= first:
            yield first, last


def _lowest_passing(first: int, last: int, passes: Callable[[int], bool]) -> int | None:
    """The lowest raster step of ``first``..``last`` found to pass: the lowest, then 1, 2, 4,
    … steps above it and the highest (a sensitive neighbour may need more room than its
    guard); below the first that passes, the steps skipped are bisected."""
    shifts = [0, *(2**k for k in range(max(last - first, 1).bit_length()))]
    steps = sorted({min(first + s, last) for s in shifts} | {last})
    failed = first - 1
    for step in steps:
        if passes(step):
            good = step
            while good - failed > 1:  # bisect the steps skipped between the last failure
                mid = (failed + good) // 2
                if passes(mid):
                    good = mid
                else:
                    failed = mid
            return good
        failed = step
    return None


def _passes(problem: Problem, placed: Sequence[Carrier], new: Carrier) -> bool:
    """Verification of ``new`` with the placed carriers near enough to interact with it (the
    rest cannot change the outcome)."""
    rs = new.config.symbol_rate_baud
    near = [
        c
        for c in placed
        if abs(c.center_hz - new.center_hz) <= REACH_SYMBOLS * (rs + c.config.symbol_rate_baud)
    ]
    return verify_plan(problem, [*near, new]).passed


def greedy_admission(
    problem: Problem,
    fixed: Sequence[Carrier],
    demands: Sequence[Demand],
    deadline: float = math.inf,
    cancel: threading.Event | None = None,
) -> tuple[Carrier, ...]:
    """``demands`` placed greedily beside the ``fixed`` carriers (see the module), until
    ``deadline`` (``time.perf_counter()``) or ``cancel``; the carriers placed, not including
    ``fixed``."""

    def over() -> bool:
        return time.perf_counter() > deadline or (cancel is not None and cancel.is_set())

    placed = list(fixed)
    mine: list[Carrier] = []
    waiting = _admit(
        problem, placed, mine, sorted(demands, key=lambda d: (-d.priority, d.id)), over
    )
    if waiting and mine and not over():
        _compact(problem, placed, mine, over)
        _admit(problem, placed, mine, waiting, over)
    return tuple(mine)


def _admit(
    problem: Problem,
    placed: list[Carrier],
    mine: list[Carrier],
    demands: Sequence[Demand],
    over: Callable[[], bool],
) -> list[Demand]:
    """Place each of ``demands`` in turn (adding it to ``placed`` and ``mine``); returns those
    left out or not reached before ``over()``."""
    waiting = []
    for demand in demands:
        carrier = None
        if not over():
            carrier = next(
                (
                    c
                    for cand in narrowest_at_min_rate(problem, demand, CONFIGURATIONS_TRIED)
                    if (c := _placed(problem, placed, cand.config)) is not None
                ),
                None,
            )
        if carrier is None:
            waiting.append(demand)
        else:
            placed.append(carrier)
            mine.append(carrier)
    return waiting


def _compact(
    problem: Problem, placed: list[Carrier], mine: list[Carrier], over: Callable[[], bool]
) -> None:
    """Slide each of ``mine``, lowest first, down to the lowest centre of its opening where
    verification still passes (a carrier placed early may have kept room that later ones
    left unused), so that what is left lies together at the top of each opening."""
    for carrier in sorted(mine, key=lambda c: c.center_hz):
        if over():
            return
        moved = _slid_down(problem, [c for c in placed if c is not carrier], carrier)
        placed[placed.index(carrier)] = moved
        mine[mine.index(carrier)] = moved


def _slid_down(problem: Problem, others: Sequence[Carrier], carrier: Carrier) -> Carrier:
    """``carrier`` at the lowest raster centre below its own, down to its lower neighbour's
    edge, where verification passes with ``others`` (the guards the configurations ask for
    are often more than verification needs)."""
    start, raster = problem.block.start_hz, problem.block.raster_hz
    now = round((carrier.center_hz - start) / raster)

    def at(step: int) -> Carrier:
        return Carrier(carrier.config, start + step * raster, 0.0, 0.0)

    for first, last in _openings(problem, others, carrier.config, guards=False):
        if first <= now <= last:
            step = _lowest_passing(first, now, lambda k: _passes(problem, others, at(k)))
            return at(step) if step is not None and step < now else carrier
    return carrier


def _placed(problem: Problem, placed: Sequence[Carrier], cfg: CarrierConfig) -> Carrier | None:
    """``cfg`` at the lowest passing centre of the first opening that has one, or None."""
    start, raster = problem.block.start_hz, problem.block.raster_hz

    def at(step: int) -> Carrier:
        return Carrier(cfg, start + step * raster, 0.0, 0.0)

    for first, last in _openings(problem, placed, cfg):
        step = _lowest_passing(first, last, lambda k: _passes(problem, placed, at(k)))
        if step is not None:
            return at(step)
    return None
