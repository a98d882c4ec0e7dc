"""Batches for the nightly replan: ``POST /v1/batches`` fans many plan or replan requests out as
background jobs; ``GET /v1/batches/{id}`` gives each item's state and outcome and a summary."""

from __future__ import annotations

from typing import Annotated

import anyio.to_thread
from fastapi import APIRouter, Depends, Path, Request, Response

from service.errors import NotFoundError, ServiceError, SolverBusyError
from service.idempotency import IdempotencyKey, remember, replayed
from service.keys import key_id_of
from service.queue import validate_job
from service.ratelimit import check_job_cap, limit_solves
from service.routes.plans import BUSY, PROBLEM_RESPONSES, _problem
from service.runtime import Runtime, get_runtime, new_id
from service.schemas import (
    BatchItemOut,
    BatchOut,
    BatchOutcome,
    BatchRequest,
    BatchSummary,
    JobState,
)
from service.store import BatchEntry, BatchRecord
from solver import SolveStatus

__all__ = ["item_outcome", "router"]

router = APIRouter(prefix="/v1/batches", tags=["batches"])
BatchId = Annotated[str, Path(min_length=1, max_length=64, description="batch id")]

WORST_LAST = list(BatchOutcome)
"""Outcomes from best to worst (``pending`` first: it never outranks an ended item)."""


def item_outcome(entry: BatchEntry) -> BatchOutcome:
    """How one item stands: pending, or how its job ended and what its plan serves."""
    state = entry.job.state
    if state in (JobState.QUEUED, JobState.RUNNING):
        return BatchOutcome.PENDING
    if state is JobState.FAILED:
        return BatchOutcome.FAILED
    if state is JobState.CANCELLED:
        return BatchOutcome.CANCELLED
    if entry.plan_status == SolveStatus.INFEASIBLE.value:
        return BatchOutcome.INFEASIBLE
    return BatchOutcome.UNSERVED if entry.unserved_count else BatchOutcome.SERVED


def batch_to_wire(record: BatchRecord) -> BatchOut:
    items = []
    for entry in record.entries:
        job = entry.job
        items.append(
            BatchItemOut(
                position=entry.position,
                name=job.name,
                job_id=job.id,
                job_url=f"/v1/jobs/{job.id}",
                state=job.state,
                outcome=item_outcome(entry),
                plan_id=job.plan_id,
                plan_url=job.plan_url,
                unserved_count=entry.unserved_count,
                error=job.error,
            )
        )
    states = [i.state for i in items]
    worst = max((i.outcome for i in items), key=WORST_LAST.index, default=BatchOutcome.PENDING)
    summary = BatchSummary(
        total=len(items),
        queued=states.count(JobState.QUEUED),
        running=states.count(JobState.RUNNING),
        done=states.count(JobState.DONE),
        failed=states.count(JobState.FAILED),
        cancelled=states.count(JobState.CANCELLED),
        finished=all(i.outcome is not BatchOutcome.PENDING for i in items),
        worst=worst,
    )
    return BatchOut(
        id=record.id, name=record.name, created_at=record.created_at, items=items, summary=summary
    )


def _submit_batch(runtime: Runtime, body: BatchRequest, owner_key: str | None) -> BatchOut:
    jobs = runtime.jobs
    if jobs is None:
        raise ServiceError("the job manager is not running")
    for position, item in enumerate(body.items):  # 422 naming items[i]... before anything runs
        validate_job(runtime, item, f"items[{position}]")
    check_job_cap(runtime, owner_key, len(body.items))  # the whole batch, before any job
    settings = runtime.settings
    if runtime.store.count_jobs(JobState.QUEUED) + len(body.items) > settings.max_queued_jobs:
        raise SolverBusyError(settings.retry_after_s)
    batch_id = new_id()
    runtime.store.add_batch(batch_id, body.name, len(body.items), owner_key)
    submitted = []
    try:
        for position, item in enumerate(body.items):
            job = jobs.submit(item, owner_key=owner_key, batch=(batch_id, position))
            submitted.append(job.id)
    except Exception:
        for job_id in submitted:  # all or nothing: the batch's jobs already queued are dropped
            jobs.cancel(job_id)
        raise
    record = runtime.store.get_batch(batch_id)
    if record is None:  # just stored
        raise ServiceError(f"batch {batch_id} vanished from the store")
    return batch_to_wire(record)


@router.post(
    "",
    status_code=202,
    response_model=BatchOut,
    operation_id="create_batch",
    summary="Queue many planning requests as one batch; poll it at Location",
    responses={**PROBLEM_RESPONSES, **BUSY},
    dependencies=[Depends(limit_solves)],
)
async def create_batch(
    body: BatchRequest,
    request: Request,
    response: Response,
    runtime: Annotated[Runtime, Depends(get_runtime)],
    idempotency_key: IdempotencyKey = None,
) -> BatchOut | Response:
    """202 Accepted with ``Location: /v1/batches/{id}``.  Every item is checked first (a 422
    names ``items[i]`` and the field, the work-size limit included); then each becomes a job,
    all or none.  The batch counts once against the solve rate; its items count against the
    key's cap of queued and running jobs (429 ``too-many-jobs`` when they would pass it)."""
    first = await anyio.to_thread.run_sync(replayed, runtime.store, request, idempotency_key, body)
    if first is not None:
        return first
    owner_key = key_id_of(request)
    batch = await anyio.to_thread.run_sync(lambda: _submit_batch(runtime, body, owner_key))
    location = f"/v1/batches/{batch.id}"
    answer = (202, location, batch)
    await anyio.to_thread.run_sync(remember, runtime.store, request, idempotency_key, body, answer)
    response.headers["Location"] = location
    response.headers["Retry-After"] = str(runtime.settings.retry_after_s)
    return batch


@router.get(
    "/{batch_id}",
    operation_id="get_batch",
    responses={404: _problem("no batch with that id")},
)
def get_batch(
    batch_id: BatchId, response: Response, runtime: Annotated[Runtime, Depends(get_runtime)]
) -> BatchOut:
    """Each item's job state and outcome, and a summary with the worst outcome so far."""
    record = runtime.store.get_batch(batch_id)
    if record is None:
        raise NotFoundError("batch", batch_id)
    batch = batch_to_wire(record)
    response.headers["Cache-Control"] = "no-store"
    if not batch.summary.finished:
        response.headers["Retry-After"] = str(runtime.settings.retry_after_s)
    return batch
