"""What the packing model takes and gives: free segments, the input, the result, and the
named keys of its items.

Every index here is a position in the input: a demand in :attr:`PackingInput.options`, a
family in that demand's ``candidates``, a segment in :attr:`PackingInput.segments` and a
protection level in :attr:`PackingInput.levels`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from enum import StrEnum
from typing import NamedTuple

from solver.model import Demand, Objective, SolveStatus
from solver.packing.families import Candidate, DemandOptions, Family
from solver.packing.spacing import Wall

__all__ = [
    "Boundary",
    "DemandFamily",
    "Hint",
    "Key",
    "PackingInput",
    "PackingResult",
    "Pick",
    "Seat",
    "Segment",
    "SegmentLevel",
    "admission_weights",
]


class Boundary(StrEnum):
    """What lies beyond one end of a free segment."""

    EDGE = "edge"  # the block edge or an exclusion: the edge leakage limit applies
    CARRIER = "carrier"  # a pinned carrier: the gap is the larger of the two guards


class DemandFamily(NamedTuple):
    """One family of one demand (indices), whatever its segment and level."""

    demand: int
    family: int


class SegmentLevel(NamedTuple):
    """A segment at one protection level (indices)."""

    segment: int
    level: int


class Seat(NamedTuple):
    """Where a demand sits: its segment and protection level (indices), whatever its family."""

    demand: int
    segment: int
    level: int


class Key(NamedTuple):
    """One item of the model: a demand's family in a segment at a protection level (indices)."""

    demand: int
    family: int
    segment: int
    level: int

    @property
    def demand_family(self) -> DemandFamily:
        return DemandFamily(self.demand, self.family)

    @property
    def segment_level(self) -> SegmentLevel:
        return SegmentLevel(self.segment, self.level)

    @property
    def seat(self) -> Seat:
        return Seat(self.demand, self.segment, self.level)


class Pick(NamedTuple):
    """One carrier the model chose in a segment: its demand, family and half-width (raster
    units)."""

    demand: int
    family: int
    half: int


class Hint(NamedTuple):
    """A known setting of one demand: its family, half-width (raster units) and segment."""

    family: int
    half: int
    segment: int


@dataclass(frozen=True)
class Segment:
    """A free stretch of the block, in raster units from the block start."""

    start: int
    stop: int
    left: Boundary = Boundary.EDGE
    right: Boundary = Boundary.EDGE
    left_guard: int = 0
    right_guard: int = 0
    left_wall: Wall = field(default_factory=Wall)
    """The fixed carrier beyond the left end (its family and half-width), if any."""
    right_wall: Wall = field(default_factory=Wall)

    @property
    def length(self) -> int:
        return self.stop - self.start

    def left_need(self, cand: Candidate) -> int:
        """Guard ``cand`` needs towards the left boundary (raster units)."""
        if self.left is Boundary.EDGE:
            return cand.edge_units
        return max(cand.guard_units, self.left_guard)

    def right_need(self, cand: Candidate) -> int:
        """Guard ``cand`` needs towards the right boundary (raster units)."""
        if self.right is Boundary.EDGE:
            return cand.edge_units
        return max(cand.guard_units, self.right_guard)

    def fits_alone(self, cand: Candidate) -> bool:
        return self.left_need(cand) + cand.width_units + self.right_need(cand) <= self.length


@dataclass(frozen=True)
class PackingInput:
    """Everything the model needs, already on the raster grid."""

    options: Sequence[DemandOptions]
    segments: Sequence[Segment]
    objective: Objective
    admission_weights: Sequence[int]
    priorities: Sequence[int]
    time_limit_s: float
    num_workers: int
    seed: int
    forbidden: frozenset[tuple[str, int]] = frozenset()
    """(demand id, family index) pairs the model may not choose."""
    hints: dict[str, tuple[int, int, int]] = field(default_factory=dict)
    """Per demand id: a known solution's setting, read as a :class:`Hint` (family index,
    half-width, segment index)."""
    levels: tuple[float, ...] = ()
    """Protection levels (dB) a segment may take; empty: every family at its own sensitivity."""

    def allowed_levels(self, fam: Family) -> list[int]:
        """Indices of the levels at which ``fam`` may sit (all of them when levels are off)."""
        if not self.levels:
            return [0]
        return [i for i, level in enumerate(self.levels) if level >= fam.sensitivity_db - 1e-9]

    def level(self, index: int) -> float | None:
        return self.levels[index] if self.levels else None

    def family_of(self, key: Key | DemandFamily) -> Family:
        """The family of an item (or of a demand's family index)."""
        return self.options[key.demand].candidates[key.family]

    def hint(self, demand: int) -> Hint | None:
        """The known setting of demand ``demand``, if any."""
        wanted = self.hints.get(self.options[demand].demand.id)
        return None if wanted is None else Hint(*wanted)


@dataclass(frozen=True)
class PackingResult:
    """The solver's choice: per segment, the carriers it holds, and the segment's level."""

    status: SolveStatus
    chosen: dict[int, list[Pick]]
    segment_levels: dict[int, int]
    objective_value: float
    best_bound: float
    optimality_gap: float
    solve_time_s: float
    solver_version: str


def admission_weights(demands: Sequence[Demand]) -> list[int]:
    """Weights that make serving one demand worth more than every lower-priority demand together."""
    levels = sorted({d.priority for d in demands})
    weight_of: dict[int, int] = {}
    below = 0
    for level in levels:
        weight_of[level] = below + 1
        below += weight_of[level] * sum(1 for d in demands if d.priority == level)
    return [weight_of[d.priority] for d in demands]
