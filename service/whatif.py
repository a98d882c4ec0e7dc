"""What-if: a stored plan's request with small changes, checked, and the plan it gives compared
with the stored one.

:func:`apply_changes` builds the changed request from the stored one (block edges, exclusions
removed, demands dropped, rates changed, demands added).  The changed request replans the stored
plan: its ``previous_plan_id`` is the stored plan, and its demands carry no ``current`` setting
of their own, so each takes the stored plan's carrier as its current setting and the replan
machinery keeps carriers where they still fit (as a replan does, by the request's
``retune_penalty``).  :func:`prepare_changed` checks it exactly as ``POST /v1/plans`` checks a
request; every error names the field of the changes that caused it where one did (e.g.
``changes.add_demands[0].profile``), else the field of the changed request.
:func:`difference` compares the two plans demand by demand with the solver's rule for a retune
(:func:`solver.setting_change`).
"""

from __future__ import annotations

import re
from collections import Counter
from dataclasses import dataclass
from typing import Any

import pydantic

from service.convert import setting_from_wire
from service.errors import FieldIssue, InvalidInputError, field_path
from service.runtime import PreparedSolve, prepare
from service.schemas import CarrierOut, PlanOut, PlanRequest
from service.schemas_whatif import (
    CarrierBriefOut,
    ChangesIn,
    DemandChange,
    DemandDifferenceOut,
    DifferenceOut,
    WhatIfRequest,
)
from service.settings import Settings
from service.store import Store
from solver import ProblemError, setting_change, validate_problem

__all__ = ["ChangedRequest", "FieldOrigins", "apply_changes", "difference", "prepare_changed"]

IN_CHANGED = " (in the changed request)"
NAME_SUFFIX = " (what-if)"
MAX_NAME = 200
_DEMAND_FIELD = re.compile(r"^demands\[(\d+)\](.*)$")
_EXCLUSION_FIELD = re.compile(r"^block\.exclusions\[(\d+)\](.*)$")


@dataclass(frozen=True)
class FieldOrigins:
    """Where the parts of a changed request came from, to name the fields of its errors."""

    added_from: dict[int, str]
    """Changed demand index → ``changes.add_demands[j]``."""
    rates_from: dict[int, str]
    """Changed demand index → ``changes.demand_rates[i]``."""
    exclusion_from: tuple[int, ...]
    """Changed exclusion index → the stored request's index."""
    edges_changed: bool

    def name_field(self, issue: FieldIssue) -> FieldIssue:
        """The issue with its field named in the changes where they caused it."""
        field, message = issue.field, issue.message
        demand = _DEMAND_FIELD.match(field)
        if demand is not None:
            k, rest = int(demand[1]), demand[2]
            if k in self.added_from:
                return FieldIssue(self.added_from[k] + rest, message)
            if k in self.rates_from and rest in (".min_rate_bps", ".target_rate_bps"):
                return FieldIssue(self.rates_from[k] + rest, message)
        exclusion = _EXCLUSION_FIELD.match(field)
        if exclusion is not None and int(exclusion[1]) < len(self.exclusion_from):
            original = self.exclusion_from[int(exclusion[1])]
            return FieldIssue(f"block.exclusions[{original}]{exclusion[2]}", message + IN_CHANGED)
        if self.edges_changed and field in ("block.start_hz", "block.stop_hz"):
            return FieldIssue("changes.block_edges." + field.removeprefix("block."), message)
        return FieldIssue(field, message + IN_CHANGED)


@dataclass(frozen=True)
class ChangedRequest:
    """The changed request, the demands the changes dropped, and where its parts came from."""

    request: PlanRequest
    dropped: frozenset[str]
    origins: FieldOrigins


