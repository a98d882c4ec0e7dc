"""The solve pipeline: request → problem → solve → stored plan, in-line or as a background job.

* conversions between the wire models of :mod:`service.schemas` and the solver's dataclasses
  (:func:`to_problem`, :func:`plan_to_wire`, :func:`plan_from_wire`);
* :class:`SolveGate` runs synchronous solves in threads under a dedicated
  :class:`anyio.CapacityLimiter`, refusing (503) once running plus waiting solves reach the bound;
* :class:`JobManager` runs background jobs on a thread pool; every job is a stored record, and
  jobs left queued or running by a stopped service are requeued when the next one starts.

CP-SAT releases the GIL while it searches, so threads give real parallelism here.
"""

from __future__ import annotations

import logging
import math
import threading
import time
import uuid
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Protocol, TypeVar

import anyio
import anyio.to_thread
from fastapi import Request

from service.errors import FieldIssue, InvalidInputError, SolverBusyError, problem_document
from service.metrics import Metrics
from service.schemas import (
    AmplifierIn,
    CarrierOut,
    CodingIn,
    DemandIn,
    JobOut,
    JobProgress,
    JobState,
    LeakageOut,
    PlanOut,
    PlanRequest,
    SolverOut,
    SummaryOut,
    UnservedOut,
)
from service.settings import Settings
from service.store import Store, StoreUnavailableError, utc_now
from solver import (
    Amplifier,
    Block,
    Carrier,
    CarrierConfig,
    Coding,
    CurrentSetting,
    Demand,
    Exclusion,
    Plan,
    PlanSummary,
    Problem,
    ProblemError,
    ProgressEvent,
    SolveCancelledError,
    SolveStats,
    Transmitter,
    Unserved,
    format_code_rate,
    parse_code_rate,
    validate_problem,
)

__all__ = [
    "JobManager",
    "PreparedSolve",
    "Runtime",
    "SolveFunction",
    "SolveGate",
    "amplifier_from_wire",
    "coding_from_wire",
    "finite_or_none",
    "get_runtime",
    "new_id",
    "plan_from_wire",
    "plan_to_wire",
    "prepare",
    "run_solve",
    "solve_and_store",
    "store_plan",
    "to_problem",
]

logger = logging.getLogger(__name__)

T = TypeVar("T")


class SolveFunction(Protocol):
    """The signature of :func:`solver.solve`."""

    def __call__(
        self,
        problem: Problem,
        *,
        progress: Callable[[ProgressEvent], None] | None = None,
        cancel: threading.Event | None = None,
    ) -> Plan: ...


def new_id() -> str:
    """A fresh resource id (32 hex digits of a random UUID)."""
    return uuid.uuid4().hex


# ----------------------------------------------------------------------------- conversions


def finite_or_none(value: float) -> float | None:
    return value if math.isfinite(value) else None


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
        margin_db=cfg.margin_db,
        margin_after_interference_db=finite_or_none(carrier.margin_after_interference_db),
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
    )
    nan = math.nan
    after = c.margin_after_interference_db
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
    plan: Plan, *, plan_id: str | None, created_at: datetime, parent_id: str | None
) -> PlanOut:
    """Convert a solved plan to its wire form, adding the identity the store gives it."""
    s, st = plan.summary, plan.stats
    summary = SummaryOut(
        used_bandwidth_hz=s.used_bandwidth_hz,
        free_bandwidth_hz=s.free_bandwidth_hz,
        largest_free_segment_hz=s.largest_free_segment_hz,
        total_throughput_bps=s.total_throughput_bps,
        spectral_efficiency_bps_per_hz=s.spectral_efficiency_bps_per_hz,
        shannon_bound_bps=s.shannon_bound_bps,
        efficiency_vs_bound=s.efficiency_vs_bound,
        objective_value=finite_or_none(st.objective_value),
        best_bound=finite_or_none(st.best_bound),
        optimality_gap=finite_or_none(st.optimality_gap),
        solve_time_s=st.solve_time_s,
        retune_count=s.retune_count,
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
        carriers=[carrier_to_wire(c) for c in plan.carriers],
        unserved=[
            UnservedOut(demand_id=u.demand_id, reason=u.reason, detail=u.detail)
            for u in plan.unserved
        ],
        summary=summary,
        solver=solver,
        notices=list(plan.notices),
    )


