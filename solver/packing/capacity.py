"""The capacity rule of one segment in plain numbers: each item's scaled coefficients, the room
a choice leaves, fitting a choice to a segment, and positions by sorting.

With ``w`` the width, ``g`` the guard, ``hL``/``hR`` the guard a carrier needs towards the
segment's left/right boundary and ``δ = max(hL - g, 0)``, the width a set of carriers needs in
one segment is at most ``Σ (w + g) + max δ + max hR`` (see :mod:`solver.packing`).  The CP-SAT
model, the LP relaxation and the rounding all read that row through
:func:`item_coefficients`, so a choice that fits here fits the model.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from solver.packing.families import Candidate, Family
from solver.packing.items import Boundary, Key, PackingInput, Seat, Segment

__all__ = [
    "SCALE",
    "ItemCoefficients",
    "fit_segment",
    "grown_start",
    "item_coefficients",
    "key_coefficients",
    "place_segment",
    "segment_room",
    "value_per_unit",
]

SCALE = 1000
"""Capacity rows are scaled by this so that guard-per-width coefficients stay integers."""


@dataclass(frozen=True)
class ItemCoefficients:
    """Scaled, linear upper bounds of one item's needs: ``a·h + b·x`` each.

    ``body`` is width plus guard, ``delta`` the extra guard towards the left boundary and
    ``right`` the guard towards the right boundary.  Single points are exact; a family's
    rounded-up guards cost at most one unit more.
    """

    body_h: int
    body_x: int
    delta_h: int
    delta_x: int
    right_h: int
    right_x: int

    def delta(self, half: int) -> int:
        """Scaled extra guard towards the left boundary of the member ``half`` wide."""
        return self.delta_h * half + self.delta_x

    def right(self, half: int) -> int:
        """Scaled guard towards the right boundary of the member ``half`` wide."""
        return self.right_h * half + self.right_x

    @property
    def growth(self) -> int:
        """Most the segment's need can grow per extra half-width unit of this item."""
        return self.body_h + self.delta_h + self.right_h


def _up(value: float) -> int:
    return math.ceil(value * SCALE - 1e-6)


def item_coefficients(seg: Segment, fam: Family, level_db: float | None = None) -> ItemCoefficients:
    """Capacity-row coefficients of family ``fam`` in segment ``seg`` at a protection level."""
    if fam.lo_half == fam.hi_half:
        c = fam.at(fam.hi_half, level_db)
        delta = max(seg.left_need(c) - c.guard_units, 0) * SCALE
        return ItemCoefficients(
            0, (c.width_units + c.guard_units) * SCALE, 0, delta, 0, seg.right_need(c) * SCALE
        )
    # Every need grows linearly with the half-width (guards scale with the symbol rate); the
    # rounding up of a guard to the raster costs at most one unit, carried by the constant.
    g, e = fam.guard_per_half(level_db), fam.edge_per_half
    if seg.left is Boundary.EDGE:
        delta_h, delta_x = _up(max(e - g, 0.0)), SCALE
    else:  # max(g, left_guard) - g never exceeds the pinned neighbour's guard
        delta_h, delta_x = 0, seg.left_guard * SCALE
    if seg.right is Boundary.EDGE:
        right_h, right_x = _up(e), SCALE
    else:  # max(g, right_guard) <= g + right_guard
        right_h, right_x = _up(g), SCALE + seg.right_guard * SCALE
    return ItemCoefficients(2 * SCALE + _up(g), SCALE, delta_h, delta_x, right_h, right_x)


def key_coefficients(data: PackingInput, key: Key) -> ItemCoefficients:
    """Capacity-row coefficients of item ``key`` in its own segment at its own level."""
    return item_coefficients(data.segments[key.segment], data.family_of(key), data.level(key.level))


def segment_room(data: PackingInput, seg: Segment, choice: Mapping[Key, int]) -> int:
    """Scaled width ``seg`` has left with the items of ``choice`` at their half-widths, by the
    model's own capacity row (negative when overfull)."""
    if not choice:
        return seg.length * SCALE
    coefs = {
        key: item_coefficients(seg, data.family_of(key), data.level(key.level)) for key in choice
    }
    used = sum(c.body_h * choice[k] + c.body_x for k, c in coefs.items())
    used += max(c.delta(choice[k]) for k, c in coefs.items())
    used += max(c.right(choice[k]) for k, c in coefs.items())
    return seg.length * SCALE - used


