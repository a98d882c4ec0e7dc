"""What a plan says about itself: guards per side, free spectrum, totals, the bounds, retunes,
words for every demand left out, and the cautions every plan carries."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

from solver import equipment
from solver.candidates import DemandOptions, family_for
from solver.geometry import free_segments_hz
from solver.model import (
    Carrier,
    CurrentSetting,
    Demand,
    HandComparison,
    PlanSummary,
    Problem,
    Unserved,
    UnservedReason,
)
from solver.packing import Segment
from solver.physics import bounds

__all__ = [
    "CAUTIONS",
    "SAME_CENTER_TOLERANCE_HZ",
    "SAME_RATE_TOLERANCE",
    "SettingChange",
    "explain_unserved",
    "mark_retunes",
    "setting_change",
    "setting_of",
    "summarise",
    "with_guards",
]

CAUTIONS: tuple[str, ...] = (
    "This plan is an engineering estimate from models of the pulse shaping, amplifier and link. "
    "Measure real equipment before any carrier goes on air.",
    "Licence conditions, the regulator's emission limits and coordination with neighbouring "
    "licensees decide what may be transmitted, not this tool.",
)
"""What every plan's notices and picture say about themselves (the README keeps its own words)."""

SAME_CENTER_TOLERANCE_HZ = 1.0
"""Centres closer than this (Hz) are the same: far below any placement raster, it absorbs
floating-point round-off only, so a carrier moved by any part of a raster step is retuned."""

SAME_RATE_TOLERANCE = 1e-9
"""Relative tolerance on symbol rate and roll-off: floating-point round-off only."""


def explain_unserved(
    problem: Problem,
    options: Sequence[DemandOptions],
    served: set[str],
    segments: Sequence[Segment],
) -> list[Unserved]:
    """Words for every demand without a carrier."""
    raster = problem.block.raster_hz
    largest = max((s.length for s in segments), default=0)
    narrowest = {o.demand.id: [f.at(f.lo_half) for f in o.candidates] for o in options}
    need_units = {
        d: min(c.width_units + c.guard_units + c.edge_units for c in cands)
        for d, cands in narrowest.items()
        if cands
    }
    shortfall_hz = (sum(need_units.values()) - sum(s.length for s in segments)) * raster
    out: list[Unserved] = []
    for opts in options:
        demand_id = opts.demand.id
        if demand_id in served:
            continue
        if not opts.candidates:
            out.append(Unserved(demand_id, UnservedReason.NO_LINK, opts.best_link_detail))
        elif not any(seg.fits_alone(c) for c in narrowest[demand_id] for seg in segments):
            need = need_units[demand_id] * raster
            out.append(
                Unserved(
                    demand_id,
                    UnservedReason.NO_SPECTRUM,
                    f"the minimum rate needs {need:,.0f} Hz with its guards, more than the largest "
                    f"free segment ({largest * raster:,.0f} Hz)",
                )
            )
        else:
            need = need_units[demand_id] * raster
            out.append(
                Unserved(
                    demand_id,
                    UnservedReason.NOT_ADMITTED,
                    _displaced(problem, opts.demand, served, need, shortfall_hz),
                )
            )
    return out


NAMED_DISPLACERS = 6
"""At most this many displacing demands are named in an unserved reason."""


def _displaced(
    problem: Problem, demand: Demand, served: set[str], need_hz: float, shortfall_hz: float
) -> str:
    """Who holds the spectrum a demand that fits alone would have needed."""
    above = sorted(
        (d for d in problem.demands if d.id in served and d.priority >= demand.priority),
        key=lambda d: (-d.priority, d.id),
    )
    names = ", ".join(d.id for d in above[:NAMED_DISPLACERS])
    if len(above) > NAMED_DISPLACERS:
        names += f" and {len(above) - NAMED_DISPLACERS} more"
    wanted = f"it needs {need_hz:,.0f} Hz (its narrowest minimum-rate carrier with guards)"
    short = (
        f"; the minimum rates of all demands together need {shortfall_hz:,.0f} Hz more than "
        "the free spectrum"
        if shortfall_hz > 0
        else ""
    )
    if not above:
        return f"not admitted: {wanted} and no free stretch that wide is left{short}"
    return (
        f"displaced by demands of priority {demand.priority} or higher ({names}): "
        f"{wanted} and no free stretch that wide is left beside them{short}"
    )


def with_guards(problem: Problem, carriers: Sequence[Carrier]) -> list[Carrier]:
    """Fill in each carrier's guards: the larger guard of a pair (never more than the gap the
    plan leaves), or its own edge guard.

    Each configuration's own guards are first recomputed from its settings alone
    (:func:`~solver.candidates.family_for`), so the same carrier reports the same guards in
    every plan, whichever stage of the planner chose it.
    """
    demands = {d.id: d for d in problem.demands}
    strongest = equipment.strongest_level_db(problem)
    settled = (_settled(problem, demands.get(c.demand_id), c, strongest) for c in carriers)
    ordered = sorted(settled, key=lambda c: c.center_hz)
    out = []
    for i, c in enumerate(ordered):
        below = ordered[i - 1] if i else None
        above = ordered[i + 1] if i + 1 < len(ordered) else None
        out.append(
            replace(
                c,
                guard_below_hz=_pair_guard(problem, c, below, "below"),
                guard_above_hz=_pair_guard(problem, c, above, "above"),
            )
        )
    return out


