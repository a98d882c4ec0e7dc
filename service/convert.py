"""Wire ↔ domain: the service's pydantic models and the solver's dataclasses, both ways.

Routes read as schema in → :func:`to_problem` → runtime → :func:`plan_to_wire` out.  A carrier's
setting (centre, symbol rate, roll-off, modulation, code rate) is read from any wire model by one
function, :func:`setting_from_wire`, so a ``current`` block, a stored carrier and a retune entry
give the solver the same thing.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict
from datetime import datetime
from typing import Any, Protocol

from service.errors import InvalidInputError
from service.schemas import (
    AmplifierIn,
    CarrierOut,
    CodingIn,
    DemandIn,
    EquipmentProfileIn,
    ExclusionValueOut,
    HandMethodOut,
    JobProgress,
    LeakageOut,
    PlanOut,
    PlanRequest,
    SolverOut,
    SpectrumGainOut,
    SpectrumValueOut,
    SummaryOut,
    UnservedOut,
)
from solver import (
    Amplifier,
    Block,
    Carrier,
    CarrierConfig,
    Coding,
    CurrentSetting,
    Demand,
    EquipmentProfile,
    Exclusion,
    HandComparison,
    ModcodRow,
    Modulation,
    Plan,
    PlanSummary,
    Problem,
    ProgressEvent,
    Shortfall,
    SolveStats,
    SpectrumGain,
    SpectrumValue,
    Transmitter,
    Unserved,
    format_code_rate,
    parse_code_rate,
)

__all__ = [
    "amplifier_from_wire",
    "carrier_from_wire",
    "carrier_to_wire",
    "coding_from_wire",
    "finite_or_none",
    "plan_from_wire",
    "plan_to_wire",
    "progress_to_wire",
    "setting_from_wire",
    "to_problem",
]


def finite_or_none(value: float | None) -> float | None:
    """The value if it is a finite number, else ``None`` (JSON has no infinity, RFC 8259 §6)."""
    return value if value is not None and math.isfinite(value) else None


def _or_inf(value: float | None) -> float:
    return math.inf if value is None else value


def carrier_to_wire(carrier: Carrier) -> CarrierOut:
    """Convert a domain carrier to its wire form."""
    cfg = carrier.config
    return CarrierOut(
        demand_id=cfg.demand_id,
        center_hz=carrier.center_hz,
        lower_edge_hz=carrier.lower_edge_hz,
        upper_edge_hz=carrier.upper_edge_hz,
        symbol_rate_baud=cfg.symbol_rate_baud,
        rolloff=cfg.rolloff,
        modulation=cfg.modulation,
        code_rate=format_code_rate(cfg.code_rate),
        bits_per_symbol=cfg.bits_per_symbol,
        occupied_bandwidth_hz=cfg.occupied_bandwidth_hz,
        allocated_bandwidth_hz=cfg.allocated_bandwidth_hz,
        guard_below_hz=carrier.guard_below_hz,
        guard_above_hz=carrier.guard_above_hz,
        guard_needed_hz=cfg.guard_hz,
        edge_guard_needed_hz=cfg.edge_guard_hz,
        throughput_bps=cfg.throughput_bps,
        esn0_db=cfg.esn0_db,
        required_esn0_db=cfg.required_esn0_db,
        headroom_db=cfg.margin_db,
        profile=cfg.profile,
        output_backoff_db=cfg.output_backoff_db,
        evm_pct=cfg.evm_pct,
        thermal_esn0_db=cfg.thermal_esn0_db,
        headroom_after_interference_db=finite_or_none(carrier.margin_after_interference_db),
        leakage_ratio_db=LeakageOut(
            below=finite_or_none(carrier.leakage_ratio_below_db),
            above=finite_or_none(carrier.leakage_ratio_above_db),
        ),
        c_over_i_db=finite_or_none(carrier.c_over_i_db),
        retuned=carrier.retuned,
    )


def carrier_from_wire(c: CarrierOut) -> Carrier:
    """Rebuild a domain carrier from its wire form (inverse of :func:`carrier_to_wire`)."""
    config = CarrierConfig(
        demand_id=c.demand_id,
        modulation=c.modulation,
        code_rate=parse_code_rate(c.code_rate),
        rolloff=c.rolloff,
        symbol_rate_baud=c.symbol_rate_baud,
        bits_per_symbol=c.bits_per_symbol,
        allocated_bandwidth_hz=c.allocated_bandwidth_hz,
        occupied_bandwidth_hz=c.occupied_bandwidth_hz,
        guard_hz=c.guard_needed_hz,
        edge_guard_hz=c.edge_guard_needed_hz,
        throughput_bps=c.throughput_bps,
        esn0_db=c.esn0_db,
        required_esn0_db=c.required_esn0_db,
        profile=c.profile,
        output_backoff_db=c.output_backoff_db,
        evm_pct=c.evm_pct,
        thermal_esn0_db=c.thermal_esn0_db,
    )
    nan = math.nan
    after = c.headroom_after_interference_db
    return Carrier(
        config=config,
        center_hz=c.center_hz,
        guard_below_hz=c.guard_below_hz,
        guard_above_hz=c.guard_above_hz,
        leakage_ratio_below_db=_or_inf(c.leakage_ratio_db.below),
        leakage_ratio_above_db=_or_inf(c.leakage_ratio_db.above),
        c_over_i_db=_or_inf(c.c_over_i_db),
        margin_after_interference_db=nan if after is None else after,
        retuned=c.retuned,
    )


def plan_to_wire(
    plan: Plan,
    *,
    plan_id: str | None,
    created_at: datetime,
    parent_id: str | None,
    request: PlanRequest | None = None,
    shortfalls: Mapping[str, Shortfall] | None = None,
) -> PlanOut:
    """Convert a solved plan to its wire form, adding the identity the store gives it, and,
    given its ``request``, an echo of it and each carrier's demand figures (rates, priority);
    given ``shortfalls`` (:func:`solver.explain_shortfalls`), each carrier below its target with
    what binds it and what would lift it."""
    s, st = plan.summary, plan.stats
    summary = SummaryOut(
        used_bandwidth_hz=s.used_bandwidth_hz,
        free_bandwidth_hz=s.free_bandwidth_hz,
        largest_free_segment_hz=s.largest_free_segment_hz,
        total_throughput_bps=s.total_throughput_bps,
        spectral_efficiency_bps_per_hz=s.spectral_efficiency_bps_per_hz,
        capacity_bound_bps=s.capacity_bound_bps,
        target_capped_bound_bps=s.target_capped_bound_bps,
        requested_rate_bps=s.requested_rate_bps,
        efficiency_vs_capacity_bound=s.efficiency_vs_capacity_bound,
        efficiency_vs_target_capped_bound=s.efficiency_vs_target_capped_bound,
        fraction_of_requested=s.fraction_of_requested,
        hand_method=None if s.hand_method is None else HandMethodOut(**asdict(s.hand_method)),
        objective_value=finite_or_none(st.objective_value),
        best_bound=finite_or_none(st.best_bound),
        optimality_gap=finite_or_none(st.optimality_gap),
        solve_time_s=st.solve_time_s,
        retune_count=s.retune_count,
        spectrum_value=_value_to_wire(s.spectrum_value),
    )
    solver = SolverOut(
        num_workers=st.num_workers,
        seed=st.seed,
        solver_version=st.solver_version,
        verification_rounds=st.verification_rounds,
    )
    return PlanOut(
        id=plan_id,
        name=plan.name,
        created_at=created_at,
        parent_id=parent_id,
        status=plan.status,
        carriers=_with_shortfalls(
            _with_demands([carrier_to_wire(c) for c in plan.carriers], request), shortfalls or {}
        ),
        unserved=[
            UnservedOut(demand_id=u.demand_id, reason=u.reason, detail=u.detail)
            for u in plan.unserved
        ],
        summary=summary,
        solver=solver,
        notices=list(plan.notices),
        request=request,
    )


def _gain_fields(g: SpectrumGain) -> dict[str, Any]:
    return {
        "freed_hz": g.freed_hz,
        "bound_gain_bps": g.bound_gain_bps,
        "bound_bps_per_mhz": g.bound_bps_per_mhz,
        "bound_method": g.bound_method.value,
        "achieved_gain_bps": g.achieved_gain_bps,
        "achieved_bps_per_mhz": g.achieved_bps_per_mhz,
        "achieved_method": None if g.achieved_method is None else g.achieved_method.value,
    }


def _value_to_wire(v: SpectrumValue | None) -> SpectrumValueOut | None:
    """The plan's spectrum value on the wire (None when the plan has none)."""
    if v is None:
        return None
    return SpectrumValueOut(
        step_hz=v.step_hz,
        lower_edge=SpectrumGainOut(**_gain_fields(v.lower_edge)),
        upper_edge=SpectrumGainOut(**_gain_fields(v.upper_edge)),
        exclusions=[
            ExclusionValueOut(index=x.index, note=x.note, **_gain_fields(x.gain))
            for x in v.exclusions
        ],
        achieved_note=v.achieved_note,
    )


