"""The room side of :mod:`solver.explain`: what a carrier faces on each side, the footprint of a
configuration there, and the least extra spectrum with which it passes verification."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import NamedTuple

from solver.model import Carrier, CarrierConfig, Exclusion, Problem
from solver.verify import Violation, verify_plan

__all__ = [
    "REFINE_STEPS",
    "VERIFY_TRIES",
    "Side",
    "Target",
    "Widening",
    "extra_passing",
    "own_footprint",
    "placed",
    "room_width",
    "sides_of",
]

VERIFY_TRIES = 9
"""Placements verified while looking for the extra spectrum that passes."""


@dataclass(frozen=True)
class Side:
    """What one side of a carrier faces: the facing edge (Hz), and the carrier there (None for
    a block edge or an exclusion)."""

    wall_hz: float
    neighbour: Carrier | None
    name: str


_TOLERANCE_HZ = 1e-6


def _exclusion_name(x: Exclusion) -> str:
    return f"the exclusion ({x.note})" if x.note else "the exclusion"


def sides_of(problem: Problem, ordered: Sequence[Carrier], i: int) -> tuple[Side, Side]:
    """The sides below and above carrier ``i`` of ``ordered`` (sorted by centre)."""
    c, block = ordered[i], problem.block
    below = [Side(block.start_hz, None, "the lower block edge")]
    below += [
        Side(x.stop_hz, None, _exclusion_name(x))
        for x in block.exclusions
        if x.stop_hz <= c.lower_edge_hz + _TOLERANCE_HZ
    ]
    above = [Side(block.stop_hz, None, "the upper block edge")]
    above += [
        Side(x.start_hz, None, _exclusion_name(x))
        for x in block.exclusions
        if x.start_hz >= c.upper_edge_hz - _TOLERANCE_HZ
    ]
    if i > 0:
        below.append(Side(ordered[i - 1].upper_edge_hz, ordered[i - 1], ordered[i - 1].demand_id))
    if i + 1 < len(ordered):
        above.append(Side(ordered[i + 1].lower_edge_hz, ordered[i + 1], ordered[i + 1].demand_id))
    return max(below, key=lambda s: s.wall_hz), min(above, key=lambda s: s.wall_hz)


@dataclass(frozen=True)
class Target:
    """A configuration that carries the target, with the guard its own leakage limit asks
    towards a carrier (Hz, no sensitivity allowance)."""

    config: CarrierConfig
    leakage_guard_hz: float


def _own_guard(target: Target, side: Side) -> float:
    """The least gap its own limits ask on ``side``: its leakage guard towards a carrier, its
    edge guard towards a block edge or exclusion."""
    return target.config.edge_guard_hz if side.neighbour is None else target.leakage_guard_hz


def _rule_guard(config: CarrierConfig, side: Side) -> float:
    """The planner's spacing on ``side``: the larger of the two guards, or the edge guard."""
    if side.neighbour is None:
        return config.edge_guard_hz
    return max(config.guard_hz, side.neighbour.config.guard_hz)


def own_footprint(target: Target, sides: tuple[Side, Side]) -> float:
    """Allocated width plus its own guard on each side (Hz)."""
    low, high = sides
    return _own_guard(target, low) + target.config.allocated_bandwidth_hz + _own_guard(target, high)


def room_width(sides: tuple[Side, Side]) -> float:
    return sides[1].wall_hz - sides[0].wall_hz


def _lower_gap(target: Target, sides: tuple[Side, Side], room_hz: float) -> float:
    """Where ``target`` sits in a room of ``room_hz``: each side gets its own guard, and the
    rest is shared in proportion to how much more the planner's spacing asks there (evenly
    when it asks no more on either side)."""
    own = [_own_guard(target, s) for s in sides]
    more = [max(_rule_guard(target.config, s) - g, 0.0) for s, g in zip(sides, own, strict=True)]
    rest = max(room_hz - target.config.allocated_bandwidth_hz - sum(own), 0.0)
    share = 0.5 if sum(more) <= 0 else more[0] / sum(more)
    return own[0] + rest * share


def placed(
    problem: Problem, ordered: Sequence[Carrier], i: int, target: Target, extra_hz: float
) -> tuple[Problem, list[Carrier]]:
    """The plan with ``extra_hz`` of spectrum inserted directly above carrier ``i`` (every
    carrier, exclusion and the block's upper edge above it moved up) and carrier ``i`` in the
    target's configuration, placed in its enlarged room by :func:`_lower_gap`."""
    sides = sides_of(problem, ordered, i)
    cut = ordered[i].upper_edge_hz - _TOLERANCE_HZ
    block = problem.block
    exclusions = tuple(
        replace(x, start_hz=x.start_hz + extra_hz, stop_hz=x.stop_hz + extra_hz)
        if x.start_hz >= cut
        else x
        for x in block.exclusions
    )
    wider = replace(block, stop_hz=block.stop_hz + extra_hz, exclusions=exclusions)
    config = target.config
    lower_edge = sides[0].wall_hz + _lower_gap(target, sides, room_width(sides) + extra_hz)
    carriers = [
        replace(c, center_hz=c.center_hz + extra_hz) if j > i else c for j, c in enumerate(ordered)
    ]
    carriers[i] = Carrier(config, lower_edge + config.allocated_bandwidth_hz / 2, 0.0, 0.0)
    return replace(problem, block=wider), carriers


REFINE_STEPS = 4
"""Halvings between the last extra that failed verification and the first that passed."""


class Widening(NamedTuple):
    extra_hz: float | None
    carrier: Carrier | None
    first_violation: Violation | None


def extra_passing(
    problem: Problem, ordered: Sequence[Carrier], i: int, target: Target, start_hz: float
) -> Widening:
    """The least extra spectrum found with which the plan holding ``target`` passes
    verification, from ``start_hz`` up by doubling steps then halving back, the carrier placed
    there, and the first violation seen (None: it passed at once)."""

    def passes(extra_hz: float) -> Violation | None:
        check = verify_plan(*placed(problem, ordered, i, target, extra_hz))
        return None if check.passed else check.violations[0]

    def found(extra_hz: float, first: Violation | None) -> Widening:
        return Widening(extra_hz, placed(problem, ordered, i, target, extra_hz)[1][i], first)

    step = max(2.0 * problem.block.raster_hz, 0.01 * target.config.allocated_bandwidth_hz)
    base = max(start_hz, 0.0)
    first = passes(base)
    if first is None:
        return found(base, None)
    low = base
    for k in range(VERIFY_TRIES):
        high = base + step * 2**k
        if passes(high) is None:
            break
        low = high
    else:
        return Widening(None, None, first)
    for _ in range(REFINE_STEPS):
        middle = (low + high) / 2
        if passes(middle) is None:
            high = middle
        else:
            low = middle
    return found(high, first)
