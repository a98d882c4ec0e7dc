"""Domain objects shared by every part of the solver.

All quantities are SI and carry their unit in the name: ``_hz``, ``_baud``, ``_bps``, ``_db``,
``_dbhz``, ``_s``.  Every class is a frozen dataclass, so a problem or a plan can be hashed,
cached and compared.  Validation of user input happens at the edge (the service's schemas and
:func:`validate_problem`); the dataclasses themselves only hold values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import StrEnum
from fractions import Fraction

from solver.spectrum_figures import SpectrumValue

__all__ = [
    "Amplifier",
    "AmplifierModel",
    "Block",
    "Carrier",
    "CarrierConfig",
    "Coding",
    "CurrentSetting",
    "Demand",
    "EquipmentProfile",
    "Exclusion",
    "ModcodRow",
    "Modulation",
    "Objective",
    "Plan",
    "PlanSummary",
    "Problem",
    "ProblemError",
    "ProgressEvent",
    "SolveStats",
    "SolveStatus",
    "Transmitter",
    "Unserved",
    "UnservedReason",
    "Window",
    "format_code_rate",
    "parse_code_rate",
]


class ProblemError(ValueError):
    """A problem description is not valid; ``field`` names the offending input."""

    def __init__(self, field_name: str, message: str) -> None:
        super().__init__(f"{field_name}: {message}")
        self.field = field_name
        self.message = message


class SolveCancelledError(Exception):
    """A solve was cancelled before it had any plan to return (while its spectra and
    candidates were being built)."""


class Modulation(StrEnum):
    """Modulation formats of the catalogue (Gray labelled, unit mean symbol energy)."""

    BPSK = "BPSK"
    QPSK = "QPSK"
    PSK8 = "8PSK"
    APSK16 = "16APSK"
    APSK32 = "32APSK"
    QAM16 = "16QAM"
    QAM64 = "64QAM"
    QAM256 = "256QAM"
    PAM4 = "4PAM"
    PAM8 = "8PAM"


class AmplifierModel(StrEnum):
    """Memoryless power-amplifier models."""

    RAPP = "rapp"
    SALEH = "saleh"


class Window(StrEnum):
    """Windows that may be applied to the truncated shaping filter."""

    NONE = "none"
    HANN = "hann"
    HAMMING = "hamming"
    BLACKMAN = "blackman"
    KAISER = "kaiser"


class Objective(StrEnum):
    """What the packer optimises."""

    MAX_THROUGHPUT = "max_throughput"
    MIN_BANDWIDTH = "min_bandwidth"
    MAX_MARGIN = "max_margin"


class SolveStatus(StrEnum):
    """Outcome of a solve, as the plan reports it."""

    OPTIMAL = "optimal"
    FEASIBLE = "feasible"
    INFEASIBLE = "infeasible"


class UnservedReason(StrEnum):
    """Why a demand got no carrier."""

    NO_LINK = "no_link"
    NO_SPECTRUM = "no_spectrum"
    NOT_ADMITTED = "not_admitted"


CodeRate = Fraction | None
"""A forward-error-correction code rate; ``None`` means uncoded."""


def parse_code_rate(text: str) -> CodeRate:
    """Parse ``"3/4"`` or ``"uncoded"`` into a code rate.

    Examples
    --------
    >>> parse_code_rate("3/4")
    Fraction(3, 4)
    >>> parse_code_rate("uncoded") is None
    True
    """
    cleaned = text.strip().lower()
    if cleaned in {"uncoded", "none", "1", "1/1"}:
        return None
    try:
        rate = Fraction(cleaned)
    except (ValueError, ZeroDivisionError) as exc:
        raise ProblemError(
            "code_rate", f"{text!r} is not a fraction like '3/4' or 'uncoded'"
        ) from exc
    if not 0 < rate < 1:
        raise ProblemError("code_rate", f"{text!r} must lie strictly between 0 and 1")
    return rate


def format_code_rate(rate: CodeRate) -> str:
    """Format a code rate for the wire: ``"3/4"`` or ``"uncoded"``.

    >>> format_code_rate(Fraction(9, 10))
    '9/10'
    """
    return "uncoded" if rate is None else f"{rate.numerator}/{rate.denominator}"


@dataclass(frozen=True)
class Amplifier:
    """A memoryless amplifier operated at an output back-off.

    ``output_backoff_db`` is the ratio of saturated output power to mean output power.
    ``smoothness`` is Rapp's p (ignored by the Saleh model, which uses its published fit).
    """

    model: AmplifierModel = AmplifierModel.RAPP
    smoothness: float = 2.0
    output_backoff_db: float = 6.0


@dataclass(frozen=True)
class Transmitter:
    """Equipment parameters shared by every carrier of a plan."""

    filter_span_symbols: int = 12
    rolloffs: tuple[float, ...] = (0.05, 0.10, 0.15, 0.20, 0.25, 0.35)
    window: Window = Window.NONE
    amplifier: Amplifier | None = None


@dataclass(frozen=True)
class ModcodRow:
    """One entry of an equipment's own MODCOD table.

    ``required_esn0_db`` is the threshold from the modem's data sheet (dB Es/N0 at the block
    error rate the sheet states), used exactly; ``None`` lets the physics core compute it from
    the request's coding assumptions.  ``spectral_efficiency`` is the information bits per
    symbol after the equipment's own framing; ``None`` means log2 M · r · (1 − framing overhead).
    """

    modulation: Modulation
    code_rate: CodeRate
    required_esn0_db: float | None = None
    spectral_efficiency: float | None = None
    label: str = ""
    ring_ratios: tuple[float, ...] = ()
    """APSK ring-radius ratios for this code rate (empty: the catalogue's geometry)."""


@dataclass(frozen=True)
class EquipmentProfile:
    """What one kind of radio can be set to.

    Attributes
    ----------
    name : str
        How demands refer to it (``Demand.profile``).
    modcod_set : str
        A named MODCOD set (:data:`solver.physics.modcodsets.MODCOD_SET_NAMES`), used when
        ``modcods`` is empty.
    modcods : tuple of ModcodRow
        The equipment's own table; replaces the named set when given.
    symbol_rate_min_baud, symbol_rate_max_baud, symbol_rate_step_baud : float
        The symbol rates the equipment offers: multiples of the step (0: any rate) inside the
        range.
    tx_evm_pct, rx_evm_pct : float
        Error-vector floors (% rms) of the transmitter (before its amplifier) and the receiver.
    implementation_loss_db : float
        Added to every threshold the physics core computes for this equipment.
    rolloffs, filter_span_symbols, window, amplifier
        As in :class:`Transmitter`.
    output_backoffs_db : tuple of float
        Amplifier output back-offs the optimiser may choose from, per carrier (empty: the
        amplifier's own ``output_backoff_db`` only).
    reference_backoff_db : float or None
        The back-off at which demands state their C/N0 or Es/N0 and their relative level
        (``None``: the amplifier's ``output_backoff_db``).
    amplifier_distortion : bool
        Whether the amplifier's in-band distortion joins the error-vector floor (a request that
        names no profile keeps the link model it had before profiles: no).
    """

    name: str
    modcod_set: str = "standard"
    modcods: tuple[ModcodRow, ...] = ()
    symbol_rate_min_baud: float = 0.0
    symbol_rate_max_baud: float = math.inf
    symbol_rate_step_baud: float = 0.0
    tx_evm_pct: float = 0.0
    rx_evm_pct: float = 0.0
    implementation_loss_db: float = 1.0
    rolloffs: tuple[float, ...] = (0.05, 0.10, 0.15, 0.20, 0.25, 0.35)
    filter_span_symbols: int = 12
    window: Window = Window.NONE
    amplifier: Amplifier | None = None
    output_backoffs_db: tuple[float, ...] = ()
    reference_backoff_db: float | None = None
    amplifier_distortion: bool = True


@dataclass(frozen=True)
class Coding:
    """Forward-error-correction assumptions used for the coded thresholds.

    ``block_length_bits`` is the code word length n (bits), ``target_block_error_rate`` the
    code-word error probability, ``implementation_loss_db`` is added to every threshold,
    ``framing_overhead`` is the fraction of symbols spent on headers and pilots, and
    ``target_bit_error_rate`` applies to uncoded entries.
    """

    block_length_bits: int = 16200
    target_block_error_rate: float = 1e-5
    implementation_loss_db: float = 1.0
    framing_overhead: float = 0.02
    target_bit_error_rate: float = 1e-6


@dataclass(frozen=True)
class Exclusion:
    """A part of the block that no carrier may use (for example a protected service)."""

    start_hz: float
    stop_hz: float
    note: str = ""


@dataclass(frozen=True)
class Block:
    """The licensed spectrum block.

    Carriers are placed on a raster of ``raster_hz`` from ``start_hz``.  ``edge_leakage_limit_db``
    is the leakage limit towards the block edges and exclusions; ``None`` means the plan's
    ``leakage_limit_db`` applies there too.
    """

    start_hz: float
    stop_hz: float
    raster_hz: float = 1_000.0
    exclusions: tuple[Exclusion, ...] = ()
    edge_leakage_limit_db: float | None = None

    @property
    def width_hz(self) -> float:
        return self.stop_hz - self.start_hz

    @property
    def usable_width_hz(self) -> float:
        """Width less the exclusions (they are validated not to overlap)."""
        return self.width_hz - sum(x.stop_hz - x.start_hz for x in self.exclusions)


@dataclass(frozen=True)
class CurrentSetting:
    """How a demand is served today (for a replan)."""

    center_hz: float
    symbol_rate_baud: float
    rolloff: float
    modulation: Modulation
    code_rate: CodeRate
    output_backoff_db: float | None = None
    """The amplifier back-off it runs at (None: the profile's reference back-off)."""


@dataclass(frozen=True)
class Demand:
    """One user's need.

    Exactly one of ``cn0_dbhz`` (a power-limited link: Es/N0 falls as the symbol rate rises)
    and ``esn0_db`` (a link whose Es/N0 is fixed) is given.  ``relative_level_db`` is the
    carrier's power spectral density level relative to the others, used for interference.
    ``modulations`` restricts the catalogue (empty: every modulation).
    """

    id: str
    min_rate_bps: float
    target_rate_bps: float
    priority: int = 1
    cn0_dbhz: float | None = None
    esn0_db: float | None = None
    margin_db: float = 3.0
    modulations: tuple[Modulation, ...] = ()
    relative_level_db: float = 0.0
    pinned_center_hz: float | None = None
    current: CurrentSetting | None = None
    profile: str = ""
    """The equipment profile's name (empty: the request's transmitter and coding)."""


@dataclass(frozen=True)
class Problem:
    """A complete planning request.

    ``retune_penalty`` is what moving one carrier costs in a replan, as a fraction of the
    objective once admission is settled (0.02: a move must gain 2 %).
    """

    block: Block
    demands: tuple[Demand, ...]
    name: str = "plan"
    leakage_limit_db: float = 30.0
    transmitter: Transmitter = field(default_factory=Transmitter)
    coding: Coding = field(default_factory=Coding)
    objective: Objective = Objective.MAX_THROUGHPUT
    retune_penalty: float = 0.02
    time_limit_s: float = 10.0
    num_workers: int = 2
    seed: int = 1
    profiles: tuple[EquipmentProfile, ...] = ()

    @property
    def edge_limit_db(self) -> float:
        limit = self.block.edge_leakage_limit_db
        return self.leakage_limit_db if limit is None else limit


@dataclass(frozen=True)
class CarrierConfig:
    """One feasible way to serve a demand, before placement."""

    demand_id: str
    modulation: Modulation
    code_rate: CodeRate
    rolloff: float
    symbol_rate_baud: float
    bits_per_symbol: int
    allocated_bandwidth_hz: float
    occupied_bandwidth_hz: float
    guard_hz: float
    edge_guard_hz: float
    throughput_bps: float
    esn0_db: float
    """Effective Es/N0 (dB): thermal noise and the error-vector floor together."""
    required_esn0_db: float
    profile: str = ""
    output_backoff_db: float | None = None
    """The amplifier back-off it runs at (None: linear transmitter)."""
    evm_pct: float = 0.0
    """Error-vector floor (% rms): transmitter, amplifier distortion and receiver together."""
    thermal_esn0_db: float | None = None
    """Es/N0 (dB) from thermal noise alone (None: equal to ``esn0_db``, no error floor)."""

    @property
    def margin_db(self) -> float:
        return self.esn0_db - self.required_esn0_db


@dataclass(frozen=True)
class Carrier:
    """A placed carrier of a finished plan."""

    config: CarrierConfig
    center_hz: float
    guard_below_hz: float
    guard_above_hz: float
    leakage_ratio_below_db: float = math.inf
    leakage_ratio_above_db: float = math.inf
    c_over_i_db: float = math.inf
    margin_after_interference_db: float = math.nan
    retuned: bool = False

    @property
    def demand_id(self) -> str:
        return self.config.demand_id

    @property
    def lower_edge_hz(self) -> float:
        return self.center_hz - self.config.allocated_bandwidth_hz / 2

    @property
    def upper_edge_hz(self) -> float:
        return self.center_hz + self.config.allocated_bandwidth_hz / 2


@dataclass(frozen=True)
class Unserved:
    """A demand the plan does not serve, and why, in words."""

    demand_id: str
    reason: UnservedReason
    detail: str


@dataclass(frozen=True)
class SolveStats:
    """What the optimiser reports about its own run."""

    status: SolveStatus
    objective_value: float
    best_bound: float
    optimality_gap: float
    solve_time_s: float
    num_workers: int
    seed: int
    solver_version: str
    verification_rounds: int = 1
    search_time_s: float = 0.0
    """CP-SAT's own time in the final round (``solve_time_s`` covers the whole pipeline)."""


@dataclass(frozen=True)
class HandComparison:
    """The hand method (:func:`solver.rules.rule_of_thumb_plan`) run on the plan's own request
    and checked by the same verifier: what it serves and carries, for comparison."""

    served_demands: int
    """Demands the hand plan serves after verification."""
    throughput_bps: float
    """Its total throughput, bit/s."""
    used_bandwidth_hz: float
    """Its used spectrum, Hz, counted as :attr:`PlanSummary.used_bandwidth_hz` counts it."""
    plan_to_hand_ratio: float | None
    """The plan's total throughput over the hand plan's; None when the hand plan carries
    nothing."""


@dataclass(frozen=True)
class PlanSummary:
    """Totals over a plan, and how they compare with the bounds and the hand method."""

    used_bandwidth_hz: float
    free_bandwidth_hz: float
    largest_free_segment_hz: float
    total_throughput_bps: float
    spectral_efficiency_bps_per_hz: float
    capacity_bound_bps: float
    """Shannon–Nyquist bound of the usable block with the demands' margins, no caps (bit/s):
    what the block could carry for these links."""
    target_capped_bound_bps: float
    """The same with each demand capped at its target (bit/s): the most any plan of this
    request can carry, counting each demand up to its target (a carrier may carry a little more
    than its target, so efficiency_vs_target_capped_bound may pass 1 slightly)."""
    requested_rate_bps: float
    """Σ of the demands' target rates (bit/s)."""
    efficiency_vs_capacity_bound: float
    """total_throughput_bps / capacity_bound_bps (0 when the bound is 0)."""
    efficiency_vs_target_capped_bound: float
    """total_throughput_bps / target_capped_bound_bps (0 when the bound is 0)."""
    fraction_of_requested: float
    """total_throughput_bps / requested_rate_bps (0 when nothing is requested)."""
    retune_count: int
    hand_method: HandComparison | None = None
    """The hand method on the same request; None for the hand plan itself."""
    spectrum_value: SpectrumValue | None = None
    """What more spectrum is worth (:mod:`solver.spectrum_value`); None when not computed."""


@dataclass(frozen=True)
class Plan:
    """A verified frequency plan."""

    name: str
    status: SolveStatus
    carriers: tuple[Carrier, ...]
    unserved: tuple[Unserved, ...]
    summary: PlanSummary
    stats: SolveStats
    notices: tuple[str, ...]


@dataclass(frozen=True)
class ProgressEvent:
    """A progress report from a running solve (for progress lines and job records)."""

    elapsed_s: float
    objective_value: float
    best_bound: float
    optimality_gap: float
    stage: str = "searching"
    """What is being computed; the figures are a verified plan's only at ``"verified plan"``
    (the same figures the plan then reports), NaN while none is known."""