def _settled(
    problem: Problem, demand: Demand | None, carrier: Carrier, strongest_db: float
) -> Carrier:
    """``carrier`` with the guards its settings alone give it."""
    cfg = carrier.config
    if demand is None:
        return carrier
    fam = family_for(
        problem,
        demand,
        cfg.modulation,
        cfg.code_rate,
        cfg.rolloff,
        cfg.symbol_rate_baud,
        strongest_db,
        output_backoff_db=cfg.output_backoff_db,
    )
    if fam is None:
        return carrier
    own = fam.top.config
    return replace(
        carrier, config=replace(cfg, guard_hz=own.guard_hz, edge_guard_hz=own.edge_guard_hz)
    )


def _pair_guard(problem: Problem, c: Carrier, other: Carrier | None, side: str) -> float:
    edge = c.config.edge_guard_hz
    if other is None:
        return edge
    gap = (
        other.lower_edge_hz - c.upper_edge_hz
        if side == "above"
        else c.lower_edge_hz - other.upper_edge_hz
    )
    pair = max(c.config.guard_hz, other.config.guard_hz)
    # A neighbour farther away than an edge or exclusion means the edge is what this side faces.
    if gap > pair + edge:
        return edge
    return min(pair, max(gap, 0.0))


def summarise(
    problem: Problem,
    carriers: Sequence[Carrier],
    retunes: int,
    hand: HandComparison | None = None,
) -> PlanSummary:
    """Totals of a plan, its throughput against the two Shannon–Nyquist bounds (uncapped and
    capped at the targets) and the requested rates, and the hand method's figures if given."""
    free = free_segments_hz(problem, carriers)
    usable = problem.block.usable_width_hz
    total = sum(c.config.throughput_bps for c in carriers)
    capacity = bounds.capacity_bound(usable, problem.demands).total_bps
    capped = bounds.shannon_nyquist_bound(usable, problem.demands).total_bps
    requested = sum(d.target_rate_bps for d in problem.demands)
    return PlanSummary(
        used_bandwidth_hz=usable - sum(free),
        free_bandwidth_hz=sum(free),
        largest_free_segment_hz=max(free, default=0.0),
        total_throughput_bps=total,
        spectral_efficiency_bps_per_hz=total / usable if usable > 0 else 0.0,
        capacity_bound_bps=capacity,
        target_capped_bound_bps=capped,
        requested_rate_bps=requested,
        efficiency_vs_capacity_bound=_ratio(total, capacity),
        efficiency_vs_target_capped_bound=_ratio(total, capped),
        fraction_of_requested=_ratio(total, requested),
        retune_count=retunes,
        hand_method=hand,
    )


def _ratio(part: float, whole: float) -> float:
    return part / whole if whole > 0 else 0.0


@dataclass(frozen=True)
class SettingChange:
    """How a carrier's setting differs from an earlier one."""

    moved: bool
    """The centre moved by more than :data:`SAME_CENTER_TOLERANCE_HZ`."""
    reconfigured: bool
    """Modulation, code rate, roll-off or symbol rate changed."""

    @property
    def retuned(self) -> bool:
        """Anything changed: the carrier must be retuned on air."""
        return self.moved or self.reconfigured


def setting_change(before: CurrentSetting, after: CurrentSetting) -> SettingChange:
    """Compare two settings of one demand's carrier: the one rule for "retuned".

    Parameters
    ----------
    before, after : CurrentSetting
        The earlier setting (a demand's ``current``, or the parent plan's carrier) and the new.

    Returns
    -------
    SettingChange
        Whether the centre moved (beyond :data:`SAME_CENTER_TOLERANCE_HZ`, Hz) and whether the
        configuration changed (symbol rate and roll-off beyond the relative
        :data:`SAME_RATE_TOLERANCE`; modulation, code rate and a stated back-off exactly).

    Examples
    --------
    >>> from fractions import Fraction
    >>> from solver.model import Modulation
    >>> old = CurrentSetting(2.4e9, 1e6, 0.2, Modulation.QPSK, Fraction(1, 2))
    >>> setting_change(old, replace(old, center_hz=2.4e9 + 2_500.0))
    SettingChange(moved=True, reconfigured=False)
    """
    moved = abs(after.center_hz - before.center_hz) > SAME_CENTER_TOLERANCE_HZ
    reconfigured = not (
        after.modulation == before.modulation
        and after.code_rate == before.code_rate
        and math.isclose(after.rolloff, before.rolloff, rel_tol=SAME_RATE_TOLERANCE)
        and math.isclose(
            after.symbol_rate_baud, before.symbol_rate_baud, rel_tol=SAME_RATE_TOLERANCE
        )
        and (
            before.output_backoff_db is None
            or after.output_backoff_db is None
            or math.isclose(after.output_backoff_db, before.output_backoff_db, abs_tol=1e-9)
        )
    )
    return SettingChange(moved, reconfigured)


def setting_of(carrier: Carrier) -> CurrentSetting:
    """The setting ``carrier`` runs at, as a replan states a current one."""
    cfg = carrier.config
    return CurrentSetting(
        carrier.center_hz,
        cfg.symbol_rate_baud,
        cfg.rolloff,
        cfg.modulation,
        cfg.code_rate,
        cfg.output_backoff_db,
    )


def mark_retunes(problem: Problem, carriers: Sequence[Carrier]) -> list[Carrier]:
    """Each carrier with ``retuned`` set when it differs from its demand's current setting
    (:func:`setting_change`)."""
    current = {d.id: d.current for d in problem.demands if d.current is not None}
    out = []
    for c in carriers:
        cur = current.get(c.demand_id)
        moved = cur is not None and setting_change(cur, setting_of(c)).retuned
        out.append(replace(c, retuned=moved))
    return out