def _with_demands(carriers: list[CarrierOut], request: PlanRequest | None) -> list[CarrierOut]:
    """Each carrier with its demand's minimum and target rates and priority (as they were)."""
    if request is None:
        return carriers
    demands = {d.id: d for d in request.demands}
    return [
        c.model_copy(
            update={
                "min_rate_bps": demands[c.demand_id].min_rate_bps,
                "target_rate_bps": demands[c.demand_id].target_rate_bps,
                "priority": demands[c.demand_id].priority,
            }
        )
        if c.demand_id in demands
        else c
        for c in carriers
    ]


def _with_shortfalls(
    carriers: list[CarrierOut], shortfalls: Mapping[str, Shortfall]
) -> list[CarrierOut]:
    """Each carrier below its target with its limit, its lifts and the line in words."""
    out = []
    for c in carriers:
        found = shortfalls.get(c.demand_id)
        if found is not None:
            c = c.model_copy(
                update={
                    "limited_by": found.limited_by,
                    "also_limited_by": list(found.also),
                    "spectrum_to_target_hz": finite_or_none(found.spectrum_to_target_hz),
                    "esn0_to_target_db": finite_or_none(found.esn0_to_target_db),
                    "symbol_rate_needed_baud": finite_or_none(found.symbol_rate_needed_baud),
                    "limit_detail": found.detail,
                }
            )
        out.append(c)
    return out


