"""The wire contract (v1): Pydantic models of requests and answers, and their conversion.

Field names carry their SI unit (``_hz``, ``_baud``, ``_bps``, ``_db``, ``_dbhz``, ``_s``); every
field has bounds and a description that reach the OpenAPI document.  Requests forbid unknown
fields.  Checks that involve several list entries (exclusions inside the block and apart, unique
demand ids, pinned centres inside the block) are in :meth:`PlanRequest.consistency_issues` so
that each names its exact path, e.g. ``demands[3].id``.
"""

from __future__ import annotations

import itertools
from datetime import datetime
from enum import StrEnum
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationInfo, field_validator

from service.errors import FieldIssue
from solver import (
    AmplifierModel,
    LimitedBy,
    Modulation,
    Objective,
    ProblemError,
    SolveStatus,
    UnservedReason,
    Window,
    parse_code_rate,
)

MAX_DEMANDS = 2000
MAX_EXCLUSIONS = 200
MAX_BATCH_ITEMS = 500
MAX_ROLLOFFS = 16
MAX_PROFILES = 32
MAX_MODCOD_ROWS = 256
MAX_GAPS = 64
MAX_TIME_LIMIT_S = 300.0
MAX_FREQUENCY_HZ = 1e12
MAX_SYMBOL_RATE_BAUD = 1e10
MAX_RATE_BPS = 1e12
CODE_RATE_PATTERN = r"^(uncoded|[1-9][0-9]{0,3}/[1-9][0-9]{0,3})$"
DEMAND_ID_PATTERN = r"^[A-Za-z0-9_.:-]{1,64}$"
PRINTABLE_PATTERN = r"^[^\x00-\x1f\x7f]*$"
"""Free text without control characters (a NUL cannot be stored in PostgreSQL text)."""


class WireModel(BaseModel):
    """Base of every request model: unknown fields are rejected."""

    model_config = ConfigDict(extra="forbid", frozen=True)


def _check_code_rate(value: str) -> str:
    try:
        parse_code_rate(value)
    except ProblemError as exc:
        raise ValueError(exc.message) from exc
    return value


def _stop_after_start(value: float, info: ValidationInfo) -> float:
    start = info.data.get("start_hz")
    if start is not None and value <= start:
        raise ValueError(f"stop_hz={value} must be greater than start_hz={start}")
    return value


ONE_LINK_QUALITY: dict[str, Any] = {
    "oneOf": [
        {"required": [name], "properties": {name: {"type": "number"}}}
        for name in ("cn0_dbhz", "esn0_db")
    ]
}
"""The schema's form of :func:`_exactly_one_link`: a number in exactly one of the two."""


def _exactly_one_link(value: float | None, info: ValidationInfo) -> float | None:
    has_cn0 = info.data.get("cn0_dbhz") is not None
    if has_cn0 == (value is not None):
        raise ValueError("give exactly one of cn0_dbhz (power-limited link) or esn0_db")
    return value


ModcodSetName = Literal["standard", "dvb-s2", "dvb-s2x", "nr-64qam", "nr-256qam", "full"]
"""The named MODCOD sets (:data:`solver.MODCOD_SET_NAMES`; a test keeps the two equal)."""

CodeRateText = Annotated[
    str,
    Field(
        pattern=CODE_RATE_PATTERN,
        description="FEC code rate as a fraction '3/4', or 'uncoded'",
        examples=["3/4"],
    ),
]
Cn0 = Annotated[
    float | None,
    Field(None, ge=-50.0, le=200.0, description="carrier-to-noise-density ratio C/N0 (dB-Hz)"),
]
Esn0 = Annotated[
    float | None,
    Field(
        None,
        ge=-30.0,
        le=80.0,
        validate_default=True,
        description="Es/N0 (dB) of a link whose Es/N0 does not depend on the symbol rate",
    ),
]


class ExclusionIn(WireModel):
    """A part of the block no carrier may use."""

    start_hz: float = Field(ge=0, le=MAX_FREQUENCY_HZ, description="lower edge (Hz)")
    stop_hz: float = Field(gt=0, le=MAX_FREQUENCY_HZ, description="upper edge (Hz)")
    note: str = Field(
        "", max_length=200, pattern=PRINTABLE_PATTERN, description="why this part is excluded"
    )

    _stop = field_validator("stop_hz")(_stop_after_start)


