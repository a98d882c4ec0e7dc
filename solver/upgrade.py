"""Verified carriers given a better configuration where they stand.

The packing chooses each carrier's modulation, code rate and roll-off against the pair rule's
protection (:class:`solver.verify.PairCheck`), which spaces a sensitive carrier as though its
neighbours shared its allowance evenly.  Verification measures the real aggregate, so a
carrier often has interference margin to spare once the plan is placed.  Here, for
``max_throughput``, each carrier below its target tries the configurations of its demand
that carry more in no more width, at its own centre, best first, and keeps the first the whole
plan still passes verification with (:func:`~solver.verify.verify_change`: exact, and local).
Positions never change and no carrier grows, so the plan's geometry, admission and every
other carrier's configuration stay as they were.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Collection, Sequence

from solver.model import Carrier, CarrierConfig, Demand, Objective, Problem
from solver.packing.families import Family
from solver.verify import Verification, verify_change

__all__ = ["upgrade"]


def upgrade(
    problem: Problem,
    verified: Verification,
    families: Callable[[Demand], Sequence[Family]],
    keep: Collection[str],
    deadline: float,
) -> Verification:
    """``verified`` (a passing plan) with carriers below target in better configurations.

    Parameters
    ----------
    problem : Problem
        The request; nothing changes unless its objective is ``max_throughput``.
    verified : Verification
        A plan that passes verification.
    families : callable
        A demand's configurations to choose from (each a :class:`Family` over widths).
    keep : collection of str
        Demands whose carriers must not change (pinned, or kept in place by a replan).
    deadline : float
        ``time.perf_counter()`` value at which to stop trying.

    Returns
    -------
    Verification
        The plan with its changes, passing verification (``verified`` itself when nothing
        changed).
    """
    if problem.objective is not Objective.MAX_THROUGHPUT or not verified.passed:
        return verified
    demands = {d.id: d for d in problem.demands}
    choices: dict[str, Sequence[Family]] = {}
    current = verified
    changed = True
    while changed:  # a change moves its neighbours' interference: pass again until none
        changed = False
        for i in _order(current.carriers, demands, keep):
            if time.perf_counter() > deadline:
                return current
            demand = demands[current.carriers[i].demand_id]
            if demand.id not in choices:
                choices[demand.id] = families(demand)
            better = _upgraded(problem, current, i, demand, choices[demand.id], deadline)
            if better is not None:
                current, changed = better, True
    return current


def _value(demand: Demand, config: CarrierConfig) -> float:
    return demand.priority * min(config.throughput_bps, demand.target_rate_bps)


def _order(
    carriers: Sequence[Carrier], demands: dict[str, Demand], keep: Collection[str]
) -> list[int]:
    """Indices of the carriers below target that may change, highest priority first, then
    the most short of target."""
    below = [
        i
        for i, c in enumerate(carriers)
        if c.demand_id not in keep
        and c.config.throughput_bps < demands[c.demand_id].target_rate_bps * (1 - 1e-9)
    ]
    return sorted(
        below,
        key=lambda i: (
            -demands[carriers[i].demand_id].priority,
            carriers[i].config.throughput_bps - demands[carriers[i].demand_id].target_rate_bps,
        ),
    )


def _upgraded(
    problem: Problem,
    current: Verification,
    i: int,
    demand: Demand,
    families: Sequence[Family],
    deadline: float,
) -> Verification | None:
    """The plan with carrier ``i`` in the configuration worth most that passes, or None."""
    carrier = current.carriers[i]
    worth = _value(demand, carrier.config)
    trials = []
    for fam in families:
        config = _in_width(fam, carrier.config.allocated_bandwidth_hz)
        if config.throughput_bps < demand.min_rate_bps * (1 - 1e-9):
            continue
        value = _value(demand, config)
        if value > worth * (1 + 1e-6):
            trials.append((value, config))
    for _, config in sorted(trials, key=lambda t: -t[0]):
        if time.perf_counter() > deadline:
            return None
        check = verify_change(problem, current, i, Carrier(config, carrier.center_hz, 0.0, 0.0))
        if check.passed:
            return check
    return None


def _in_width(fam: Family, width_hz: float) -> CarrierConfig:
    """``fam``'s configuration filling ``width_hz``, or at its top (its target, or the most
    its link allows) when that is narrower."""
    return fam.config_at(min(1.0, width_hz / fam.top.config.allocated_bandwidth_hz))