def _reference_issues(stored: PlanRequest, plan_id: str, changes: ChangesIn) -> list[FieldIssue]:
    """Changes that name an exclusion or a demand the stored request does not have."""
    issues: list[FieldIssue] = []
    count = len(stored.block.exclusions)
    for i, index in enumerate(changes.remove_exclusions):
        if index >= count:
            why = f"no exclusion {index}: the stored request has {count}"
            issues.append(FieldIssue(f"changes.remove_exclusions[{i}]", why))
    issues += _listed_twice("changes.remove_exclusions", changes.remove_exclusions)
    ids = {d.id for d in stored.demands}
    for i, demand_id in enumerate(changes.drop_demands):
        if demand_id not in ids:
            why = f"no demand {demand_id!r} in plan {plan_id}"
            issues.append(FieldIssue(f"changes.drop_demands[{i}]", why))
    issues += _listed_twice("changes.drop_demands", changes.drop_demands)
    for i, rate in enumerate(changes.demand_rates):
        where = f"changes.demand_rates[{i}].demand_id"
        if rate.demand_id not in ids:
            issues.append(FieldIssue(where, f"no demand {rate.demand_id!r} in plan {plan_id}"))
        elif rate.demand_id in changes.drop_demands:
            issues.append(FieldIssue(where, f"{rate.demand_id!r} is dropped by these changes"))
    issues += _listed_twice(
        "changes.demand_rates", [r.demand_id for r in changes.demand_rates], ".demand_id"
    )
    kept = ids - set(changes.drop_demands)
    for j, demand in enumerate(changes.add_demands):
        if demand.id in kept:
            why = f"{demand.id!r} is already a demand of plan {plan_id} (drop it to replace it)"
            issues.append(FieldIssue(f"changes.add_demands[{j}].id", why))
    if not kept and not changes.add_demands:
        issues.append(FieldIssue("changes.drop_demands", "would leave no demand"))
    return issues


def _listed_twice(where: str, values: list[Any], suffix: str = "") -> list[FieldIssue]:
    counts = Counter(values)
    seen: set[Any] = set()
    out = []
    for i, value in enumerate(values):
        if counts[value] > 1 and value in seen:
            out.append(FieldIssue(f"{where}[{i}]{suffix}", f"{value!r} is listed twice"))
        seen.add(value)
    return out


def apply_changes(stored: PlanRequest, plan_id: str, body: WhatIfRequest) -> ChangedRequest:
    """The stored request with ``body``'s changes, replanning plan ``plan_id``.

    Raises :class:`~service.errors.InvalidInputError` naming each change that refers to
    nothing, and each field of the changed request that the wire model refuses.
    """
    changes = body.changes
    issues = _reference_issues(stored, plan_id, changes)
    if issues:
        raise InvalidInputError(issues)
    data = stored.model_dump()
    edges = changes.block_edges
    if edges is not None:
        data["block"].update(edges.model_dump(exclude_none=True))
    removed = set(changes.remove_exclusions)
    kept_exclusions = [i for i in range(len(stored.block.exclusions)) if i not in removed]
    data["block"]["exclusions"] = [data["block"]["exclusions"][i] for i in kept_exclusions]
    demands, rates_from = _kept_demands(stored, changes)
    added_from = {
        len(demands) + j: f"changes.add_demands[{j}]" for j in range(len(changes.add_demands))
    }
    demands += [d.model_dump() for d in changes.add_demands]
    data.update(
        demands=demands,
        previous_plan_id=plan_id,
        name=(stored.name + NAME_SUFFIX)[:MAX_NAME],
        time_limit_s=body.time_limit_s or stored.time_limit_s,
    )
    origins = FieldOrigins(added_from, rates_from, tuple(kept_exclusions), edges is not None)
    try:
        request = PlanRequest.model_validate(data)
    except pydantic.ValidationError as exc:
        found = [FieldIssue(field_path(e["loc"]), _message(e["msg"])) for e in exc.errors()]
        raise InvalidInputError([origins.name_field(i) for i in found]) from exc
    return ChangedRequest(request, frozenset(changes.drop_demands), origins)


def _message(text: str) -> str:
    return text.removeprefix("Value error, ")


def _kept_demands(
    stored: PlanRequest, changes: ChangesIn
) -> tuple[list[dict[str, Any]], dict[int, str]]:
    """The stored demands not dropped, with their new rates and without ``current`` (the
    stored plan's carriers are their current settings); and which rate change touched which."""
    rates = {r.demand_id: (i, r) for i, r in enumerate(changes.demand_rates)}
    kept: list[dict[str, Any]] = []
    rates_from: dict[int, str] = {}
    for demand in stored.demands:
        if demand.id in changes.drop_demands:
            continue
        data = demand.model_dump()
        data["current"] = None
        if demand.id in rates:
            i, rate = rates[demand.id]
            rates_from[len(kept)] = f"changes.demand_rates[{i}]"
            data.update(rate.model_dump(exclude={"demand_id"}, exclude_none=True))
        kept.append(data)
    return kept, rates_from