class BlockIn(WireModel):
    """The licensed block."""

    start_hz: float = Field(ge=0, le=MAX_FREQUENCY_HZ, description="lower edge (Hz)")
    stop_hz: float = Field(gt=0, le=MAX_FREQUENCY_HZ, description="upper edge (Hz)")
    raster_hz: float = Field(1000.0, ge=1, le=1e9, description="carrier placement raster (Hz)")
    exclusions: list[ExclusionIn] = Field(
        default_factory=list, max_length=MAX_EXCLUSIONS, description="parts no carrier may use"
    )
    edge_leakage_limit_db: float | None = Field(
        None,
        ge=0,
        le=150,
        description="leakage limit towards the block edges and exclusions (dB); "
        "null: leakage_limit_db",
    )

    _stop = field_validator("stop_hz")(_stop_after_start)


class AmplifierIn(WireModel):
    """A memoryless power amplifier at an output back-off."""

    model: AmplifierModel = Field(AmplifierModel.RAPP, description="AM/AM (AM/PM) model")
    smoothness: float = Field(2.0, ge=0.1, le=100, description="Rapp smoothness p (dimensionless)")
    output_backoff_db: float = Field(
        6.0, ge=0, le=40, description="saturated over mean output power (dB)"
    )


class TransmitterIn(WireModel):
    """Equipment parameters shared by every carrier."""

    filter_span_symbols: int = Field(
        12, ge=2, le=256, description="truncated pulse-shaping filter span (symbols)"
    )
    rolloffs: list[Annotated[float, Field(gt=0, le=1)]] = Field(
        default_factory=lambda: [0.05, 0.10, 0.15, 0.20, 0.25, 0.35],
        min_length=1,
        max_length=MAX_ROLLOFFS,
        description="roll-off factors the equipment supports (dimensionless, 0 < α ≤ 1)",
    )
    window: Window = Field(Window.NONE, description="window applied to the truncated filter")
    amplifier: AmplifierIn | None = Field(None, description="amplifier model, or null for linear")


class ModcodRowIn(WireModel):
    """One entry of an equipment's own MODCOD table."""

    modulation: Modulation
    code_rate: CodeRateText
    required_esn0_db: float | None = Field(
        None,
        ge=-20,
        le=60,
        description="the data sheet's threshold (dB Es/N0 at its stated block error rate), used "
        "exactly; null: computed from the request's coding",
    )
    spectral_efficiency: float | None = Field(
        None,
        gt=0,
        le=20,
        description="information bits per symbol after framing; null: log2 M·r·(1 − framing)",
    )
    label: str = Field("", max_length=40, pattern=PRINTABLE_PATTERN, description="its own name")

    _rate = field_validator("code_rate")(_check_code_rate)


class EquipmentProfileIn(TransmitterIn):
    """What one kind of radio can be set to (its pulse shaping and amplifier as a
    transmitter's, and more); demands name it in ``profile``."""

    name: str = Field(pattern=DEMAND_ID_PATTERN, description="how demands refer to it")
    modcod_set: ModcodSetName = Field(
        "standard", description="named MODCOD set, used when `modcods` is empty"
    )
    modcods: list[ModcodRowIn] = Field(
        default_factory=list, max_length=MAX_MODCOD_ROWS, description="the equipment's own table"
    )
    symbol_rate_min_baud: float = Field(0.0, ge=0, le=MAX_SYMBOL_RATE_BAUD, description="(baud)")
    symbol_rate_max_baud: float = Field(
        MAX_SYMBOL_RATE_BAUD, gt=0, le=MAX_SYMBOL_RATE_BAUD, description="(baud)"
    )
    symbol_rate_step_baud: float = Field(
        0.0, ge=0, le=1e9, description="symbol rates are multiples of it (baud); 0: any rate"
    )
    tx_evm_pct: float = Field(0.0, ge=0, lt=100, description="transmitter EVM floor (% rms)")
    rx_evm_pct: float = Field(0.0, ge=0, lt=100, description="receiver EVM floor (% rms)")
    implementation_loss_db: float = Field(
        1.0, ge=0, le=20, description="added to every computed threshold (dB)"
    )
    output_backoffs_db: list[Annotated[float, Field(gt=0, le=30)]] = Field(
        default_factory=list,
        max_length=MAX_ROLLOFFS,
        description="output back-offs the optimiser may choose per carrier (dB); empty: the "
        "amplifier's own",
    )
    reference_backoff_db: float | None = Field(
        None,
        gt=0,
        le=30,
        description="back-off at which demands state C/N0, Es/N0 and level (dB); null: the "
        "amplifier's",
    )
    amplifier_distortion: bool = Field(
        True, description="count the amplifier's in-band distortion in the EVM floor"
    )


