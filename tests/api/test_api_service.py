"""Service machinery: solve slots and 503, probes during a long solve, jobs across a restart,
metrics and readiness (a store unreachable, or its schema behind this version).

Sources: RFC 9110 §15.6.4 (503 Service Unavailable) with §10.2.3 (Retry-After, delay in seconds)
and §15.3.3 (202 Accepted); Prometheus text exposition format 0.0.4 (``# TYPE`` lines, counter
samples ending in ``_total``, histogram ``_bucket``/``_count``/``_sum`` samples).
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

import anyio
import httpx
import pytest
import sqlalchemy as sa
from alembic import command
from api_support import BlockingSolve, on_postgres, serving, small_request

from service.app import create_app
from service.migrations import alembic_config, head_revision
from service.runtime import SolveFunction, new_id
from service.schemas import JobState, PlanRequest
from service.settings import Settings
from service.store import Store, utc_now

pytestmark = pytest.mark.anyio

HEALTH_LATENCY_BOUND_S = 0.5  # generous for 2 cores; the solve itself is held for seconds
JOB_TIMEOUT_S = 60.0


async def _wait_entered(double: BlockingSolve, count: int) -> None:
    for _ in range(count):
        acquired = await anyio.to_thread.run_sync(double.entered.acquire, True, 30.0)
        assert acquired, "the solve never started"


async def test_past_the_bound_is_503_with_retry_after(
    settings: Settings, real_solve: SolveFunction
) -> None:
    # settings: 2 running + 1 waiting; the 4th concurrent request must be refused.
    double = BlockingSolve(real_solve)
    async with (
        serving(create_app(settings, solve=double)) as client,
        anyio.create_task_group() as tg,
    ):
        answers: list[httpx.Response] = []

        async def post() -> None:
            answers.append(await client.post("/v1/plans", json=small_request(time_limit_s=1.0)))

        for _ in range(3):
            tg.start_soon(post)
        await _wait_entered(double, 2)
        await anyio.sleep(0.2)  # the third is now waiting for a slot
        started = time.perf_counter()
        health = await client.get("/healthz")
        health_latency_s = time.perf_counter() - started
        refused = await client.post("/v1/plans", json=small_request())
        double.release.set()
    assert health.status_code == 200
    assert health_latency_s < HEALTH_LATENCY_BOUND_S
    assert refused.status_code == 503
    assert refused.headers["content-type"].startswith("application/problem+json")
    assert refused.headers["retry-after"] == str(settings.retry_after_s)
    assert sorted(a.status_code for a in answers) == [201, 201, 201]


async def _wait_job(client: httpx.AsyncClient, location: str, state: str) -> dict[str, object]:
    deadline = time.monotonic() + JOB_TIMEOUT_S
    while time.monotonic() < deadline:
        job: dict[str, object] = (await client.get(location)).json()
        if job["state"] == state:
            return job
        assert job["state"] != "failed", job
        await anyio.sleep(0.05)
    raise AssertionError(f"job {location} never reached {state}")


async def test_job_lifecycle(settings: Settings, real_solve: SolveFunction) -> None:
    async with serving(create_app(settings, solve=real_solve)) as client:
        accepted = await client.post("/v1/jobs", json=small_request(time_limit_s=1.0))
        assert accepted.status_code == 202
        assert accepted.headers["retry-after"] == str(settings.retry_after_s)
        location = accepted.headers["location"]
        assert location == f"/v1/jobs/{accepted.json()['id']}"
        assert accepted.json()["state"] in {"queued", "running"}
        done = await _wait_job(client, location, "done")
        plan = await client.get(str(done["plan_url"]))
        invalid = await client.post("/v1/jobs", json=small_request(time_limit_s=0))
    assert plan.status_code == 200
    assert plan.json()["id"] == done["plan_id"]
    assert invalid.status_code == 422


async def test_jobs_survive_a_restart(stores: Settings, real_solve: SolveFunction) -> None:
    double = BlockingSolve(real_solve)
    async with serving(create_app(stores, solve=double)) as client:
        first = (await client.post("/v1/jobs", json=small_request(name="first"))).headers
        second = (await client.post("/v1/jobs", json=small_request(name="second"))).headers
        await _wait_entered(double, 1)
        assert (await client.get(second["location"])).json()["state"] == "queued"
        # Leaving the block shuts the app down while "first" runs and "second" waits.
    store = Store(stores.database_url)
    for headers in (first, second):
        record = store.get_job(headers["location"].rsplit("/", 1)[-1])
        assert record is not None
        assert record.job.state is JobState.QUEUED
    store.close()
    async with serving(create_app(stores, solve=real_solve)) as client:
        for headers in (first, second):
            job = await _wait_job(client, headers["location"], "done")
            assert (await client.get(str(job["plan_url"]))).status_code == 200


async def test_metrics_count_routes_and_solves(
    settings: Settings, real_solve: SolveFunction
) -> None:
    async with serving(create_app(settings, solve=real_solve)) as client:
        created = await client.post("/v1/plans", json=small_request(time_limit_s=1.0))
        await client.get(f"/v1/plans/{created.json()['id']}")
        text = (await client.get("/metrics")).text
    assert "# TYPE bandwright_http_requests_total counter" in text
    assert 'route="/v1/plans/{plan_id}"' in text
    assert (
        'bandwright_http_requests_total{method="POST",route="/v1/plans",status="201"} 1.0' in text
    )
    assert 'bandwright_solve_duration_seconds_count{mode="sync"} 1.0' in text
    status = created.json()["status"]
    assert f'bandwright_solves_total{{status="{status}"}} 1.0' in text


async def test_readyz_fails_while_the_store_is_unreachable(tmp_path: Path) -> None:
    missing = tmp_path / "not-yet"
    settings = Settings(database_url=f"sqlite:///{missing / 'plans.db'}")
    async with serving(create_app(settings)) as client:
        down = await client.get("/readyz")
        alive = await client.get("/healthz")
        missing.mkdir()
        up = await client.get("/readyz")
    assert (down.status_code, down.json()["store"]) == (503, "unreachable")
    assert alive.status_code == 200
    assert (up.status_code, up.json()["store"]) == (200, "ok")


def _left_by_the_previous_release(url: str) -> str:
    """Bring an empty database to revision 0001 (the schema before job leases) with one job
    queued in it, as the release before would have left it; the job's id."""
    job_id = new_id()
    request = PlanRequest.model_validate(small_request(time_limit_s=1.0)).model_dump_json()
    now = utc_now()
    engine = sa.create_engine(url)
    with engine.begin() as connection:
        command.upgrade(alembic_config(connection), "0001")
        connection.execute(
            sa.text(
                "INSERT INTO jobs (id, name, state, created_at, updated_at, request_json) "
                "VALUES (:id, 'left queued', 'queued', :now, :now, :request)"
            ),
            {"id": job_id, "now": now, "request": request},
        )
    engine.dispose()
    return job_id


