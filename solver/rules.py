"""The rule-of-thumb planner engineers use by hand: the comparison peer.

Common practice, as done in a spreadsheet:

* one roll-off, :data:`HAND_ROLLOFF` (0.35), for every carrier;
* a guard of :data:`HAND_GUARD_FRACTION` (10 %) of the carrier's width on each side, so two
  neighbours are separated by the sum of their guards;
* the highest-efficiency modulation and code rate that closes the link with the demand's margin
  at the symbol rate the target rate needs (a power-limited link that closes with nothing at
  that rate gets the configuration with the most throughput that still closes);
* first fit from the bottom of the block, highest priority first; pinned demands at their pin.

The result goes through the same independent verification as an optimised plan: carriers that
fail it are left out, so the peer is never credited with a plan that breaks the limits.
:func:`hand_comparison` condenses it into the figures every plan's summary reports.
"""

from __future__ import annotations

import math
import time

import numpy as np

from solver import equipment
from solver.candidates import candidate_for
from solver.model import (
    Carrier,
    CarrierConfig,
    Demand,
    HandComparison,
    Plan,
    Problem,
    SolveStats,
    SolveStatus,
    Unserved,
    UnservedReason,
)
from solver.repair import drop_until_passing, dropped_notice
from solver.summary import CAUTIONS, summarise, with_guards
from solver.validation import validate_problem
from solver.verify import verify_plan

__all__ = ["HAND_GUARD_FRACTION", "HAND_ROLLOFF", "hand_comparison", "rule_of_thumb_plan"]

HAND_ROLLOFF = 0.35
"""Roll-off used for every carrier (common practice; the DVB-S default, EN 300 421)."""

HAND_GUARD_FRACTION = 0.10
"""Guard on each side as a fraction of the carrier's allocated width (common practice)."""


def _hand_config(problem: Problem, demand: Demand) -> CarrierConfig | None:
    """Highest-efficiency entry that closes at the target rate, else the most throughput."""
    best: tuple[float, CarrierConfig] | None = None
    profile = equipment.profile_for(problem, demand)
    entries = equipment.modcod_table(profile, problem.coding, tuple(demand.modulations))
    step = profile.symbol_rate_step_baud
    for entry in sorted(entries, key=lambda e: -e.net_bits_per_symbol):
        rs = min(demand.target_rate_bps / entry.net_bits_per_symbol, profile.symbol_rate_max_baud)
        if demand.cn0_dbhz is not None:
            closing = 10 ** ((demand.cn0_dbhz - entry.required_esn0_db - demand.margin_db) / 10)
            rs = min(rs, closing)
        rs = float(equipment.grid_floor(np.array([rs]), step)[0])
        if rs <= 0:
            continue
        cand = candidate_for(problem, demand, entry.modulation, entry.code_rate, HAND_ROLLOFF, rs)
        if cand is None:
            continue
        if cand.config.throughput_bps >= demand.target_rate_bps * (1 - 1e-9):
            return cand.config
        if best is None or cand.config.throughput_bps > best[0]:
            best = (cand.config.throughput_bps, cand.config)
    return None if best is None else best[1]


def _free_intervals(
    problem: Problem, taken: list[tuple[float, float]]
) -> list[tuple[float, float]]:
    block = problem.block
    walls = sorted([(x.start_hz, x.stop_hz) for x in block.exclusions] + taken)
    free, cursor = [], block.start_hz
    for start, stop in walls:
        if start > cursor:
            free.append((cursor, start))
        cursor = max(cursor, stop)
    if block.stop_hz > cursor:
        free.append((cursor, block.stop_hz))
    return free


def _first_fit(
    problem: Problem, config: CarrierConfig, taken: list[tuple[float, float]]
) -> float | None:
    """Lowest centre (on the raster) where the carrier and its two guards fit."""
    raster = problem.block.raster_hz
    half = config.allocated_bandwidth_hz / 2 * (1 + 2 * HAND_GUARD_FRACTION)
    for lo, hi in _free_intervals(problem, taken):
        steps = math.ceil((lo + half - problem.block.start_hz) / raster - 1e-9)
        center = problem.block.start_hz + steps * raster
        if center + half <= hi + 1e-6:
            return center
    return None


def rule_of_thumb_plan(problem: Problem) -> Plan:
    """Plan the block the way it is done by hand, then verify it like any other plan.

    Returns
    -------
    Plan
        The hand plan: carriers that pass verification, the rest unserved with reasons.
    """
    validate_problem(problem)
    started = time.perf_counter()
    carriers: list[Carrier] = []
    unserved: list[Unserved] = []
    taken: list[tuple[float, float]] = []
    order = sorted(problem.demands, key=lambda d: (d.pinned_center_hz is None, -d.priority, d.id))
    for demand in order:
        config = _hand_config(problem, demand)
        if config is None:
            unserved.append(
                Unserved(
                    demand.id, UnservedReason.NO_LINK, "no entry closes the link by hand rules"
                )
            )
            continue
        center = demand.pinned_center_hz
        if center is None:
            center = _first_fit(problem, config, taken)
        if center is None:
            unserved.append(
                Unserved(demand.id, UnservedReason.NO_SPECTRUM, "no room left by first fit")
            )
            continue
        half = config.allocated_bandwidth_hz / 2 * (1 + 2 * HAND_GUARD_FRACTION)
        taken.append((center - half, center + half))
        carriers.append(Carrier(config, center, 0.0, 0.0))
    check, dropped = drop_until_passing(problem, verify_plan(problem, carriers))
    unserved += dropped
    final = with_guards(problem, check.carriers)
    total = sum(c.config.throughput_bps for c in final)
    status = SolveStatus.FEASIBLE if final else SolveStatus.INFEASIBLE
    stats = SolveStats(
        status, total, total, 0.0, time.perf_counter() - started, 1, 0, "rule-of-thumb", 1
    )
    return Plan(
        name=f"{problem.name} (rule of thumb)",
        status=status,
        carriers=tuple(final),
        unserved=tuple(sorted(unserved, key=lambda u: u.demand_id)),
        summary=summarise(problem, final, 0),
        stats=stats,
        notices=(*CAUTIONS, dropped_notice(dropped)) if dropped else CAUTIONS,
    )


def hand_comparison(problem: Problem, plan_throughput_bps: float) -> HandComparison:
    """The hand method on ``problem``, verified, beside a plan that carries
    ``plan_throughput_bps``.

    Parameters
    ----------
    problem : Problem
        The request the plan answers.
    plan_throughput_bps : float
        The plan's total throughput, bit/s.

    Returns
    -------
    HandComparison
        Demands the verified hand plan serves, its throughput (bit/s) and used spectrum (Hz,
        as a plan's summary counts it), and the plan's throughput over the hand plan's (None
        when the hand plan carries nothing).
    """
    hand = rule_of_thumb_plan(problem)
    carried = hand.summary.total_throughput_bps
    return HandComparison(
        served_demands=len(hand.carriers),
        throughput_bps=carried,
        used_bandwidth_hz=hand.summary.used_bandwidth_hz,
        plan_to_hand_ratio=plan_throughput_bps / carried if carried > 0 else None,
    )