class CodingIn(WireModel):
    """Forward-error-correction assumptions for the coded thresholds."""

    block_length_bits: int = Field(16200, ge=64, le=1_000_000, description="code word n (bits)")
    target_block_error_rate: float = Field(
        1e-5, gt=0, lt=0.5, description="code-word error probability"
    )
    implementation_loss_db: float = Field(
        1.0, ge=0, le=20, description="added to every threshold (dB)"
    )
    framing_overhead: float = Field(
        0.02, ge=0, lt=0.5, description="fraction of symbols spent on headers and pilots"
    )
    target_bit_error_rate: float = Field(
        1e-6, gt=0, lt=0.5, description="bit error rate for uncoded entries"
    )


class CurrentSettingIn(WireModel):
    """How a demand is served today (for a replan)."""

    center_hz: float = Field(ge=0, le=MAX_FREQUENCY_HZ, description="centre frequency (Hz)")
    symbol_rate_baud: float = Field(gt=0, le=MAX_SYMBOL_RATE_BAUD, description="(baud)")
    rolloff: float = Field(gt=0, le=1, description="roll-off factor")
    modulation: Modulation
    code_rate: CodeRateText
    output_backoff_db: float | None = Field(
        None, gt=0, le=30, description="amplifier back-off it runs at (dB); null: the reference"
    )

    _rate = field_validator("code_rate")(_check_code_rate)


class DemandIn(WireModel):
    """One user's need for capacity."""

    model_config = ConfigDict(json_schema_extra=ONE_LINK_QUALITY)

    id: str = Field(pattern=DEMAND_ID_PATTERN, description="unique demand id")
    min_rate_bps: float = Field(ge=1, le=MAX_RATE_BPS, description="least useful rate (bit/s)")
    target_rate_bps: float = Field(ge=1, le=MAX_RATE_BPS, description="wanted rate (bit/s)")
    priority: int = Field(1, ge=1, le=1000, description="higher is served first")
    cn0_dbhz: Cn0 = None
    esn0_db: Esn0 = None
    margin_db: float = Field(3.0, ge=0, le=40, description="link margin to keep (dB)")
    modulations: list[Modulation] = Field(
        default_factory=list, max_length=len(Modulation), description="allowed; empty: all"
    )
    relative_level_db: float = Field(
        0.0, ge=-60, le=60, description="PSD level relative to the other carriers (dB)"
    )
    pinned_center_hz: float | None = Field(
        None, ge=0, le=MAX_FREQUENCY_HZ, description="fixed centre frequency (Hz)"
    )
    current: CurrentSettingIn | None = Field(None, description="today's setting, for a replan")
    profile: str = Field(
        "", max_length=64, description="equipment profile's name; empty: the transmitter's"
    )

    @field_validator("target_rate_bps")
    @classmethod
    def _target_at_least_min(cls, value: float, info: ValidationInfo) -> float:
        least = info.data.get("min_rate_bps")
        if least is not None and value < least:
            raise ValueError(f"target_rate_bps={value} must be ≥ min_rate_bps={least}")
        return value

    _link = field_validator("esn0_db")(_exactly_one_link)


