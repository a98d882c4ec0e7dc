"""Background jobs: stored in the plan store, run in this process or by Celery workers.

The store is the truth about every job; a queue only carries job ids.

* :class:`LocalJobQueue` (the embedded default, no broker) runs jobs on a thread pool in the
  API process.
* :class:`BrokerJobQueue` (``BANDWRIGHT_BROKER_URL`` set) sends each job id to Celery; the
  ``bandwright worker`` processes (:mod:`service.worker`) run them.

Either way the process running a job holds a lease on it that a :class:`LeaseKeeper` renews;
a job whose lease runs out (its process was killed) is adopted by a live process and run again.
Claiming, finishing and cancelling are compare-and-set in the store and a plan names its job
uniquely, so a job that runs twice still ends ``done`` once with one plan.
"""

from __future__ import annotations

import logging
import math
import os
import socket
import threading
import time
import uuid
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import Any

from service.convert import progress_to_wire
from service.errors import FieldIssue, InvalidInputError, SolverBusyError, problem_document
from service.ratelimit import job_cap_refusal
from service.runtime import Runtime, new_id, prepare, run_solve, wire_plan
from service.schemas import JobOut, JobState, PlanRequest
from service.store import JobCapError, StoreUnavailableError
from solver import ProblemError, ProgressEvent, SolveCancelledError, validate_problem

__all__ = [
    "BrokerJobQueue",
    "LeaseKeeper",
    "LocalJobQueue",
    "process_owner",
    "run_job",
    "validate_job",
]

logger = logging.getLogger(__name__)

_OWNER: tuple[int, str] | None = None


def process_owner() -> str:
    """This process's name as a job holder (host, pid and a random tag; new after a fork)."""
    global _OWNER
    if _OWNER is None or _OWNER[0] != os.getpid():
        _OWNER = (os.getpid(), f"{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:8]}")
    return _OWNER[1]


def validate_job(runtime: Runtime, request: PlanRequest, field_prefix: str = "") -> None:
    """Refuse now (422 naming the field) what would only fail once the job ran."""
    try:
        validate_problem(prepare(request, runtime.store, runtime.settings).problem)
    except InvalidInputError as exc:
        if not field_prefix:
            raise
        raise InvalidInputError(
            [FieldIssue(f"{field_prefix}.{i.field}", i.message) for i in exc.issues]
        ) from exc
    except ProblemError as exc:
        field = f"{field_prefix}.{exc.field}" if field_prefix else exc.field
        raise InvalidInputError([FieldIssue(field, exc.message)]) from exc


class LeaseKeeper:
    """One thread per process: renews the leases of the jobs this process holds, stops a
    running solve whose job was cancelled or taken over, and calls ``sweep`` on every tick."""

    def __init__(
        self, runtime: Runtime, sweep: Callable[[], object] | None = None, name: str = "leases"
    ) -> None:
        self._runtime = runtime
        self._sweep = sweep
        self._held: dict[str, threading.Event] = {}
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, name=f"bandwright-{name}", daemon=True)

    @property
    def lease_s(self) -> float:
        return self._runtime.settings.job_lease_s

    def start(self) -> None:
        if self._thread.ident is None:  # a queue whose first start failed is started again
            self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout=self.lease_s)

    def hold(self, job_id: str) -> threading.Event:
        """Keep ``job_id``'s lease alive; the event is set when this process loses the job."""
        with self._lock:
            return self._held.setdefault(job_id, threading.Event())

    def release(self, job_id: str) -> None:
        with self._lock:
            self._held.pop(job_id, None)

    def held(self) -> list[str]:
        with self._lock:
            return list(self._held)

    def stop_all(self) -> None:
        """Set every held job's event (the process is stopping)."""
        with self._lock:
            for lost in self._held.values():
                lost.set()

    def tick(self) -> None:
        """Renew once, then sweep (also called by tests instead of waiting for the thread)."""
        ids = self.held()
        if ids:
            still = self._runtime.store.renew_leases(process_owner(), ids, self.lease_s)
            with self._lock:
                for job_id in set(ids) - still:
                    lost = self._held.pop(job_id, None)
                    if lost is not None:
                        logger.info("job %s was cancelled or taken over; stopping it", job_id)
                        lost.set()
        if self._sweep is not None:
            self._sweep()

    def _loop(self) -> None:
        interval_s = self._runtime.settings.job_lease_s / 3
        while not self._stop.wait(interval_s):
            try:
                self.tick()
            except StoreUnavailableError as exc:
                logger.warning("lease renewal skipped: %s", exc)
            except Exception:
                logger.exception("lease renewal failed")