def value_per_unit(data: PackingInput, key: Key, coef: ItemCoefficients) -> float:
    """Priority-weighted throughput (capped at the target) per scaled unit of body width."""
    fam = data.family_of(key)
    demand = data.options[key.demand].demand
    per_half = min(fam.throughput_per_half_bps, demand.target_rate_bps / fam.hi_half)
    return data.priorities[key.demand] * per_half / max(coef.body_h, 1)


def fit_segment(
    data: PackingInput, seg: Segment, choice: Mapping[Key, int], *, widen: bool = True
) -> dict[Key, int]:
    """``choice`` made to fit ``seg`` exactly as far as half-widths allow: narrowed, least
    valuable spectrum first, while overfull; then (when ``widen``) widened, most valuable
    first, into the room left.  Items never leave their family's range, so an overfull choice
    may stay overfull."""
    fitted = dict(choice)
    coefs = {
        key: item_coefficients(seg, data.family_of(key), data.level(key.level)) for key in fitted
    }

    def value(key: Key) -> float:
        return value_per_unit(data, key, coefs[key])

    spare = segment_room(data, seg, fitted)
    for key in sorted(fitted, key=value):
        step = coefs[key].body_h  # narrowing frees at least this much per unit
        if spare >= 0:
            break
        if step > 0:
            cut = min(fitted[key] - data.family_of(key).lo_half, -(spare // step))
            fitted[key] -= cut
            spare = segment_room(data, seg, fitted)
    for key in sorted(fitted, key=value, reverse=True):
        step = coefs[key].growth  # widening costs at most this much per unit
        if spare <= 0 or not widen:
            break
        if step > 0:
            fitted[key] += min(data.family_of(key).hi_half - fitted[key], spare // step)
            spare = segment_room(data, seg, fitted)
    return fitted


def grown_start(
    data: PackingInput, keys: Sequence[Key], stage_one: Mapping[Key, int]
) -> dict[Key, int]:
    """A strong start for stage 2 from the stage-1 choice: the same demands in the same
    segments at the same level, each switched to its family with the most throughput per unit
    of spectrum (where the narrowest members still fit), then widened greedily, best value
    first, until the segment is full.  ``keys`` are the model's items."""
    options: dict[Seat, list[Key]] = {}
    for key in keys:
        options.setdefault(key.seat, []).append(key)
    chosen: dict[Key, int] = {}
    for s, seg in enumerate(data.segments):
        held = [key for key in stage_one if key.segment == s]
        if held:
            chosen.update(_fill_segment(data, seg, held, options))
    return chosen


def _fill_segment(
    data: PackingInput, seg: Segment, held: list[Key], options: Mapping[Seat, list[Key]]
) -> dict[Key, int]:
    """Switch each item of ``held`` to its seat's most valuable family where that still fits
    at the narrowest members, then fit the segment."""

    def value(key: Key) -> float:
        coef = item_coefficients(seg, data.family_of(key), data.level(key.level))
        return value_per_unit(data, key, coef)

    choice = {key: data.family_of(key).lo_half for key in held}
    for key in sorted(held, key=value):
        best = max(options[key.seat], key=value)
        trial = {k: h for k, h in choice.items() if k != key} | {best: data.family_of(best).lo_half}
        if best != key and segment_room(data, seg, trial) >= 0:
            choice = trial
    return fit_segment(data, seg, choice)


def place_segment(seg: Segment, items: Sequence[Candidate], *, pack_low: bool) -> list[int]:
    """Lower-edge positions (raster units) for the candidates of one segment.

    Carriers go in ascending guard need (ties keep the given order), so every gap is the larger
    of the two neighbours' guards.  Slack is left at the high end when ``pack_low``, otherwise
    spread evenly over all gaps, which only lowers leakage and interference.

    Returns
    -------
    list of int
        Lower edges in the order of ``items``.
    """
    order = sorted(range(len(items)), key=lambda i: items[i].guard_units)
    gaps = [seg.left_need(items[order[0]])] if order else []
    for prev, cur in itertools.pairwise(order):
        gaps.append(max(items[prev].guard_units, items[cur].guard_units))
    need = sum(gaps) + sum(items[i].width_units for i in order)
    need += seg.right_need(items[order[-1]]) if order else 0
    slack = seg.length - need
    if slack < 0:
        raise ValueError(f"segment {seg} overfilled by {-slack} raster units")
    extra = [0] * len(gaps)
    if not pack_low and gaps:
        share, rest = divmod(slack, len(gaps) + 1)
        extra = [share + (1 if i < rest else 0) for i in range(len(gaps))]
    positions = [0] * len(items)
    cursor = seg.start
    for slot, i in enumerate(order):
        cursor += gaps[slot] + extra[slot]
        positions[i] = cursor
        cursor += items[i].width_units
    return positions