class PlanRequest(WireModel):
    """A planning request: the block, the equipment, the coding assumptions and the demands.

    Work-size limit: the solver weighs, for each demand, its modulations (all ten when it
    lists none) × the catalogue's 12 code-rate entries × the transmitter's roll-offs, and under
    ``max_margin`` each of those again at every width of a 1 % grid between ``min_rate_bps``
    and ``target_rate_bps``.  A request whose sum over its demands exceeds the service's limit
    (``BANDWRIGHT_MAX_WORK_CONFIGURATIONS``, 2,000,000 by default) is refused with a 422 whose
    ``errors`` name the fields that drive the figure (``demands``, ``transmitter.rolloffs``,
    ``demands[k].modulations``, ``demands[k].target_rate_bps``) with the figures.
    """

    name: str = Field(
        "plan",
        min_length=1,
        max_length=200,
        pattern=PRINTABLE_PATTERN,
        description="label of the plan (no control characters)",
    )
    block: BlockIn
    leakage_limit_db: float = Field(
        30.0, ge=0, le=150, description="least leakage ratio between neighbours (dB)"
    )
    transmitter: TransmitterIn = Field(default_factory=TransmitterIn)
    coding: CodingIn = Field(default_factory=CodingIn)
    profiles: list[EquipmentProfileIn] = Field(
        default_factory=list, max_length=MAX_PROFILES, description="equipment profiles"
    )
    demands: list[DemandIn] = Field(min_length=1, max_length=MAX_DEMANDS)
    objective: Objective = Field(Objective.MAX_THROUGHPUT, description="what to optimise")
    retune_penalty: float = Field(
        1.0, ge=0, le=1e6, description="weight against moving a carrier from its current setting"
    )
    previous_plan_id: str | None = Field(
        None, max_length=64, description="stored plan this replans; fills `current` settings"
    )
    time_limit_s: float = Field(
        10.0, gt=0, le=MAX_TIME_LIMIT_S, description="solver time limit (s)"
    )
    seed: int = Field(1, ge=0, le=2**31 - 1, description="solver random seed")

    def consistency_issues(self) -> list[FieldIssue]:
        """Checks across list entries, each naming its exact field path."""
        issues = _exclusion_issues(self.block)
        names: set[str] = set()
        for k, profile in enumerate(self.profiles):
            if profile.name in names:
                issues.append(
                    FieldIssue(f"profiles[{k}].name", f"duplicate profile {profile.name!r}")
                )
            names.add(profile.name)
        seen: set[str] = set()
        for k, demand in enumerate(self.demands):
            if demand.id in seen:
                issues.append(FieldIssue(f"demands[{k}].id", f"duplicate demand id {demand.id!r}"))
            seen.add(demand.id)
            if demand.profile and demand.profile not in names:
                known = ", ".join(sorted(names)) or "none"
                issues.append(
                    FieldIssue(
                        f"demands[{k}].profile",
                        f"{demand.profile!r} is not one of the request's profiles ({known})",
                    )
                )
            pinned = demand.pinned_center_hz
            if pinned is not None and not self.block.start_hz < pinned < self.block.stop_hz:
                issues.append(
                    FieldIssue(
                        f"demands[{k}].pinned_center_hz", f"{pinned} Hz is outside the block"
                    )
                )
        return issues


def _exclusion_issues(block: BlockIn) -> list[FieldIssue]:
    issues = []
    if block.raster_hz > block.stop_hz - block.start_hz:
        issues.append(FieldIssue("block.raster_hz", "raster is wider than the block"))
    for j, x in enumerate(block.exclusions):
        if x.start_hz < block.start_hz or x.stop_hz > block.stop_hz:
            issues.append(
                FieldIssue(
                    f"block.exclusions[{j}]",
                    f"[{x.start_hz}, {x.stop_hz}] Hz is not inside the block",
                )
            )
    order = sorted(range(len(block.exclusions)), key=lambda j: block.exclusions[j].start_hz)
    for a, b in itertools.pairwise(order):
        if block.exclusions[b].start_hz < block.exclusions[a].stop_hz:
            issues.append(FieldIssue(f"block.exclusions[{b}]", f"overlaps block.exclusions[{a}]"))
    return issues


class FieldIssueOut(BaseModel):
    """One invalid input of a problem document."""

    field: str = Field(description="path of the bad field, e.g. demands[3].target_rate_bps")
    message: str


class ProblemDocument(BaseModel):
    """An RFC 9457 problem details document (media type application/problem+json)."""

    type: str = Field(
        description="problem type: a URN urn:bandwright:problem:<slug> (RFC 8141), or "
        "about:blank for a plain HTTP status (RFC 9457 §4.2.1)",
        examples=["urn:bandwright:problem:invalid-request"],
    )
    title: str
    status: int
    detail: str
    instance: str
    errors: list[FieldIssueOut] | None = Field(None, description="one entry per bad field")