def run_job(runtime: Runtime, keeper: LeaseKeeper, job_id: str) -> str:
    """Claim and run one job to its end; returns what happened (for logs and tests):
    ``done``, ``failed``, ``cancelled``, ``released`` or ``skipped`` (someone else has it)."""
    owner = process_owner()
    store = runtime.store
    lost = keeper.hold(job_id)
    try:
        record = store.claim_job(job_id, owner, keeper.lease_s)
        if record is None:
            return "skipped"
        try:
            return _solve_claimed(runtime, job_id, record.request, lost)
        except (InvalidInputError, ProblemError) as exc:
            store.fail_job(job_id, owner, _job_error(job_id, exc))
            return "failed"
        except SolveCancelledError:
            raise
        except Exception as exc:
            logger.exception("job %s failed", job_id)
            store.fail_job(job_id, owner, _job_error(job_id, exc))
            return "failed"
    finally:
        keeper.release(job_id)


def _solve_claimed(
    runtime: Runtime, job_id: str, request: PlanRequest, lost: threading.Event
) -> str:
    owner = process_owner()
    store = runtime.store
    prepared = prepare(request, store, runtime.settings)
    interval_s = runtime.settings.progress_interval_s
    last_saved = -math.inf

    def on_progress(event: ProgressEvent) -> None:
        nonlocal last_saved
        now = time.monotonic()
        if now - last_saved >= interval_s:
            last_saved = now
            if not store.record_progress(job_id, owner, progress_to_wire(event)):
                lost.set()

    try:
        plan = run_solve(runtime, prepared.problem, mode="job", progress=on_progress, cancel=lost)
    except SolveCancelledError:
        plan = None
    current = store.get_job(job_id)
    if current is not None and current.job.state is JobState.CANCELLED:
        return "cancelled"
    if plan is None:  # this process is stopping, or lost the lease: the job runs again
        store.release_job(job_id, owner)
        return "released"
    out = wire_plan(prepared, plan)
    kept = store.finish_job(job_id, out, request)
    if kept is None:
        return "cancelled"
    logger.info("job %s done: plan %s (%s)", job_id, kept, out.status.value)
    return "done"


def _job_error(job_id: str, exc: Exception) -> dict[str, Any]:
    instance = f"/v1/jobs/{job_id}"
    if isinstance(exc, InvalidInputError):
        return problem_document(422, "invalid-request", str(exc), instance, exc.issues)
    if isinstance(exc, ProblemError):
        issues = [FieldIssue(exc.field, exc.message)]
        return problem_document(422, "invalid-request", str(exc), instance, issues)
    detail = "the solve failed; the error has been logged"
    return problem_document(500, "internal", detail, instance, ())


def _admit(runtime: Runtime) -> None:
    """Refuse a job the queue has no place for (503).  Its key's cap is counted by the store
    as the job is inserted (:func:`_store_job`)."""
    settings = runtime.settings
    if runtime.store.count_jobs(JobState.QUEUED) >= settings.max_queued_jobs:
        raise SolverBusyError(settings.retry_after_s)


def _store_job(
    runtime: Runtime,
    request: PlanRequest,
    owner_key: str | None,
    batch: tuple[str, int] | None,
    owner: str | None = None,
) -> JobOut:
    """Store a new job, its key's cap counted in the same transaction (429 past it)."""
    settings = runtime.settings
    lease_s = None if owner is None else settings.job_lease_s
    try:
        return runtime.store.add_job(
            new_id(),
            request,
            owner=owner,
            lease_s=lease_s,
            key_id=owner_key,
            batch=batch,
            key_cap=settings.max_jobs_per_key,
        )
    except JobCapError as exc:
        raise job_cap_refusal(exc.held, exc.cap, 1, settings.retry_after_s) from exc


def _cancel(runtime: Runtime, job_id: str) -> JobOut | None:
    job = runtime.store.cancel_job(job_id)
    if job is not None and job.state is JobState.CANCELLED:
        logger.info("job %s cancelled", job_id)
    return job


