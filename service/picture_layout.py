"""Where the spectrum picture puts things along its frequency axis: labels that must not overlap
and carrier bars that must stay visible however narrow the carrier.  Pure arithmetic on
positions and widths in one unit (the axis' data units); no drawing.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Sequence
from dataclasses import dataclass

__all__ = ["Footprint", "Placed", "footprints", "spread", "spread_or_rows", "tiers"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class Placed:
    """One label: where its anchor is, where the text goes, and in which row (0: nearest)."""

    anchor: float
    position: float
    tier: int


def tiers(
    anchors: Sequence[float],
    widths: Sequence[float],
    lo: float,
    hi: float,
    gap: float,
    max_tiers: int,
) -> list[Placed] | None:
    """Greedy stacking of labels over their anchors (ascending); ``None`` if more than
    ``max_tiers`` rows would be needed."""
    right_edges: list[float] = []
    labels: list[Placed] = []
    for anchor, width in zip(anchors, widths, strict=True):
        position = min(max(anchor, lo + width / 2), hi - width / 2)
        free = [t for t, edge in enumerate(right_edges) if position - width / 2 >= edge + gap]
        if free:
            tier = free[0]
        elif len(right_edges) < max_tiers:
            tier = len(right_edges)
            right_edges.append(-math.inf)
        else:
            return None
        right_edges[tier] = position + width / 2
        labels.append(Placed(anchor, position, tier))
    return labels


def spread(
    centres: Sequence[float], widths: Sequence[float], lo: float, hi: float, gap: float
) -> list[float] | None:
    """Positions near ``centres`` (ascending) so that intervals of ``widths`` do not overlap.

    A forward pass pushes intervals right, a backward pass pulls them back inside ``hi``;
    returns ``None`` when they cannot fit between ``lo`` and ``hi``.
    """
    positions: list[float] = []
    for index, (centre, width) in enumerate(zip(centres, widths, strict=True)):
        least = lo + width / 2
        if index:
            least = max(least, positions[-1] + (widths[index - 1] + width) / 2 + gap)
        positions.append(max(centre, least))
    for index in range(len(positions) - 1, -1, -1):
        most = hi - widths[index] / 2
        if index < len(positions) - 1:
            most = min(most, positions[index + 1] - (widths[index + 1] + widths[index]) / 2 - gap)
        positions[index] = min(positions[index], most)
    if positions and positions[0] - widths[0] / 2 < lo - gap / 2:
        return None
    return positions


def spread_or_rows(
    anchors: Sequence[float],
    widths: Sequence[float],
    lo: float,
    hi: float,
    gap: float,
    *,
    rows: int,
) -> list[Placed] | None:
    """Labels spread along ``rows`` rows (label k in row k mod rows), each row without
    overlaps, in the order given; ``None`` when some row does not fit."""
    labels: dict[int, Placed] = {}
    for row in range(rows):
        picked = range(row, len(anchors), rows)
        positions = spread([anchors[i] for i in picked], [widths[i] for i in picked], lo, hi, gap)
        if positions is None:
            return None
        labels |= {i: Placed(anchors[i], p, row) for i, p in zip(picked, positions, strict=True)}
    return [labels[i] for i in range(len(anchors))]


@dataclass(frozen=True)
class Footprint:
    """A carrier's bar as drawn: lower guard, band and upper guard, left to right."""

    guard_below: tuple[float, float]
    band: tuple[float, float]
    guard_above: tuple[float, float]

    @property
    def centre(self) -> float:
        return (self.band[0] + self.band[1]) / 2


def footprints(
    spans: Sequence[tuple[float, float, float, float]],
    min_band: float,
    min_guard: float,
    lo: float,
    hi: float,
) -> list[Footprint]:
    """Bars of at least ``min_band`` wide, with guards of at least ``min_guard`` (a guard of
    zero stays zero), placed as near their true places as no overlap allows.

    Parameters
    ----------
    spans : sequence of (guard start, band start, band stop, guard stop)
        Each carrier's true guards and allocated band, ascending and not overlapping.
    min_band, min_guard : float
        Least drawn widths (axis units).
    lo, hi : float
        The axis' limits.

    Returns
    -------
    list of Footprint
        One per span.  Spans already at least as wide as the minimums keep their true widths;
        they move only when a widened neighbour needs the room.
    """
    drawn = []
    for g0, b0, b1, g1 in spans:
        below = 0.0 if b0 - g0 <= 0 else max(b0 - g0, min_guard)
        above = 0.0 if g1 - b1 <= 0 else max(g1 - b1, min_guard)
        band = max(b1 - b0, min_band)
        left = (b0 + b1) / 2 - band / 2 - below
        drawn.append((below, band, above, left))
    widths = [below + band + above for below, band, above, _ in drawn]
    wanted = [left + width / 2 for (*_, left), width in zip(drawn, widths, strict=True)]
    placed = spread(wanted, widths, lo, hi, 0.0)
    if placed is None:
        logger.warning("%d carrier bars do not fit the axis at their least widths", len(spans))
        placed = wanted
    out = []
    for (below, band, _above, _), width, centre in zip(drawn, widths, placed, strict=True):
        left = centre - width / 2
        out.append(
            Footprint(
                (left, left + below),
                (left + below, left + below + band),
                (left + below + band, left + width),
            )
        )
    return out
