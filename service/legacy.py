"""Plan documents written by earlier versions, read with today's field names.

Plans are immutable and stored as JSON text (:mod:`service.store`), and plan files written by
``bandwright plan -o`` are read back by ``replan --previous``; both may predate a rename.  Each
document is brought up to date when it is read, never rewritten:

* carriers: ``margin_db`` → ``headroom_db`` and ``margin_after_interference_db`` →
  ``headroom_after_interference_db`` (the excess of Es/N0 over the MODCOD's threshold, told
  apart from the demand's requested ``margin_db``);
* summary: ``shannon_bound_bps`` (capped at the targets) → ``target_capped_bound_bps`` and
  ``efficiency_vs_bound`` → ``efficiency_vs_target_capped_bound``; ``capacity_bound_bps``,
  ``requested_rate_bps`` and their ratios, which older plans lack, are computed from the
  request the plan answers; ``hand_method`` stays null (it would need the hand method run).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service.schemas import PlanRequest
from solver import Block, Demand, Exclusion, capacity_bound

__all__ = ["LegacyPlanError", "upgrade_plan_document"]

CARRIER_RENAMES = {
    "margin_db": "headroom_db",
    "margin_after_interference_db": "headroom_after_interference_db",
}
SUMMARY_RENAMES = {
    "shannon_bound_bps": "target_capped_bound_bps",
    "efficiency_vs_bound": "efficiency_vs_target_capped_bound",
}


class LegacyPlanError(ValueError):
    """An old plan document lacks what is needed to bring it up to date."""


def _renamed(fields: Mapping[str, Any], renames: Mapping[str, str]) -> dict[str, Any]:
    out = dict(fields)
    for old, new in renames.items():
        if old in out and new not in out:
            out[new] = out.pop(old)
    return out


def _ratio(part: float, whole: float) -> float:
    return part / whole if whole > 0 else 0.0


def _request_figures(summary: Mapping[str, Any], request: PlanRequest) -> dict[str, float]:
    """The uncapped bound and the requested rate, as :func:`solver.summary.summarise` gives
    them, from the block and the demands' links."""
    b = request.block
    block = Block(
        start_hz=b.start_hz,
        stop_hz=b.stop_hz,
        raster_hz=b.raster_hz,
        exclusions=tuple(Exclusion(x.start_hz, x.stop_hz, x.note) for x in b.exclusions),
    )
    demands = [
        Demand(
            id=d.id,
            min_rate_bps=d.min_rate_bps,
            target_rate_bps=d.target_rate_bps,
            cn0_dbhz=d.cn0_dbhz,
            esn0_db=d.esn0_db,
            margin_db=d.margin_db,
        )
        for d in request.demands
    ]
    capacity = capacity_bound(block.usable_width_hz, demands).total_bps
    requested = sum(d.target_rate_bps for d in request.demands)
    total = float(summary["total_throughput_bps"])
    return {
        "capacity_bound_bps": capacity,
        "requested_rate_bps": requested,
        "efficiency_vs_capacity_bound": _ratio(total, capacity),
        "fraction_of_requested": _ratio(total, requested),
    }


def upgrade_plan_document(document: Any, request: PlanRequest | None = None) -> Any:
    """A plan document (parsed JSON) with today's field names and summary figures.

    Parameters
    ----------
    document : object
        The plan as stored or written (parsed JSON); a current document, or anything but an
        object, comes back as it is (the caller's validation then judges it).
    request : PlanRequest, optional
        The request the plan answers; without it, the document's own ``request`` echo.

    Returns
    -------
    object
        The document, ready for :class:`~service.schemas.PlanOut` (the input is not changed).

    Raises
    ------
    LegacyPlanError
        When the summary lacks the uncapped bound and no request is at hand to compute it.
    """
    if not isinstance(document, Mapping):
        return document
    out = dict(document)
    carriers = out.get("carriers")
    if isinstance(carriers, list):
        out["carriers"] = [
            _renamed(c, CARRIER_RENAMES) if isinstance(c, Mapping) else c for c in carriers
        ]
    summary = out.get("summary")
    if not isinstance(summary, Mapping):
        return out
    summary = _renamed(summary, SUMMARY_RENAMES)
    if "capacity_bound_bps" not in summary and "total_throughput_bps" in summary:
        echo = out.get("request")
        if request is None and echo is not None:
            request = PlanRequest.model_validate(echo)
        if request is None:
            raise LegacyPlanError(
                "summary: a plan from an earlier version without its request; its "
                "capacity_bound_bps cannot be computed (plan the request again)"
            )
        summary = {**_request_figures(summary, request), **summary}
    out["summary"] = summary
    return out
