"""Segment geometry, one home: raster offsets, the free stretches a packing fills (between
block edges, exclusions and carriers that do not move), and the free spectrum a plan leaves."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from solver.model import Carrier, Problem
from solver.packing import Boundary, Segment
from solver.packing.families import Candidate, Family
from solver.packing.spacing import Wall

__all__ = ["FixedCarrier", "free_segments", "free_segments_hz", "raster_units"]


def raster_units(problem: Problem, freq_hz: float, *, up: bool) -> int:
    """Offset from the block start in raster units, rounded outwards."""
    value = (freq_hz - problem.block.start_hz) / problem.block.raster_hz
    return math.ceil(value - 1e-9) if up else math.floor(value + 1e-9)


@dataclass(frozen=True)
class FixedCarrier:
    """A carrier that does not move (pinned, or kept in place by a replan) and its family."""

    carrier: Carrier
    candidate: Candidate
    family: Family


def free_segments(problem: Problem, fixed: Sequence[FixedCarrier]) -> list[Segment]:
    """Free stretches (raster units) between the block edges, exclusions and fixed carriers."""
    total = raster_units(problem, problem.block.stop_hz, up=False)
    walls: list[tuple[int, int, Boundary, int, Wall]] = [
        (
            raster_units(problem, x.start_hz, up=False),
            raster_units(problem, x.stop_hz, up=True),
            Boundary.EDGE,
            0,
            Wall(),
        )
        for x in problem.block.exclusions
    ]
    for f in fixed:
        lo = raster_units(problem, f.carrier.lower_edge_hz, up=False)
        hi = max(raster_units(problem, f.carrier.upper_edge_hz, up=True), lo + 1)
        wall = Wall(f.family, f.family.hi_half)
        walls.append((lo, hi, Boundary.CARRIER, f.candidate.guard_units, wall))
    walls.sort(key=lambda w: (w[0], w[1]))
    segments: list[Segment] = []
    cursor, left, left_guard, left_wall = 0, Boundary.EDGE, 0, Wall()
    for start, stop, kind, guard, wall in [*walls, (total, total, Boundary.EDGE, 0, Wall())]:
        if start > cursor:
            segments.append(Segment(cursor, start, left, kind, left_guard, guard, left_wall, wall))
        if stop >= cursor:
            cursor, left, left_guard, left_wall = stop, kind, guard, wall
    return segments


def free_segments_hz(problem: Problem, carriers: Sequence[Carrier]) -> list[float]:
    """Widths of the free stretches left between exclusions, carriers and their guards."""
    block = problem.block
    taken = [(x.start_hz, x.stop_hz) for x in block.exclusions]
    taken += [
        (c.lower_edge_hz - c.guard_below_hz, c.upper_edge_hz + c.guard_above_hz) for c in carriers
    ]
    taken.sort()
    free, cursor = [], block.start_hz
    for start, stop in taken:
        if start > cursor:
            free.append(start - cursor)
        cursor = max(cursor, stop)
    if block.stop_hz > cursor:
        free.append(block.stop_hz - cursor)
    return free
