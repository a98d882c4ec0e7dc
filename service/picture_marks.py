"""What the spectrum picture marks beside the carriers: the leakage figure of every gap, and
what changed since an earlier plan.  Pure data, no drawing (:mod:`service.render` draws it).

**Leakage.**  The plan's leakage limits are ratios (ACLR-type: a carrier's power over the power
it puts into the neighbouring band of its own nominal width, 3GPP TS 36.104 §6.6.2 defines the
same kind of figure), not spectral-density levels, so the picture does not draw them as lines on
the PSD axis: every gap between two neighbouring carriers, and between a carrier and a block
edge or exclusion, carries the ratio the plan achieves there and the least ratio the request
permits.  The gaps are those :func:`solver.verify_plan` checks first on each side of a carrier
(the nearest neighbour, edge or exclusion), and the achieved figure is the one the verifier
wrote into the plan (``leakage_ratio_below_db`` / ``leakage_ratio_above_db``); a gap between
two carriers shows the worse of the two carriers' ratios.

**Changes.**  A replan's picture compares each carrier with the setting its demand had before:
the parent plan's carrier when the plan has a parent, else the request's ``current`` setting.
The words are those of ``GET /v1/plans/{id}/retunes`` (:class:`~service.schemas.RetuneChange`)
and the rule is the solver's (:func:`solver.setting_change`), so the picture, the plan's
``retuned`` flags and the retunes list agree.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from enum import StrEnum

from service.schemas import RetuneChange
from solver import (
    LEAKAGE_TOLERANCE_DB,
    Carrier,
    CurrentSetting,
    Plan,
    Problem,
    setting_change,
    setting_of,
)

__all__ = [
    "CarrierChange",
    "GapKind",
    "LeakageGap",
    "Verdict",
    "changes_since",
    "leakage_gaps",
    "settings_before",
]

_TOUCH_HZ = 1e-6
"""Floating-point slack on edges (as the verifier's)."""


class GapKind(StrEnum):
    """Which limit a gap is held to."""

    NEIGHBOURS = "neighbours"
    """Between two carriers: the request's ``leakage_limit_db``."""
    EDGE = "edge"
    """Between a carrier and a block edge or exclusion: the edge limit."""


class Verdict(StrEnum):
    """How a gap's achieved leakage ratio compares with the least permitted."""

    MEETS = "≥"
    AT_LIMIT = "≈"
    """Below the limit by no more than the verifier's numerical slack (it passes)."""
    FAILS = "<"
    UNKNOWN = "?"
    """The plan carries no verified figure for this gap."""


@dataclass(frozen=True)
class LeakageGap:
    """One gap (Hz), the limit it is held to, and the ratio achieved there (dB)."""

    start_hz: float
    stop_hz: float
    kind: GapKind
    limit_db: float
    achieved_db: float
    """The worse leakage ratio of the carriers on either side (NaN: not verified)."""
    leakers: tuple[str, ...]
    """The demand ids whose leakage into this gap is counted (one or two)."""

    @property
    def centre_hz(self) -> float:
        return (self.start_hz + self.stop_hz) / 2

    @property
    def verdict(self) -> Verdict:
        if not math.isfinite(self.achieved_db):
            return Verdict.UNKNOWN
        if self.achieved_db >= self.limit_db:
            return Verdict.MEETS
        if self.achieved_db >= self.limit_db - LEAKAGE_TOLERANCE_DB:
            return Verdict.AT_LIMIT
        return Verdict.FAILS

    def text(self) -> str:
        """``38.2 ≥ 30 dB``: achieved, verdict, least permitted (``? ≥ 30 dB`` unverified)."""
        if self.verdict is Verdict.UNKNOWN:
            return f"? ≥ {self.limit_db:g} dB"
        return f"{self.achieved_db:.1f} {self.verdict.value} {self.limit_db:g} dB"


def _figure(value: float) -> float:
    """A verified ratio, or NaN for a missing one (the plan's ``inf`` default)."""
    return value if math.isfinite(value) else math.nan


def _walls(problem: Problem) -> list[tuple[float, float]]:
    """Spans no carrier may use: outside the block, and the exclusions (Hz)."""
    block = problem.block
    spans = [(-math.inf, block.start_hz), (block.stop_hz, math.inf)]
    spans += [(x.start_hz, x.stop_hz) for x in block.exclusions]
    return spans


def _wall_below(walls: Sequence[tuple[float, float]], edge_hz: float) -> float:
    """The top of the nearest wall wholly below ``edge_hz``."""
    return max((stop for _, stop in walls if stop <= edge_hz + _TOUCH_HZ), default=-math.inf)


def _wall_above(walls: Sequence[tuple[float, float]], edge_hz: float) -> float:
    """The bottom of the nearest wall wholly above ``edge_hz``."""
    return min((start for start, _ in walls if start >= edge_hz - _TOUCH_HZ), default=math.inf)


def leakage_gaps(problem: Problem, carriers: Sequence[Carrier]) -> list[LeakageGap]:
    """Every gap the picture labels, by frequency.

    Parameters
    ----------
    problem : Problem
        The request: block, exclusions and the two limits (dB).
    carriers : sequence of Carrier
        The plan's carriers, with the verifier's leakage ratios (any order).

    Returns
    -------
    list of LeakageGap
        One gap between each pair of neighbouring carriers with no edge or exclusion between
        them (held to ``leakage_limit_db``), and one between a carrier and each block edge or
        exclusion next to it (held to the edge limit).
    """
    walls = _walls(problem)
    ordered = sorted(carriers, key=lambda c: c.center_hz)
    gaps: list[LeakageGap] = []
    for i, c in enumerate(ordered):
        below = _wall_below(walls, c.lower_edge_hz)
        previous = ordered[i - 1] if i else None
        if previous is not None and previous.upper_edge_hz > below:
            achieved = min(previous.leakage_ratio_above_db, c.leakage_ratio_below_db)
            gaps.append(
                LeakageGap(
                    previous.upper_edge_hz,
                    c.lower_edge_hz,
                    GapKind.NEIGHBOURS,
                    problem.leakage_limit_db,
                    _figure(achieved),
                    (previous.demand_id, c.demand_id),
                )
            )
        else:
            gaps.append(_edge_gap(problem, below, c.lower_edge_hz, c.leakage_ratio_below_db, c))
        above = _wall_above(walls, c.upper_edge_hz)
        following = ordered[i + 1] if i + 1 < len(ordered) else None
        if following is None or following.lower_edge_hz >= above:
            gaps.append(_edge_gap(problem, c.upper_edge_hz, above, c.leakage_ratio_above_db, c))
    # A carrier outside the block (a plan the verifier rejects) has no wall on one side.
    return [g for g in gaps if math.isfinite(g.start_hz) and math.isfinite(g.stop_hz)]


def _edge_gap(
    problem: Problem, start_hz: float, stop_hz: float, ratio_db: float, carrier: Carrier
) -> LeakageGap:
    return LeakageGap(
        start_hz,
        stop_hz,
        GapKind.EDGE,
        problem.edge_limit_db,
        _figure(ratio_db),
        (carrier.demand_id,),
    )


@dataclass(frozen=True)
class CarrierChange:
    """How one demand's carrier differs from its earlier setting."""

    demand_id: str
    change: RetuneChange
    before: CurrentSetting | None
    """The earlier setting (None: added)."""
    after: Carrier | None
    """The carrier in this plan (None: dropped)."""

    @property
    def shift_hz(self) -> float:
        """New centre − earlier centre (Hz); NaN when either is missing."""
        if self.before is None or self.after is None:
            return math.nan
        return self.after.center_hz - self.before.center_hz


def settings_before(problem: Problem, parent: Plan | None) -> dict[str, CurrentSetting] | None:
    """Each demand's earlier setting: the parent plan's carriers, else the request's
    ``current`` settings; None when there is nothing to compare with (a first plan)."""
    if parent is not None:
        return {c.demand_id: setting_of(c) for c in parent.carriers}
    current = {d.id: d.current for d in problem.demands if d.current is not None}
    return current or None


def changes_since(
    carriers: Sequence[Carrier], before: Mapping[str, CurrentSetting]
) -> list[CarrierChange]:
    """Every carrier added, moved or reconfigured, and every earlier carrier dropped (by id)."""
    now = {c.demand_id: c for c in carriers}
    found: list[CarrierChange] = []
    for demand_id in sorted(now.keys() | before.keys()):
        old, new = before.get(demand_id), now.get(demand_id)
        if old is None:
            found.append(CarrierChange(demand_id, RetuneChange.ADDED, None, new))
            continue
        if new is None:
            found.append(CarrierChange(demand_id, RetuneChange.DROPPED, old, None))
            continue
        step = setting_change(old, setting_of(new))
        if step.moved and step.reconfigured:
            found.append(CarrierChange(demand_id, RetuneChange.MOVED_AND_RECONFIGURED, old, new))
        elif step.moved:
            found.append(CarrierChange(demand_id, RetuneChange.MOVED, old, new))
        elif step.reconfigured:
            found.append(CarrierChange(demand_id, RetuneChange.RECONFIGURED, old, new))
    return found