def plan_from_wire(out: PlanOut) -> Plan:
    """Rebuild the domain plan from its wire form (for pictures and replans)."""
    s, sv = out.summary, out.solver
    summary = PlanSummary(
        used_bandwidth_hz=s.used_bandwidth_hz,
        free_bandwidth_hz=s.free_bandwidth_hz,
        largest_free_segment_hz=s.largest_free_segment_hz,
        total_throughput_bps=s.total_throughput_bps,
        spectral_efficiency_bps_per_hz=s.spectral_efficiency_bps_per_hz,
        capacity_bound_bps=s.capacity_bound_bps,
        target_capped_bound_bps=s.target_capped_bound_bps,
        requested_rate_bps=s.requested_rate_bps,
        efficiency_vs_capacity_bound=s.efficiency_vs_capacity_bound,
        efficiency_vs_target_capped_bound=s.efficiency_vs_target_capped_bound,
        fraction_of_requested=s.fraction_of_requested,
        retune_count=s.retune_count,
        hand_method=None if s.hand_method is None else HandComparison(**s.hand_method.model_dump()),
    )
    stats = SolveStats(
        status=out.status,
        objective_value=math.nan if s.objective_value is None else s.objective_value,
        best_bound=math.nan if s.best_bound is None else s.best_bound,
        optimality_gap=math.nan if s.optimality_gap is None else s.optimality_gap,
        solve_time_s=s.solve_time_s,
        num_workers=sv.num_workers,
        seed=sv.seed,
        solver_version=sv.solver_version,
        verification_rounds=sv.verification_rounds,
    )
    return Plan(
        name=out.name,
        status=out.status,
        carriers=tuple(carrier_from_wire(c) for c in out.carriers),
        unserved=tuple(Unserved(u.demand_id, u.reason, u.detail) for u in out.unserved),
        summary=summary,
        stats=stats,
        notices=tuple(out.notices),
    )


class WireSetting(Protocol):
    """What every wire model that names a carrier setting has (``current``, carriers, retunes)."""

    @property
    def center_hz(self) -> float: ...
    @property
    def symbol_rate_baud(self) -> float: ...
    @property
    def rolloff(self) -> float: ...
    @property
    def modulation(self) -> Modulation: ...
    @property
    def code_rate(self) -> str: ...


def setting_from_wire(setting: WireSetting) -> CurrentSetting:
    """The solver's view of a carrier setting, from any wire model that states one."""
    return CurrentSetting(
        center_hz=setting.center_hz,
        symbol_rate_baud=setting.symbol_rate_baud,
        rolloff=setting.rolloff,
        modulation=setting.modulation,
        code_rate=parse_code_rate(setting.code_rate),
        output_backoff_db=getattr(setting, "output_backoff_db", None),
    )


