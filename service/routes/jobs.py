"""Background solves: ``POST /v1/jobs`` (202 + Location), ``GET`` and ``DELETE /v1/jobs/{id}``."""

from __future__ import annotations

from typing import Annotated

import anyio.to_thread
from fastapi import APIRouter, Depends, Path, Request, Response

from service.errors import ConflictError, NotFoundError, ServiceError
from service.idempotency import IdempotencyKey, remember, replayed
from service.keys import key_id_of
from service.ratelimit import limit_solves
from service.routes.plans import BUSY, PROBLEM_RESPONSES, _problem
from service.runtime import Runtime, get_runtime
from service.schemas import JobOut, JobState, PlanRequest

__all__ = ["router"]

router = APIRouter(prefix="/v1/jobs", tags=["jobs"])
JobId = Annotated[str, Path(min_length=1, max_length=64, description="job id")]


@router.post(
    "",
    status_code=202,
    response_model=JobOut,
    operation_id="create_job",
    summary="Queue a planning request; poll the job at Location",
    responses={**PROBLEM_RESPONSES, **BUSY},
    dependencies=[Depends(limit_solves)],
)
async def create_job(
    body: PlanRequest,
    request: Request,
    response: Response,
    runtime: Annotated[Runtime, Depends(get_runtime)],
    idempotency_key: IdempotencyKey = None,
) -> JobOut | Response:
    """202 Accepted with ``Location: /v1/jobs/{id}`` and ``Retry-After`` (s).

    A 429 ``too-many-jobs`` when the API key already holds its cap of queued and running jobs
    (``BANDWRIGHT_MAX_JOBS_PER_KEY``)."""
    jobs = runtime.jobs
    if jobs is None:
        raise ServiceError("the job manager is not running")
    first = await anyio.to_thread.run_sync(replayed, runtime.store, request, idempotency_key, body)
    if first is not None:
        return first
    owner_key = key_id_of(request)
    job = await anyio.to_thread.run_sync(lambda: jobs.submit(body, owner_key=owner_key))
    answer = (202, f"/v1/jobs/{job.id}", job)
    await anyio.to_thread.run_sync(remember, runtime.store, request, idempotency_key, body, answer)
    response.headers["Location"] = f"/v1/jobs/{job.id}"
    response.headers["Retry-After"] = str(runtime.settings.retry_after_s)
    return job


@router.get(
    "/{job_id}",
    operation_id="get_job",
    responses={404: _problem("no job with that id")},
)
def get_job(
    job_id: JobId, response: Response, runtime: Annotated[Runtime, Depends(get_runtime)]
) -> JobOut:
    """The job's state and progress; ``plan_id`` and ``plan_url`` once it is done."""
    record = runtime.store.get_job(job_id)
    if record is None:
        raise NotFoundError("job", job_id)
    response.headers["Cache-Control"] = "no-store"
    if record.job.state in (JobState.QUEUED, JobState.RUNNING):
        response.headers["Retry-After"] = str(runtime.settings.retry_after_s)
    return record.job


@router.delete(
    "/{job_id}",
    operation_id="cancel_job",
    summary="Cancel a queued or running job",
    responses={
        404: _problem("no job with that id"),
        409: _problem("the job has already ended (done, failed or cancelled)"),
    },
)
def cancel_job(job_id: JobId, runtime: Annotated[Runtime, Depends(get_runtime)]) -> JobOut:
    """A queued job is dropped; a running one stops its search within a lease tick and stores
    nothing.  The job comes back ``cancelled``."""
    jobs = runtime.jobs
    if jobs is None:
        raise ServiceError("the job manager is not running")
    before = runtime.store.get_job(job_id)
    if before is None:
        raise NotFoundError("job", job_id)
    if before.job.state not in (JobState.QUEUED, JobState.RUNNING):
        raise ConflictError(f"job {job_id} has already ended ({before.job.state.value})")
    job = jobs.cancel(job_id)
    if job is None:
        raise NotFoundError("job", job_id)
    if job.state is not JobState.CANCELLED:
        raise ConflictError(f"job {job_id} ended before it could be cancelled ({job.state.value})")
    return job