class LocalJobQueue:
    """Jobs on a thread pool in this process (no broker).  Several such processes sharing one
    PostgreSQL store each run the jobs they hold and adopt those of a process that stopped."""

    def __init__(self, runtime: Runtime) -> None:
        self._runtime = runtime
        workers = runtime.settings.job_workers
        self._pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="bandwright-job")
        self._keeper = LeaseKeeper(runtime, sweep=self.adopt, name="job-leases")
        self._stopping = threading.Event()

    def start(self) -> int:
        """Adopt jobs a stopped process left (now, and on every lease tick); returns how many."""
        adopted = self.adopt()
        self._keeper.start()
        return adopted

    def adopt(self) -> int:
        """Take jobs whose holder is gone and queue them here."""
        if self._stopping.is_set():
            return 0
        settings = self._runtime.settings
        job_ids = self._runtime.store.adopt_jobs(process_owner(), settings.job_lease_s, unheld=True)
        for job_id in job_ids:
            self._keeper.hold(job_id)
            self._pool.submit(self._run, job_id)
        if job_ids:
            logger.info("adopted %d job(s) left by a stopped process", len(job_ids))
        return len(job_ids)

    def submit(
        self,
        request: PlanRequest,
        *,
        owner_key: str | None = None,
        batch: tuple[str, int] | None = None,
    ) -> JobOut:
        """Validate, store and queue a job; SolverBusyError when the queue is full."""
        runtime = self._runtime
        validate_job(runtime, request)
        _admit(runtime)
        job = _store_job(runtime, request, owner_key, batch, owner=process_owner())
        self._keeper.hold(job.id)
        self._pool.submit(self._run, job.id)
        return job

    def cancel(self, job_id: str) -> JobOut | None:
        return _cancel(self._runtime, job_id)

    def shutdown(self) -> None:
        """Stop: running solves stop, and every job held here goes back to the queue."""
        self._stopping.set()
        self._keeper.stop_all()
        self._pool.shutdown(wait=True, cancel_futures=True)
        self._keeper.stop()
        for job_id in self._keeper.held():
            self._runtime.store.release_job(job_id, process_owner())

    def _run(self, job_id: str) -> None:
        if self._stopping.is_set():
            return
        outcome = run_job(self._runtime, self._keeper, job_id)
        logger.debug("job %s: %s", job_id, outcome)


Sender = Callable[[str, float], None]
"""Hands a job id to the broker, with the job's time limit (s)."""


class BrokerJobQueue:
    """Jobs sent to Celery workers through the broker.  This process only stores jobs, sends
    their ids, and (every lease tick) sends again those whose worker was lost."""

    def __init__(self, runtime: Runtime, send: Sender) -> None:
        self._runtime = runtime
        self._send = send
        self._keeper = LeaseKeeper(runtime, sweep=self.sweep, name="job-sweep")

    def start(self) -> int:
        self._keeper.start()
        return self.sweep()

    def submit(
        self,
        request: PlanRequest,
        *,
        owner_key: str | None = None,
        batch: tuple[str, int] | None = None,
    ) -> JobOut:
        """Validate, store and send a job.  A broker that does not answer leaves the job stored
        and unsent; the sweep sends it once the broker is back."""
        runtime = self._runtime
        validate_job(runtime, request)
        _admit(runtime)
        job = _store_job(runtime, request, owner_key, batch)
        self._send_stored(job.id, request.time_limit_s)
        return job

    def cancel(self, job_id: str) -> JobOut | None:
        return _cancel(self._runtime, job_id)

    def sweep(self) -> int:
        """Requeue jobs whose worker stopped renewing its lease, and send every stored job no
        queue was given; returns how many were sent."""
        store = self._runtime.store
        store.adopt_jobs(None, None)
        sent = 0
        for job_id in store.unsent_jobs(self._runtime.settings.unsent_after_s):
            record = store.get_job(job_id)
            if record is not None and self._send_stored(job_id, record.request.time_limit_s):
                sent += 1
        if sent:
            logger.info("sent %d job(s) again", sent)
        return sent

    def shutdown(self) -> None:
        self._keeper.stop()

    def _send_stored(self, job_id: str, time_limit_s: float) -> bool:
        store = self._runtime.store
        if not store.mark_sent(job_id):
            return False  # another process sent it
        try:
            self._send(job_id, time_limit_s)
        except Exception as exc:  # the broker's client raises its own kinds
            store.mark_sent(job_id, sent=False)
            logger.warning("job %s stored but not sent (%s); sent again later", job_id, exc)
            return False
        return True