# ----------------------------------------------------------------------------- plans (answers)


class LeakageOut(BaseModel):
    """Leakage ratios into the neighbouring measurement bands (dB); null: nothing adjacent."""

    below: float | None
    above: float | None


class CarrierOut(BaseModel):
    """A placed carrier."""

    demand_id: str
    center_hz: float
    lower_edge_hz: float = Field(description="centre − allocated/2 (Hz)")
    upper_edge_hz: float = Field(description="centre + allocated/2 (Hz)")
    symbol_rate_baud: float
    rolloff: float
    modulation: Modulation
    code_rate: str = Field(description="'3/4' or 'uncoded'")
    bits_per_symbol: int
    occupied_bandwidth_hz: float = Field(description="99 % power bandwidth (Hz)")
    allocated_bandwidth_hz: float = Field(description="Rs(1+α) (Hz)")
    guard_below_hz: float
    guard_above_hz: float
    guard_needed_hz: float = Field(description="guard this carrier needs towards carriers (Hz)")
    edge_guard_needed_hz: float = Field(description="guard it needs towards edges (Hz)")
    throughput_bps: float
    esn0_db: float = Field(description="effective Es/N0: thermal noise and EVM floor (dB)")
    required_esn0_db: float
    headroom_db: float = Field(
        description="headroom: Es/N0 − required Es/N0 of its MODCOD (dB), at least its demand's "
        "margin_db (the margin to keep)"
    )
    profile: str = Field("", description="equipment profile; empty: the transmitter's")
    output_backoff_db: float | None = Field(
        None, description="amplifier back-off it runs at (dB); null: linear"
    )
    evm_pct: float = Field(
        0.0, description="EVM floor (% rms): transmitter, amplifier distortion, receiver"
    )
    thermal_esn0_db: float | None = Field(
        None, description="Es/N0 from thermal noise alone (dB); `esn0_db` adds the EVM floor"
    )
    headroom_after_interference_db: float | None = Field(
        description="headroom with the other carriers' interference added to the noise (dB); "
        "null: not computed"
    )
    leakage_ratio_db: LeakageOut
    c_over_i_db: float | None = Field(description="carrier to interference (dB); null: none")
    retuned: bool = Field(description="moved or reconfigured relative to its current setting")
    min_rate_bps: float | None = Field(None, description="its demand's least useful rate (bit/s)")
    target_rate_bps: float | None = Field(None, description="its demand's wanted rate (bit/s)")
    priority: int | None = Field(None, description="its demand's priority (higher first)")
    limited_by: LimitedBy | None = Field(
        None,
        description="below its target: the limit that binds first (unused-room, equipment, "
        "modcod-table, neighbour, spectrum, link, in that order); null: at target",
    )
    also_limited_by: list[LimitedBy] | None = Field(
        None, description="below its target: the other limits that also hold; null: at target"
    )
    spectrum_to_target_hz: float | None = Field(
        None,
        description="extra spectrum beside it (Hz) with which its best configuration reaches "
        "the target and the plan still verifies; null: at target, or no width would do",
    )
    esn0_to_target_db: float | None = Field(
        None,
        description="stated Es/N0 (dB; for a C/N0 link at its current symbol rate) with which "
        "it would reach the target in its current width; null: not the lever",
    )
    symbol_rate_needed_baud: float | None = Field(
        None,
        description="symbol rate (baud) the target needs above its profile's maximum; null: "
        "not an equipment limit",
    )
    limit_detail: str | None = Field(
        None, description="below its target: why, in one line; null: at target"
    )


class UnservedOut(BaseModel):
    """A demand without a carrier."""

    demand_id: str
    reason: UnservedReason
    detail: str


class HandMethodOut(BaseModel):
    """The hand method (roll-off 0.35, 10 % guards, highest MODCOD that closes, first fit by
    priority) run on the same request and checked by the same verifier as the plan."""

    served_demands: int = Field(description="demands the verified hand plan serves")
    throughput_bps: float = Field(description="its total throughput (bit/s)")
    used_bandwidth_hz: float = Field(
        description="its used spectrum, counted as the plan's used_bandwidth_hz (Hz)"
    )
    plan_to_hand_ratio: float | None = Field(
        description="the plan's total_throughput_bps over the hand plan's; null when the hand "
        "plan carries nothing"
    )