def plan_from_wire(out: PlanOut) -> Plan:
    """Rebuild the domain plan from its wire form (for pictures and replans)."""
    s, sv = out.summary, out.solver
    summary = PlanSummary(
        used_bandwidth_hz=s.used_bandwidth_hz,
        free_bandwidth_hz=s.free_bandwidth_hz,
        largest_free_segment_hz=s.largest_free_segment_hz,
        total_throughput_bps=s.total_throughput_bps,
        spectral_efficiency_bps_per_hz=s.spectral_efficiency_bps_per_hz,
        shannon_bound_bps=s.shannon_bound_bps,
        efficiency_vs_bound=s.efficiency_vs_bound,
        retune_count=s.retune_count,
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


# ----------------------------------------------------------------------------- request → problem


def _current_from_carrier(carrier: CarrierOut) -> CurrentSetting:
    return CurrentSetting(
        center_hz=carrier.center_hz,
        symbol_rate_baud=carrier.symbol_rate_baud,
        rolloff=carrier.rolloff,
        modulation=carrier.modulation,
        code_rate=parse_code_rate(carrier.code_rate),
    )


def _demand(d: DemandIn, previous: dict[str, CarrierOut]) -> Demand:
    if d.current is not None:
        current: CurrentSetting | None = CurrentSetting(
            center_hz=d.current.center_hz,
            symbol_rate_baud=d.current.symbol_rate_baud,
            rolloff=d.current.rolloff,
            modulation=d.current.modulation,
            code_rate=parse_code_rate(d.current.code_rate),
        )
    else:
        carrier = previous.get(d.id)
        current = None if carrier is None else _current_from_carrier(carrier)
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
        current=current,
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
    )


# ----------------------------------------------------------------------------- the pipeline


@dataclass(frozen=True)
class PreparedSolve:
    """A validated request turned into a problem, with the plan it replans (if any)."""

    request: PlanRequest
    problem: Problem
    parent_id: str | None


def prepare(request: PlanRequest, store: Store, settings: Settings) -> PreparedSolve:
    """Validate across fields, resolve ``previous_plan_id`` and build the problem.

    Raises :class:`~service.errors.InvalidInputError` naming the bad field (an unknown
    ``previous_plan_id`` included).
    """
    previous = None
    if request.previous_plan_id is not None:
        stored = store.get_plan(request.previous_plan_id)
        if stored is None:
            issue = FieldIssue("previous_plan_id", f"no stored plan {request.previous_plan_id!r}")
            raise InvalidInputError([issue])
        previous = stored.plan
    problem = to_problem(request, previous=previous, num_workers=settings.workers_per_solve)
    return PreparedSolve(request, problem, request.previous_plan_id)


def run_solve(
    runtime: Runtime,
    problem: Problem,
    *,
    mode: str,
    progress: Callable[[ProgressEvent], None] | None = None,
    cancel: threading.Event | None = None,
) -> Plan:
    """Solve (blocking; call from a worker thread) and count it in the metrics."""
    metrics = runtime.metrics
    metrics.solves_running.inc()
    started = time.perf_counter()
    try:
        plan = runtime.solve(problem, progress=progress, cancel=cancel)
    except ProblemError:
        metrics.solves.labels("invalid").inc()
        raise
    except Exception:
        metrics.solves.labels("error").inc()
        raise
    finally:
        metrics.solves_running.dec()
        metrics.solve_time.labels(mode).observe(time.perf_counter() - started)
    metrics.solves.labels(plan.status.value).inc()
    return plan


STORE_RETRIES_S = (0.25, 0.5, 1.0, 2.0)
"""Pauses between attempts to store a finished plan while the store does not answer (then
:class:`~service.store.StoreUnavailableError`, a 503)."""


def store_plan(runtime: Runtime, prepared: PreparedSolve, plan: Plan) -> PlanOut:
    """Give the plan its id, time and parent, and store it with its request (retried for a
    few seconds while the store does not answer)."""
    out = plan_to_wire(plan, plan_id=new_id(), created_at=utc_now(), parent_id=prepared.parent_id)
    for pause_s in (*STORE_RETRIES_S, None):
        try:
            runtime.store.add_plan(out, prepared.request)
            break
        except StoreUnavailableError:
            if pause_s is None:
                raise
            logger.warning("store not answering; plan %s stored again in %.2f s", out.id, pause_s)
            time.sleep(pause_s)
    logger.info("stored plan %s (%s, %d carriers)", out.id, out.status.value, len(out.carriers))
    return out


def solve_and_store(runtime: Runtime, prepared: PreparedSolve, *, mode: str) -> PlanOut:
    """Solve a prepared request and store the plan (blocking)."""
    return store_plan(runtime, prepared, run_solve(runtime, prepared.problem, mode=mode))


class SolveGate:
    """Bounded concurrency for synchronous solves (threads under a dedicated limiter)."""

    def __init__(self, settings: Settings, metrics: Metrics) -> None:
        self._running = settings.max_concurrent_solves
        self._capacity = settings.max_concurrent_solves + settings.max_queued
        self._retry_after_s = settings.retry_after_s
        self._metrics = metrics
        self._limiter: anyio.CapacityLimiter | None = None
        self._admitted = 0

    @property
    def admitted(self) -> int:
        """Solves running or waiting for a slot now."""
        return self._admitted

    async def run(self, work: Callable[[], T]) -> T:
        """Run ``work`` in a thread once a slot is free; SolverBusyError past the bound."""
        if self._admitted >= self._capacity:
            self._metrics.solves_rejected.inc()
            raise SolverBusyError(self._retry_after_s)
        if self._limiter is None:
            self._limiter = anyio.CapacityLimiter(self._running)
        self._admitted += 1
        try:
            return await anyio.to_thread.run_sync(work, limiter=self._limiter)
        finally:
            self._admitted -= 1