async def test_readyz_is_503_on_a_schema_behind_until_db_upgrade_runs(
    settings: Settings, real_solve: SolveFunction, caplog: pytest.LogCaptureFixture
) -> None:
    behind = on_postgres(settings, migrated=False)  # replicas never migrate PostgreSQL
    job_id = _left_by_the_previous_release(behind.database_url)
    with caplog.at_level(logging.WARNING):
        async with serving(create_app(behind, solve=real_solve)) as client:
            down = await client.get("/readyz")
            refused = await client.post("/v1/plans", json=small_request())
            store = Store(behind.database_url)
            store.upgrade_schema()  # what `bandwright db upgrade` does
            store.close()
            up = await client.get("/readyz")
            job = await _wait_job(client, f"/v1/jobs/{job_id}", "done")
    assert (down.status_code, down.json()["store"]) == (503, "outdated")
    assert "0001, behind this version's" in down.json()["detail"]
    assert "run `bandwright db upgrade`" in down.json()["detail"]
    assert refused.status_code == 503 and "bandwright db upgrade" in refused.json()["detail"]
    assert (up.status_code, up.json()["store"]) == (200, "ok")
    assert "store not ready at start-up" in caplog.text
    assert job["attempts"] == 1  # the queue started once the store was ready


async def test_the_embedded_sqlite_store_migrates_itself_at_start(
    settings: Settings, real_solve: SolveFunction
) -> None:
    job_id = _left_by_the_previous_release(settings.database_url)
    async with serving(create_app(settings, solve=real_solve)) as client:
        ready = await client.get("/readyz")
        await _wait_job(client, f"/v1/jobs/{job_id}", "done")
    store = Store(settings.database_url)
    assert store.schema_state().current == head_revision()
    store.close()
    assert ready.status_code == 200