def _demand(d: DemandIn, previous: dict[str, CarrierOut]) -> Demand:
    wire = d.current if d.current is not None else previous.get(d.id)
    return Demand(
        id=d.id,
        min_rate_bps=d.min_rate_bps,
        target_rate_bps=d.target_rate_bps,
        priority=d.priority,
        cn0_dbhz=d.cn0_dbhz,
        esn0_db=d.esn0_db,
        margin_db=d.margin_db,
        modulations=tuple(d.modulations),
        relative_level_db=d.relative_level_db,
        pinned_center_hz=d.pinned_center_hz,
        current=None if wire is None else setting_from_wire(wire),
        profile=d.profile,
    )


def coding_from_wire(c: CodingIn) -> Coding:
    """Convert the coding assumptions."""
    return Coding(
        block_length_bits=c.block_length_bits,
        target_block_error_rate=c.target_block_error_rate,
        implementation_loss_db=c.implementation_loss_db,
        framing_overhead=c.framing_overhead,
        target_bit_error_rate=c.target_bit_error_rate,
    )


def amplifier_from_wire(a: AmplifierIn | None) -> Amplifier | None:
    """Convert the amplifier model (``None``: linear)."""
    if a is None:
        return None
    return Amplifier(model=a.model, smoothness=a.smoothness, output_backoff_db=a.output_backoff_db)


def to_problem(
    request: PlanRequest, *, previous: PlanOut | None = None, num_workers: int = 1
) -> Problem:
    """Build the solver's :class:`~solver.model.Problem` from a validated request.

    Each demand without a ``current`` setting takes it from the ``previous`` plan's carrier of
    the same demand id.  Raises :class:`~service.errors.InvalidInputError` naming every
    inconsistent field.
    """
    issues = request.consistency_issues()
    if issues:
        raise InvalidInputError(issues)
    carriers = {} if previous is None else {c.demand_id: c for c in previous.carriers}
    b, t = request.block, request.transmitter
    block = Block(
        start_hz=b.start_hz,
        stop_hz=b.stop_hz,
        raster_hz=b.raster_hz,
        exclusions=tuple(Exclusion(x.start_hz, x.stop_hz, x.note) for x in b.exclusions),
        edge_leakage_limit_db=b.edge_leakage_limit_db,
    )
    transmitter = Transmitter(
        filter_span_symbols=t.filter_span_symbols,
        rolloffs=tuple(t.rolloffs),
        window=t.window,
        amplifier=amplifier_from_wire(t.amplifier),
    )
    return Problem(
        block=block,
        demands=tuple(_demand(d, carriers) for d in request.demands),
        name=request.name,
        leakage_limit_db=request.leakage_limit_db,
        transmitter=transmitter,
        coding=coding_from_wire(request.coding),
        objective=request.objective,
        retune_penalty=request.retune_penalty,
        time_limit_s=request.time_limit_s,
        num_workers=num_workers,
        seed=request.seed,
        profiles=tuple(profile_from_wire(p) for p in request.profiles),
    )


def profile_from_wire(p: EquipmentProfileIn) -> EquipmentProfile:
    """Convert one equipment profile."""
    rows = tuple(
        ModcodRow(
            modulation=r.modulation,
            code_rate=parse_code_rate(r.code_rate),
            required_esn0_db=r.required_esn0_db,
            spectral_efficiency=r.spectral_efficiency,
            label=r.label,
        )
        for r in p.modcods
    )
    return EquipmentProfile(
        name=p.name,
        modcod_set=p.modcod_set,
        modcods=rows,
        symbol_rate_min_baud=p.symbol_rate_min_baud,
        symbol_rate_max_baud=p.symbol_rate_max_baud,
        symbol_rate_step_baud=p.symbol_rate_step_baud,
        tx_evm_pct=p.tx_evm_pct,
        rx_evm_pct=p.rx_evm_pct,
        implementation_loss_db=p.implementation_loss_db,
        rolloffs=tuple(p.rolloffs),
        filter_span_symbols=p.filter_span_symbols,
        window=p.window,
        amplifier=amplifier_from_wire(p.amplifier),
        output_backoffs_db=tuple(p.output_backoffs_db),
        reference_backoff_db=p.reference_backoff_db,
        amplifier_distortion=p.amplifier_distortion,
    )


def progress_to_wire(event: ProgressEvent) -> JobProgress:
    """A solver progress event as a job shows it."""
    return JobProgress(
        elapsed_s=event.elapsed_s,
        objective_value=finite_or_none(event.objective_value),
        best_bound=finite_or_none(event.best_bound),
        optimality_gap=finite_or_none(event.optimality_gap),
        stage=event.stage,
    )
