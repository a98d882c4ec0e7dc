"""The wire form of a what-if: small changes to a stored plan's request, the changed plan, and
how it differs from the stored one (``POST /v1/plans/{plan_id}/what-if``)."""

from __future__ import annotations

from enum import StrEnum
from typing import Annotated

from pydantic import BaseModel, Field, model_validator

from service.schemas import (
    DEMAND_ID_PATTERN,
    MAX_DEMANDS,
    MAX_EXCLUSIONS,
    MAX_FREQUENCY_HZ,
    MAX_RATE_BPS,
    MAX_TIME_LIMIT_S,
    DemandIn,
    PlanOut,
    WireModel,
)
from solver import Modulation

__all__ = [
    "BlockEdgesIn",
    "CarrierBriefOut",
    "ChangesIn",
    "DemandChange",
    "DemandDifferenceOut",
    "DifferenceOut",
    "RateChangeIn",
    "WhatIfOut",
    "WhatIfRequest",
]

DemandId = Annotated[str, Field(pattern=DEMAND_ID_PATTERN, description="a demand's id")]


class BlockEdgesIn(WireModel):
    """New edges of the block; a null edge stays where it is."""

    start_hz: float | None = Field(None, ge=0, le=MAX_FREQUENCY_HZ, description="(Hz)")
    stop_hz: float | None = Field(None, gt=0, le=MAX_FREQUENCY_HZ, description="(Hz)")


class RateChangeIn(WireModel):
    """New rates for one demand of the stored request; a null rate stays as it is."""

    demand_id: DemandId
    min_rate_bps: float | None = Field(
        None, ge=1, le=MAX_RATE_BPS, description="least useful rate (bit/s)"
    )
    target_rate_bps: float | None = Field(
        None, ge=1, le=MAX_RATE_BPS, description="wanted rate (bit/s)"
    )

    @model_validator(mode="after")
    def _changes_something(self) -> RateChangeIn:
        if self.min_rate_bps is None and self.target_rate_bps is None:
            raise ValueError("give min_rate_bps, target_rate_bps or both")
        return self


class ChangesIn(WireModel):
    """Changes to the stored plan's request, applied in this order: block edges, exclusions
    removed, demands dropped, rates changed, demands added (after the others)."""

    block_edges: BlockEdgesIn | None = Field(None, description="new block edges")
    remove_exclusions: list[Annotated[int, Field(ge=0)]] = Field(
        default_factory=list,
        max_length=MAX_EXCLUSIONS,
        description="indices into the stored request's block.exclusions",
    )
    drop_demands: list[DemandId] = Field(
        default_factory=list, max_length=MAX_DEMANDS, description="ids of demands to drop"
    )
    demand_rates: list[RateChangeIn] = Field(
        default_factory=list, max_length=MAX_DEMANDS, description="new rates of kept demands"
    )
    add_demands: list[DemandIn] = Field(
        default_factory=list, max_length=MAX_DEMANDS, description="new demands"
    )


class WhatIfRequest(WireModel):
    """Changes to try on a stored plan."""

    changes: ChangesIn
    store: bool = Field(
        False, description="store the changed plan (its parent_id: the stored plan); false: not"
    )
    time_limit_s: float | None = Field(
        None, gt=0, le=MAX_TIME_LIMIT_S, description="solver time limit (s); null: the request's"
    )


class DemandChange(StrEnum):
    """How one demand's carrier differs between the stored plan and the changed one."""

    ADDED = "added"
    REMOVED = "removed"
    MOVED = "moved"
    RECONFIGURED = "reconfigured"
    MOVED_AND_RECONFIGURED = "moved_and_reconfigured"
    UNCHANGED = "unchanged"
    UNSERVED = "unserved"


class CarrierBriefOut(BaseModel):
    """A carrier in a few figures."""

    center_hz: float
    allocated_bandwidth_hz: float = Field(description="Rs(1+α) (Hz)")
    modulation: Modulation
    code_rate: str
    throughput_bps: float


class DemandDifferenceOut(BaseModel):
    """One demand of either plan: its carrier before and after."""

    demand_id: str
    change: DemandChange = Field(
        description="added: served only after; removed: served only before; moved, "
        "reconfigured (symbol rate, roll-off, MODCOD or back-off) or both; unchanged; "
        "unserved: in neither plan"
    )
    before: CarrierBriefOut | None
    after: CarrierBriefOut | None
    throughput_change_bps: float = Field(description="after − before (bit/s); none counts 0")
    note: str = Field("", description="dropped by the changes, or why it is unserved after")


class DifferenceOut(BaseModel):
    """The changed plan against the stored plan."""

    total_throughput_before_bps: float
    total_throughput_after_bps: float
    throughput_change_bps: float = Field(description="after − before (bit/s)")
    served_before: int = Field(description="demands with a carrier in the stored plan")
    served_after: int = Field(description="demands with a carrier in the changed plan")
    demands: list[DemandDifferenceOut] = Field(description="every demand of either plan, by id")


class WhatIfOut(BaseModel):
    """The changed plan (its ``request``: the changed request) and how it differs."""

    stored: bool = Field(description="the changed plan was stored (201, Location)")
    plan: PlanOut = Field(description="the changed plan; its id is null when not stored")
    difference: DifferenceOut
