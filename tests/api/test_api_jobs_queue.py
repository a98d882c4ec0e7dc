"""Jobs with more than one replica, across restarts, and cancelled, on SQLite and PostgreSQL.

Regression tests of what an operator saw: restarting replica B while replica A ran a job ran it
twice (two plans, the job's plan changed after it was done); after ``kill -9`` of replica A its
jobs were never adopted by the live replica.  Replicas here are two applications in one process
sharing one store; separate processes, a real broker and ``kill -9`` are in
``test_jobs_fault.py``.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from typing import Any

import anyio
import httpx
import pytest

from service.app import create_app
from service.queue import process_owner
from service.runtime import SolveFunction
from service.schemas import PlanRequest
from service.settings import Settings
from service.store import Store
from solver.model import Plan, Problem, ProgressEvent
from tests.api.api_support import BlockingSolve, on_postgres, serving, small_request

pytestmark = pytest.mark.anyio


@pytest.fixture(params=["sqlite", "postgres"])
def shared(request: pytest.FixtureRequest, settings: Settings) -> Settings:
    """Settings of a store two replicas share, with a short lease."""
    short = settings.model_copy(update={"job_lease_s": 1.0, "unsent_after_s": 0.2})
    return on_postgres(short) if request.param == "postgres" else short


async def _job(client: httpx.AsyncClient, location: str) -> dict[str, Any]:
    answer = await client.get(location)
    assert answer.status_code == 200
    job: dict[str, Any] = answer.json()
    return job


async def _until(
    client: httpx.AsyncClient, location: str, done: Callable[[dict[str, Any]], bool], wait_s: float
) -> dict[str, Any]:
    with anyio.fail_after(wait_s):
        while True:
            job = await _job(client, location)
            if done(job):
                return job
            await anyio.sleep(0.05)


async def _entered(double: BlockingSolve, count: int) -> None:
    with anyio.fail_after(30):
        for _ in range(count):
            while not double.entered.acquire(blocking=False):
                await anyio.sleep(0.01)


def _plans_of(settings: Settings, job_id: str) -> list[str]:
    store = Store(settings.database_url)
    try:
        return store.plans_of_job(job_id)
    finally:
        store.close()


async def test_a_replica_starting_leaves_a_running_job_to_its_holder(
    shared: Settings, real_solve: SolveFunction
) -> None:
    double = BlockingSolve(real_solve)
    async with serving(create_app(shared, solve=double)) as a:
        location = (await a.post("/v1/jobs", json=small_request())).headers["location"]
        job_id = location.rsplit("/", 1)[-1]
        await _entered(double, 1)
        # Replica B starts (and restarts) while A runs the job, over several lease periods.
        for _ in range(2):
            async with serving(create_app(shared, solve=real_solve)) as b:
                await anyio.sleep(2.5 * shared.job_lease_s)
                running = await _job(b, location)
                assert running["state"] == "running"
        double.release.set()
        done = await _until(a, location, lambda j: j["state"] == "done", 60)
        await anyio.sleep(2 * shared.job_lease_s)  # the plan must not change after "done"
        later = await _job(a, location)
    assert later["plan_id"] == done["plan_id"]
    assert done["attempts"] == 1
    assert _plans_of(shared, job_id) == [done["plan_id"]]


async def test_jobs_of_a_killed_replica_are_adopted(
    shared: Settings, real_solve: SolveFunction
) -> None:
    # A replica that was killed leaves its jobs held (queued and running) on leases it no
    # longer renews: written here as such a replica would have left them.
    store = Store(shared.database_url)
    store.ensure_schema()
    request = PlanRequest.model_validate(small_request(time_limit_s=1.0))
    dead = "killed-host:4242:deadbeef"
    ids = [f"{n:032x}" for n in range(1, 4)]
    store.add_job(ids[0], request, owner=dead, lease_s=shared.job_lease_s)
    store.add_job(ids[1], request, owner=dead, lease_s=shared.job_lease_s)
    store.add_job(ids[2], request, owner=dead, lease_s=shared.job_lease_s)
    assert store.claim_job(ids[0], dead, shared.job_lease_s) is not None  # it was running
    store.close()
    async with serving(create_app(shared, solve=real_solve)) as live:
        jobs = [
            await _until(live, f"/v1/jobs/{i}", lambda j: j["state"] == "done", 60) for i in ids
        ]
    assert [j["attempts"] for j in jobs] == [2, 1, 1]
    for job_id, job in zip(ids, jobs, strict=True):
        assert _plans_of(shared, job_id) == [job["plan_id"]]


async def test_cancelling_a_running_job_stops_it_and_stores_nothing(
    shared: Settings, real_solve: SolveFunction
) -> None:
    stopped = threading.Event()

    def endless(
        problem: Problem,
        *,
        progress: Callable[[ProgressEvent], None] | None = None,
        cancel: threading.Event | None = None,
    ) -> Plan:
        assert cancel is not None
        while not cancel.wait(0.01):
            pass
        stopped.set()
        return real_solve(problem, progress=progress, cancel=None)  # a plan it must not store

    async with serving(create_app(shared, solve=endless)) as client:
        location = (await client.post("/v1/jobs", json=small_request())).headers["location"]
        await _until(client, location, lambda j: j["state"] == "running", 30)
        cancelled = await client.delete(location)
        with anyio.fail_after(4 * shared.job_lease_s):
            while not stopped.is_set():
                await anyio.sleep(0.02)
        await anyio.sleep(0.5)
        after = await _job(client, location)
        again = await client.delete(location)
        unknown = await client.delete("/v1/jobs/" + "0" * 32)
    assert cancelled.status_code == 200
    assert cancelled.json()["state"] == "cancelled"
    assert after["state"] == "cancelled"
    assert after["plan_id"] is None
    assert _plans_of(shared, location.rsplit("/", 1)[-1]) == []
    assert again.status_code == 409
    assert again.headers["content-type"] == "application/problem+json"
    assert unknown.status_code == 404


async def test_a_cancelled_queued_job_never_runs(
    settings: Settings, real_solve: SolveFunction
) -> None:
    double = BlockingSolve(real_solve)
    async with serving(create_app(settings, solve=double)) as client:
        first = (await client.post("/v1/jobs", json=small_request(name="first"))).headers
        second = (await client.post("/v1/jobs", json=small_request(name="second"))).headers
        await _entered(double, 1)
        cancelled = await client.delete(second["location"])
        double.release.set()
        await _until(client, first["location"], lambda j: j["state"] == "done", 60)
        await anyio.sleep(0.3)
        after = await _job(client, second["location"])
    assert cancelled.json()["state"] == "cancelled"
    assert after["state"] == "cancelled"
    assert after["attempts"] == 0
    assert not double.entered.acquire(blocking=False)  # the second solve never started


async def test_a_running_job_shows_its_stage_and_gap(
    settings: Settings, real_solve: SolveFunction
) -> None:
    async with serving(create_app(settings, solve=real_solve)) as client:
        location = (await client.post("/v1/jobs", json=small_request(time_limit_s=2.0))).headers[
            "location"
        ]
        seen = await _until(client, location, lambda j: j["progress"] is not None, 60)
        await _until(client, location, lambda j: j["state"] == "done", 60)
    assert seen["progress"]["stage"]
    assert "optimality_gap" in seen["progress"]


def test_the_store_refuses_a_second_claim_and_a_second_plan(settings: Settings) -> None:
    store = Store(settings.database_url)
    store.ensure_schema()
    request = PlanRequest.model_validate(small_request())
    store.add_job("a" * 32, request)
    assert store.claim_job("a" * 32, "one", 30.0) is not None
    assert store.claim_job("a" * 32, "two", 30.0) is None  # held on a live lease
    assert store.renew_leases(process_owner(), ["a" * 32], 30.0) == set()
    store.close()