SpectrumValueMethod = Literal["relaxation-dual", "relaxation-resolve", "plan-upgrade"]


class SpectrumGainOut(BaseModel):
    """What one change of spectrum is worth: a bound figure and, where computed, an achieved one."""

    freed_hz: float = Field(description="width the change adds to the usable block (Hz)")
    bound_gain_bps: float = Field(
        description="gain of target_capped_bound_bps (ideal carriers, no guards) "
        "(bit/s); 0 when the bound already meets every target, though a plan below the bound "
        "may still gain"
    )
    bound_bps_per_mhz: float | None = Field(
        description="bound gain per MHz freed (bit/s per MHz); null: less than 1 Hz freed"
    )
    bound_method: SpectrumValueMethod = Field(
        description="relaxation-dual: the bound's dual value, exact over the step; "
        "relaxation-resolve: the bound solved again with the width added"
    )
    achieved_gain_bps: float | None = Field(
        None,
        description="target-capped throughput this plan gains with the change by a verified, "
        "warm-started local search (bit/s, never negative); null: not computed",
    )
    achieved_bps_per_mhz: float | None = Field(
        None,
        description="achieved gain per MHz freed (bit/s per MHz); null: not computed, or "
        "less than 1 Hz freed",
    )
    achieved_method: SpectrumValueMethod | None = Field(
        None, description="plan-upgrade when an achieved gain is given"
    )


class ExclusionValueOut(SpectrumGainOut):
    """What removing one exclusion is worth."""

    index: int = Field(description="position of the exclusion in block.exclusions")
    note: str = Field(description="the exclusion's note")


class SpectrumValueOut(BaseModel):
    """The marginal throughput of spectrum: more at each block edge, or an exclusion removed."""

    step_hz: float = Field(description="width added at each edge: 1 MHz on the raster (Hz)")
    lower_edge: SpectrumGainOut = Field(description="the block's start moved down by step_hz")
    upper_edge: SpectrumGainOut = Field(description="the block's stop moved up by step_hz")
    exclusions: list[ExclusionValueOut] = Field(description="each exclusion removed, alone")
    achieved_note: str = Field(
        "", description="why achieved figures are missing or what they start from; empty: none"
    )


class SummaryOut(BaseModel):
    """Totals over the plan, how they compare with the bounds, the requested rates and the
    hand method, and the optimiser's figures."""

    used_bandwidth_hz: float
    free_bandwidth_hz: float
    largest_free_segment_hz: float
    total_throughput_bps: float
    spectral_efficiency_bps_per_hz: float
    capacity_bound_bps: float = Field(
        description="what the block could carry: Shannon–Nyquist bound of the usable block for "
        "these links with their margins, no demand capped (bit/s)"
    )
    target_capped_bound_bps: float = Field(
        description="the most any plan of this request can carry, counting each demand up to "
        "its target: the same bound with each demand capped at its target_rate_bps (bit/s)"
    )
    requested_rate_bps: float = Field(description="Σ of the demands' target_rate_bps (bit/s)")
    efficiency_vs_capacity_bound: float = Field(
        description="total_throughput_bps / capacity_bound_bps (0 when the bound is 0)"
    )
    efficiency_vs_target_capped_bound: float = Field(
        description="total_throughput_bps / target_capped_bound_bps (0 when the bound is 0)"
    )
    fraction_of_requested: float = Field(
        description="total_throughput_bps / requested_rate_bps (0 when nothing is requested)"
    )
    hand_method: HandMethodOut | None = Field(
        None,
        description="the hand method on the same request, verified like the plan; null for a "
        "plan stored before it was reported",
    )
    objective_value: float | None
    best_bound: float | None
    optimality_gap: float | None
    solve_time_s: float
    retune_count: int
    spectrum_value: SpectrumValueOut | None = Field(
        None, description="what more spectrum is worth to this plan; null: not computed"
    )


class SolverOut(BaseModel):
    """Parameters of the optimiser run (for reproducing the plan)."""

    num_workers: int
    seed: int
    solver_version: str
    verification_rounds: int


