"""The wire form of a dry run: what ``POST /v1/plans:validate`` and ``bandwright check`` report.

A request that passes every check ``POST /v1/plans`` makes before it solves is described by its
size (demands, profiles, exclusions, usable width) and by the work the solver would do: the
carrier configurations it would weigh, in total and per demand (the work-size bound of
:func:`solver.configuration_bound`, the figure the service's work-size limit applies to).
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, Field

from solver import Objective

__all__ = ["CheckOut", "DemandWorkOut"]


class DemandWorkOut(BaseModel):
    """The configurations the solver would weigh for one demand, by factor (an upper bound)."""

    demand_id: str
    profile: str = Field(description="equipment profile; empty: the request's transmitter")
    modulations: int = Field(description="modulations of its MODCOD table that it allows")
    code_rates: int = Field(description="most table entries of one of those modulations")
    rolloffs: int = Field(description="roll-off factors of its profile")
    backoffs: int = Field(description="amplifier back-offs the optimiser may choose (1: fixed)")
    width_steps: int = Field(
        description="widths per (entry, roll-off, back-off): 1 for max_throughput and "
        "min_bandwidth, the 1 % width grid under max_margin"
    )
    configurations: int = Field(description="the product of the factors above")


class CheckOut(BaseModel):
    """A valid request's size and the solver's work, without solving it."""

    valid: Literal[True] = Field(True, description="always true: an invalid request is a 422")
    name: str
    objective: Objective
    demands: int = Field(description="demands in the request")
    profiles: int = Field(description="equipment profiles in the request")
    exclusions: int = Field(description="exclusions in the block")
    block_width_hz: float = Field(description="stop_hz − start_hz (Hz)")
    usable_width_hz: float = Field(description="the block's width less its exclusions (Hz)")
    candidate_configurations: int = Field(
        description="carrier configurations the solver would weigh, at most (sum over demands)"
    )
    configuration_limit: int = Field(
        description="the service's work-size limit (BANDWRIGHT_MAX_WORK_CONFIGURATIONS)"
    )
    per_demand: list[DemandWorkOut]
    execution: Literal["inline", "job"] = Field(
        description="how POST /v1/plans would run it: inline (the answer waits for the solve)"
    )
    execution_note: str = Field(description="how the service chooses between inline and job")
    time_limit_s: float = Field(description="the solver's time limit for this request (s)")
    warnings: list[str] = Field(
        description="what the checks noticed that does not make the request invalid"
    )
