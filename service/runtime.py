"""The solve runtime: what a request handler needs, and the one way a solve is run and stored.

* :class:`Runtime` holds the settings, store, metrics, solve function, gate and job queue;
* :func:`prepare` validates across fields and builds the problem; :func:`run_solve` solves and
  counts it; :func:`store_plan` gives the plan its identity and stores it;
* :class:`SolveGate` runs synchronous solves in threads under a dedicated
  :class:`anyio.CapacityLimiter`, refusing (503) once running plus waiting solves reach the bound.

CP-SAT releases the GIL while it searches, so threads give real parallelism here.
"""

from __future__ import annotations

import logging
import threading
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol, TypeVar

import anyio
import anyio.to_thread
from fastapi import Request

from service.convert import plan_to_wire, to_problem
from service.errors import FieldIssue, InvalidInputError, SolverBusyError
from service.metrics import Metrics
from service.schemas import JobOut, PlanOut, PlanRequest
from service.settings import Settings
from service.store import Store, StoreUnavailableError, utc_now
from service.worksize import check_work_size
from solver import Plan, Problem, ProblemError, ProgressEvent, explain_shortfalls

__all__ = [
    "JobQueue",
    "PreparedSolve",
    "Runtime",
    "SolveFunction",
    "SolveGate",
    "get_runtime",
    "new_id",
    "prepare",
    "run_solve",
    "store_plan",
    "wire_plan",
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


@dataclass(frozen=True)
class PreparedSolve:
    """A validated request turned into a problem, with the plan it replans (if any)."""

    request: PlanRequest
    problem: Problem
    parent_id: str | None


def prepare(request: PlanRequest, store: Store, settings: Settings) -> PreparedSolve:
    """Validate across fields, resolve ``previous_plan_id``, build the problem and hold it to
    the work-size limit (:mod:`service.worksize`).

    Raises :class:`~service.errors.InvalidInputError` naming the bad field (an unknown
    ``previous_plan_id`` and a request over the work-size limit included).
    """
    previous = None
    if request.previous_plan_id is not None:
        stored = store.get_plan(request.previous_plan_id)
        if stored is None:
            issue = FieldIssue("previous_plan_id", f"no stored plan {request.previous_plan_id!r}")
            raise InvalidInputError([issue])
        previous = stored.plan
    problem = to_problem(request, previous=previous, num_workers=settings.workers_per_solve)
    check_work_size(problem, settings.max_work_configurations)
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


def wire_plan(prepared: PreparedSolve, plan: Plan) -> PlanOut:
    """The plan on the wire with a new id, the time, its parent, its request, and for each
    carrier below its target what binds it (:func:`solver.explain_shortfalls`)."""
    return plan_to_wire(
        plan,
        plan_id=new_id(),
        created_at=utc_now(),
        parent_id=prepared.parent_id,
        request=prepared.request,
        shortfalls=explain_shortfalls(prepared.problem, plan.carriers),
    )


def store_plan(runtime: Runtime, prepared: PreparedSolve, plan: Plan) -> PlanOut:
    """Give the plan its id, time and parent, and store it with its request (retried for a
    few seconds while the store does not answer)."""
    out = wire_plan(prepared, plan)
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


class JobQueue(Protocol):
    """Background solves (:mod:`service.queue`): in-process threads or a distributed queue."""

    def submit(
        self,
        request: PlanRequest,
        *,
        owner_key: str | None = None,
        batch: tuple[str, int] | None = None,
    ) -> JobOut: ...
    def cancel(self, job_id: str) -> JobOut | None: ...
    def shutdown(self) -> None: ...


@dataclass
class Runtime:
    """Everything a request handler needs, built by the app factory at start-up."""

    settings: Settings
    store: Store
    metrics: Metrics
    solve: SolveFunction
    gate: SolveGate
    jobs: JobQueue | None = None
    _waiting: Callable[[], object] | None = field(default=None, repr=False)
    _lock: threading.Lock = field(default_factory=threading.Lock, repr=False)

    def start_when_ready(self, start: Callable[[], object]) -> None:
        """Run ``start`` (the job queue's) once the store is found ready: it was not at start-up
        (unreachable, or its schema behind until ``bandwright db upgrade`` runs)."""
        with self._lock:
            self._waiting = start

    def store_ready(self) -> None:
        """The store answered with this version's schema (``/readyz``): start what waited for
        it, once; when that fails on the store, it waits for the next time."""
        with self._lock:
            start, self._waiting = self._waiting, None
        if start is None:
            return
        try:
            start()
        except StoreUnavailableError:
            self.start_when_ready(start)
            raise


def get_runtime(request: Request) -> Runtime:
    """FastAPI dependency: the application's :class:`Runtime`."""
    runtime: Runtime = request.app.state.runtime
    return runtime