class PlanOut(BaseModel):
    """A stored, verified frequency plan."""

    id: str | None = Field(
        description="null only for a plan computed offline by the CLI, or a what-if not stored"
    )
    name: str
    created_at: datetime
    parent_id: str | None
    status: SolveStatus
    carriers: list[CarrierOut]
    unserved: list[UnservedOut]
    summary: SummaryOut
    solver: SolverOut
    notices: list[str] = Field(description="cautions that come with every plan")
    request: PlanRequest | None = Field(
        None, description="the request this plan answers, as it was sent (a plan stands alone)"
    )


class PlanListItem(BaseModel):
    """One line of the plan listing."""

    id: str
    name: str
    created_at: datetime
    parent_id: str | None
    status: SolveStatus


class PlanPage(BaseModel):
    """A page of plans, newest first."""

    items: list[PlanListItem]
    total: int
    offset: int
    limit: int


# ----------------------------------------------------------------------------- retunes


class RetuneChange(StrEnum):
    """How a carrier differs from its previous setting."""

    MOVED = "moved"
    RECONFIGURED = "reconfigured"
    MOVED_AND_RECONFIGURED = "moved_and_reconfigured"
    ADDED = "added"
    DROPPED = "dropped"


class SettingOut(BaseModel):
    """A carrier's setting (centre and configuration)."""

    center_hz: float
    symbol_rate_baud: float
    rolloff: float
    modulation: Modulation
    code_rate: str
    output_backoff_db: float | None = Field(
        None, description="amplifier back-off (dB); null: linear or not stated"
    )


class RetuneOut(BaseModel):
    """One carrier that changed relative to its previous setting."""

    demand_id: str
    change: RetuneChange
    shift_hz: float | None = Field(description="new centre − previous centre (Hz)")
    previous: SettingOut | None
    current: SettingOut | None


class RetuneList(BaseModel):
    """Changes of a plan relative to its parent (or, without one, to the request's settings)."""

    plan_id: str
    parent_id: str | None
    retunes: list[RetuneOut]


# ----------------------------------------------------------------------------- evaluate, modcods


class EvaluateRequest(WireModel):
    """One carrier configuration to evaluate."""

    model_config = ConfigDict(json_schema_extra=ONE_LINK_QUALITY)

    symbol_rate_baud: float = Field(gt=0, le=MAX_SYMBOL_RATE_BAUD, description="(baud)")
    rolloff: float = Field(gt=0, le=1, description="roll-off factor α")
    modulation: Modulation
    code_rate: CodeRateText
    filter_span_symbols: int = Field(12, ge=2, le=256, description="filter span (symbols)")
    window: Window = Field(Window.NONE, description="window on the truncated filter")
    amplifier: AmplifierIn | None = Field(None, description="amplifier model, null: linear")
    cn0_dbhz: Cn0 = None
    esn0_db: Esn0 = None
    coding: CodingIn = Field(default_factory=CodingIn)
    margin_db: float = Field(3.0, ge=0, le=40, description="link margin to keep (dB)")
    gaps_hz: list[Annotated[float, Field(ge=0, le=MAX_FREQUENCY_HZ)]] = Field(
        default_factory=list, max_length=MAX_GAPS, description="edge-to-edge gaps (Hz)"
    )
    leakage_limit_db: float | None = Field(
        30.0, ge=0, le=150, description="leakage limit (dB) for the guard; null: no limit"
    )

    _rate = field_validator("code_rate")(_check_code_rate)
    _link = field_validator("esn0_db")(_exactly_one_link)


class LeakageAtGap(BaseModel):
    """Leakage ratio at one gap; null ratio: no measurable leakage."""

    gap_hz: float
    ratio_db: float | None


class EvaluateResponse(BaseModel):
    """Figures of one carrier configuration."""

    occupied_bandwidth_hz: float = Field(description="99 % power bandwidth (Hz)")
    allocated_bandwidth_hz: float = Field(description="Rs(1+α) (Hz)")
    leakage_ratio_db: list[LeakageAtGap]
    guard_needed_hz: float | None = Field(
        description="gap (Hz) beyond which the leakage ratio meets leakage_limit_db; null when "
        "no limit applies (leakage_limit_db null) or the limit is not met within the modelled "
        "reach of the spectrum"
    )
    esn0_db: float
    required_esn0_db: float | None = Field(
        description="(dB); null: this MODCOD cannot reach the target error rate at any Es/N0"
    )
    label: str = Field("", description="the set's own name of the entry (e.g. 'MCS 17')")
    headroom_db: float | None = Field(
        description="headroom: Es/N0 − required Es/N0 (dB); null when required_esn0_db is null"
    )
    link_closes: bool = Field(description="headroom_db ≥ the requested margin_db")
    bits_per_symbol: int
    throughput_bps: float = Field(
        description="Rs·log2(M)·r·(1 − framing overhead) (bit/s) when the link closes; "
        "0 when it does not"
    )