def prepare_changed(changed: ChangedRequest, store: Store, settings: Settings) -> PreparedSolve:
    """Check the changed request as ``POST /v1/plans`` checks a request (the same checks, in
    the same order), naming fields in the changes where they caused the error."""
    try:
        prepared = prepare(changed.request, store, settings)
        validate_problem(prepared.problem)
    except InvalidInputError as exc:
        raise InvalidInputError([changed.origins.name_field(i) for i in exc.issues]) from exc
    except ProblemError as exc:
        raise InvalidInputError(
            [changed.origins.name_field(FieldIssue(exc.field, exc.message))]
        ) from exc
    return prepared


def _brief(carrier: CarrierOut | None) -> CarrierBriefOut | None:
    if carrier is None:
        return None
    return CarrierBriefOut(
        center_hz=carrier.center_hz,
        allocated_bandwidth_hz=carrier.allocated_bandwidth_hz,
        modulation=carrier.modulation,
        code_rate=carrier.code_rate,
        throughput_bps=carrier.throughput_bps,
    )


def _change(before: CarrierOut | None, after: CarrierOut | None) -> DemandChange:
    """The solver's rule for a retune (:func:`solver.setting_change`), as the plan's
    ``retuned`` flags and ``GET /v1/plans/{id}/retunes`` apply it."""
    if before is None:
        return DemandChange.UNSERVED if after is None else DemandChange.ADDED
    if after is None:
        return DemandChange.REMOVED
    change = setting_change(setting_from_wire(before), setting_from_wire(after))
    if change.moved and change.reconfigured:
        return DemandChange.MOVED_AND_RECONFIGURED
    if change.moved:
        return DemandChange.MOVED
    return DemandChange.RECONFIGURED if change.reconfigured else DemandChange.UNCHANGED


def difference(before: PlanOut, after: PlanOut, dropped: frozenset[str]) -> DifferenceOut:
    """The changed plan ``after`` against the stored plan ``before``, demand by demand.

    Parameters
    ----------
    before, after : PlanOut
        The stored plan and the changed one.
    dropped : frozenset of str
        Ids of the demands the changes dropped (noted as such).

    Returns
    -------
    DifferenceOut
        Totals before and after, and one entry per demand of either plan, sorted by id.
    """
    old = {c.demand_id: c for c in before.carriers}
    new = {c.demand_id: c for c in after.carriers}
    unserved = {u.demand_id: u for u in after.unserved}
    ids = old.keys() | new.keys() | unserved.keys() | {u.demand_id for u in before.unserved}
    rows = []
    for demand_id in sorted(ids):
        b, a = old.get(demand_id), new.get(demand_id)
        if demand_id in dropped:
            note = "dropped by the changes"
        elif demand_id in unserved:
            u = unserved[demand_id]
            note = f"unserved: {u.reason.value}: {u.detail}"
        else:
            note = ""
        rows.append(
            DemandDifferenceOut(
                demand_id=demand_id,
                change=_change(b, a),
                before=_brief(b),
                after=_brief(a),
                throughput_change_bps=_rounded_bps(
                    (a.throughput_bps if a else 0.0) - (b.throughput_bps if b else 0.0)
                ),
                note=note,
            )
        )
    total_before = before.summary.total_throughput_bps
    total_after = after.summary.total_throughput_bps
    return DifferenceOut(
        total_throughput_before_bps=total_before,
        total_throughput_after_bps=total_after,
        throughput_change_bps=_rounded_bps(total_after - total_before),
        served_before=len(old),
        served_after=len(new),
        demands=rows,
    )


def _rounded_bps(change_bps: float) -> float:
    """A throughput change to the millibit per second: an unchanged carrier whose rate is
    recomputed reads 0, not float noise (−1.5e-11).

    >>> _rounded_bps(5.1e6 * (0.1 + 0.2) - 5.1e6 * 0.3), _rounded_bps(-19110.0004)
    (0.0, -19110.0)
    """
    return round(change_bps, 3) + 0.0  # + 0.0: −0.0 reads 0.0
