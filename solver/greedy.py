"""Greedy admission through the verifier itself: the floor every plan must reach.

Demands in priority order (ties by id), each at the narrowest of its minimum-rate
configurations (every MODCOD and roll-off that closes its link, not only the families the
packing keeps; :func:`~solver.candidates.narrowest_at_min_rate`), at the lowest raster
centre of the first opening where verification passes with everything placed so far.
Nothing placed moves or widens.  The planner compares its own plan with this one and keeps
the one that serves more (priority first), so no plan it returns serves less than greedy
admission through the same physics and verifier, when the greedy pass finishes within its
share of the time (each placement is verified, which on two cores takes tens of seconds
for a few hundred carriers).
"""

from __future__ import annotations

import itertools
import math
import time
from collections.abc import Iterator, Sequence

from solver.candidates import narrowest_at_min_rate
from solver.model import Carrier, Demand, Problem
from solver.packing.families import Candidate
from solver.verify import verify_plan

__all__ = ["CONFIGURATIONS_TRIED", "greedy_admission"]

CONFIGURATIONS_TRIED = 3
"""Narrowest minimum-rate configurations a demand tries before it is left out."""

REACH_SYMBOLS = 17.0
"""Symbol rates beyond which no spectrum profile reaches (the profiles span ±16 Rs): carriers
farther apart than this from a new one cannot change its verification, nor it theirs."""


def _openings(problem: Problem, placed: Sequence[Carrier], cand: Candidate) -> Iterator[float]:
    """Raster centres to try in each opening, low end first: a neighbour kept at the larger
    of the two guards, an edge or exclusion at the carrier's own edge guard.  In each opening
    the lowest centre comes first, then centres 1, 2, 4, … raster steps above it and the
    highest one (a sensitive neighbour may need more room than its guard)."""
    block = problem.block
    walls = [(-math.inf, block.start_hz, math.nan), (block.stop_hz, math.inf, math.nan)]
    walls += [(x.start_hz, x.stop_hz, math.nan) for x in block.exclusions]
    walls += [(c.lower_edge_hz, c.upper_edge_hz, c.config.guard_hz) for c in placed]
    walls.sort()
    cfg = cand.config
    half = cfg.allocated_bandwidth_hz / 2
    edge, guard = cfg.edge_guard_hz, cfg.guard_hz
    for (_, low_stop, low_guard), (high_start, _, high_guard) in itertools.pairwise(walls):
        lo = low_stop + (edge if math.isnan(low_guard) else max(guard, low_guard))
        hi = high_start - (edge if math.isnan(high_guard) else max(guard, high_guard))
        raster = block.raster_hz
        first = math.ceil((lo + half - block.start_hz) / raster - 1e-9)
        last = math.floor((hi - half - block.start_hz) / raster + 1e-9)
        if last < first:
            continue
        shifts = [0, *(2**k for k in range(max(last - first, 1).bit_length()))]
        for step in sorted({min(first + s, last) for s in shifts} | {last}):
            yield block.start_hz + step * raster


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
) -> tuple[Carrier, ...]:
    """``demands`` placed greedily beside the ``fixed`` carriers (see the module), until
    ``deadline`` (``time.perf_counter()``); the carriers placed, not including ``fixed``."""
    placed = list(fixed)
    mine: list[Carrier] = []
    for demand in sorted(demands, key=lambda d: (-d.priority, d.id)):
        if time.perf_counter() > deadline:
            break
        for cand in narrowest_at_min_rate(problem, demand, CONFIGURATIONS_TRIED):
            carrier = next(
                (
                    Carrier(cand.config, centre, 0.0, 0.0)
                    for centre in _openings(problem, placed, cand)
                    if _passes(problem, placed, Carrier(cand.config, centre, 0.0, 0.0))
                ),
                None,
            )
            if carrier is not None:
                placed.append(carrier)
                mine.append(carrier)
                break
    return tuple(mine)