class ModcodOut(BaseModel):
    """One catalogue entry."""

    modulation: Modulation
    code_rate: str
    bits_per_symbol: int
    spectral_efficiency_bps_per_hz: float
    required_esn0_db: float | None = Field(
        description="(dB); null: this MODCOD cannot reach the target error rate at any Es/N0"
    )
    label: str = Field("", description="the set's own name of the entry (e.g. 'MCS 17')")


# ----------------------------------------------------------------------------- jobs, health


class JobState(StrEnum):
    """Life cycle of a background solve."""

    QUEUED = "queued"
    RUNNING = "running"
    DONE = "done"
    FAILED = "failed"
    CANCELLED = "cancelled"


class JobProgress(BaseModel):
    """Latest progress of a running solve."""

    elapsed_s: float
    objective_value: float | None
    best_bound: float | None
    optimality_gap: float | None
    stage: str = Field(
        "searching",
        description="what is being computed; objective, bound and gap are those of the last "
        "verified plan (the figures the plan will report) when stage is 'verified plan'",
    )


class JobOut(BaseModel):
    """A background solve."""

    id: str
    name: str
    state: JobState
    created_at: datetime
    updated_at: datetime
    progress: JobProgress | None
    plan_id: str | None = Field(description="the stored plan once the job is done")
    plan_url: str | None
    error: dict[str, Any] | None = Field(description="problem document when the job failed")
    attempts: int = Field(
        0,
        ge=0,
        description="times a worker started this job (above 1 after a lost worker or a restart; "
        "the job still gives at most one plan)",
    )
    batch_id: str | None = Field(None, description="the batch this job belongs to, if any")


class BatchRequest(WireModel):
    """Many plan or replan requests (one per block or region, say) solved as background jobs."""

    name: str = Field(
        "batch",
        min_length=1,
        max_length=200,
        pattern=PRINTABLE_PATTERN,
        description="label of the batch (no control characters)",
    )
    items: list[PlanRequest] = Field(
        min_length=1,
        max_length=MAX_BATCH_ITEMS,
        description="each a plan request; a replan names its `previous_plan_id`",
    )


class BatchOutcome(StrEnum):
    """How an item ended, or the worst of them, from best to worst."""

    PENDING = "pending"
    SERVED = "served"
    UNSERVED = "unserved"
    INFEASIBLE = "infeasible"
    CANCELLED = "cancelled"
    FAILED = "failed"


class BatchItemOut(BaseModel):
    """One item of a batch: its job and, once done, its plan's outcome."""

    position: int = Field(description="index of the item in the request's `items`")
    name: str
    job_id: str
    job_url: str
    state: JobState
    outcome: BatchOutcome = Field(
        description="served: every demand served; unserved: some not; infeasible: none; "
        "pending while the job is queued or running"
    )
    plan_id: str | None
    plan_url: str | None
    unserved_count: int | None = Field(description="demands the plan leaves unserved")
    error: dict[str, Any] | None = Field(description="problem document when the job failed")


class BatchSummary(BaseModel):
    """Counts by job state, and the worst outcome so far."""

    total: int
    queued: int
    running: int
    done: int
    failed: int
    cancelled: int
    finished: bool = Field(description="every item has ended")
    worst: BatchOutcome = Field(
        description="the worst outcome among ended items (pending while none has ended)"
    )


class BatchOut(BaseModel):
    """A batch of background solves and where each stands."""

    id: str
    name: str
    created_at: datetime
    items: list[BatchItemOut]
    summary: BatchSummary


class HealthOut(BaseModel):
    """Liveness or readiness."""

    status: str
    store: str | None = Field(
        None,
        description="readiness only: ok, unreachable, or outdated (the database answers but its "
        "schema is behind this version: `bandwright db upgrade` brings it up to date)",
    )
    detail: str | None = Field(None, description="why the store is not ready, and what to do")