def _progress_out(event: ProgressEvent) -> JobProgress:
    return JobProgress(
        elapsed_s=event.elapsed_s,
        objective_value=finite_or_none(event.objective_value),
        best_bound=finite_or_none(event.best_bound),
        optimality_gap=finite_or_none(event.optimality_gap),
        stage=event.stage,
    )


class JobManager:
    """Background solves on a thread pool; the store holds every job's state."""

    def __init__(self, runtime: Runtime) -> None:
        self._runtime = runtime
        workers = runtime.settings.job_workers
        self._pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="bandwright-job")
        self._cancels: dict[str, threading.Event] = {}
        self._lock = threading.Lock()
        self._stopping = threading.Event()

    def start(self) -> int:
        """Requeue jobs a previous process left queued or running; returns how many."""
        store = self._runtime.store
        job_ids = store.unfinished_jobs()
        for job_id in job_ids:
            store.update_job(job_id, state=JobState.QUEUED)
            self._pool.submit(self._run, job_id)
        if job_ids:
            logger.info("requeued %d unfinished job(s)", len(job_ids))
        return len(job_ids)

    def submit(self, request: PlanRequest) -> JobOut:
        """Validate, store and queue a job; SolverBusyError when the queue is full."""
        runtime = self._runtime
        prepared = prepare(request, runtime.store, runtime.settings)
        validate_problem(prepared.problem)  # 422 now rather than a failed job
        if runtime.store.count_jobs(JobState.QUEUED) >= runtime.settings.max_queued_jobs:
            raise SolverBusyError(runtime.settings.retry_after_s)
        job = runtime.store.add_job(new_id(), request)
        self._pool.submit(self._run, job.id)
        return job

    def shutdown(self) -> None:
        """Stop: queued jobs stay queued, running ones are stopped and requeued for next time."""
        self._stopping.set()
        with self._lock:
            for cancel in self._cancels.values():
                cancel.set()
        self._pool.shutdown(wait=True, cancel_futures=True)

    def _run(self, job_id: str) -> None:
        store = self._runtime.store
        record = store.get_job(job_id)
        if record is None or self._stopping.is_set():
            return
        cancel = threading.Event()
        with self._lock:
            self._cancels[job_id] = cancel
        store.update_job(job_id, state=JobState.RUNNING)
        try:
            self._solve_job(job_id, record.request, cancel)
        except (InvalidInputError, ProblemError) as exc:
            store.update_job(job_id, state=JobState.FAILED, error=_job_error(job_id, exc))
        except Exception as exc:
            logger.exception("job %s failed", job_id)
            store.update_job(job_id, state=JobState.FAILED, error=_job_error(job_id, exc))
        finally:
            with self._lock:
                self._cancels.pop(job_id, None)

    def _solve_job(self, job_id: str, request: PlanRequest, cancel: threading.Event) -> None:
        runtime = self._runtime
        prepared = prepare(request, runtime.store, runtime.settings)
        interval_s = runtime.settings.progress_interval_s
        last_saved = -math.inf

        def on_progress(event: ProgressEvent) -> None:
            nonlocal last_saved
            now = time.monotonic()
            if now - last_saved >= interval_s:
                last_saved = now
                runtime.store.update_job(job_id, progress=_progress_out(event))

        try:
            plan = run_solve(
                runtime, prepared.problem, mode="job", progress=on_progress, cancel=cancel
            )
        except SolveCancelledError:
            plan = None
        if plan is None or self._stopping.is_set():  # stopped by shutdown: run it again later
            runtime.store.update_job(job_id, state=JobState.QUEUED)
            return
        out = store_plan(runtime, prepared, plan)
        runtime.store.update_job(job_id, state=JobState.DONE, plan_id=out.id)


def _job_error(job_id: str, exc: Exception) -> dict[str, Any]:
    if isinstance(exc, InvalidInputError):
        return problem_document(422, "invalid-request", str(exc), f"/v1/jobs/{job_id}", exc.issues)
    if isinstance(exc, ProblemError):
        issues = [FieldIssue(exc.field, exc.message)]
        return problem_document(422, "invalid-request", str(exc), f"/v1/jobs/{job_id}", issues)
    detail = "the solve failed; the error has been logged"
    return problem_document(500, "internal", detail, f"/v1/jobs/{job_id}", ())


@dataclass
class Runtime:
    """Everything a request handler needs, built by the app factory at start-up."""

    settings: Settings
    store: Store
    metrics: Metrics
    solve: SolveFunction
    gate: SolveGate
    jobs: JobManager | None = None


def get_runtime(request: Request) -> Runtime:
    """FastAPI dependency: the application's :class:`Runtime`."""
    runtime: Runtime = request.app.state.runtime
    return runtime
