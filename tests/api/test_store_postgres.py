"""The plan store on a real PostgreSQL server (the scaled-out deployment's store).

Runs when ``BANDWRIGHT_TEST_POSTGRES_URL`` names a database (``.ci/run`` installs and starts
PostgreSQL from Debian's packages and sets it); skipped otherwise.  The same API round trips as
on SQLite: plans are stored and read back unchanged, pages count them, replans keep their parent,
and a job left queued by one app is finished by the next one on the same database.
"""

from __future__ import annotations

import pytest
from api_support import on_postgres, serving, small_request

from service.app import create_app
from service.runtime import SolveFunction
from service.settings import Settings

pytestmark = pytest.mark.anyio


@pytest.fixture
def pg_settings(settings: Settings) -> Settings:
    return on_postgres(settings)


async def test_plans_round_trip_on_postgres(
    pg_settings: Settings, real_solve: SolveFunction
) -> None:
    app = create_app(pg_settings, solve=real_solve)
    async with serving(app) as client:
        ready = await client.get("/readyz")
        assert ready.status_code == 200, ready.text
        created = await client.post("/v1/plans", json=small_request())
        assert created.status_code == 201, created.text
        plan = created.json()
        fetched = await client.get(created.headers["location"])
        assert fetched.json() == plan
        replan = await client.post(
            "/v1/plans", json=small_request(previous_plan_id=plan["id"], name="replan")
        )
        assert replan.status_code == 201, replan.text
        assert replan.json()["parent_id"] == plan["id"]
        page = await client.get("/v1/plans", params={"limit": 10})
        assert page.json()["total"] == 2


async def test_job_survives_a_restart_on_postgres(
    pg_settings: Settings, real_solve: SolveFunction
) -> None:
    first = create_app(pg_settings.model_copy(update={"job_workers": 1}), solve=real_solve)
    async with serving(first) as client:
        accepted = await client.post("/v1/jobs", json=small_request())
        assert accepted.status_code == 202, accepted.text
        job_url = accepted.headers["location"]
    second = create_app(pg_settings, solve=real_solve)
    async with serving(second) as client:
        for _ in range(600):
            job = (await client.get(job_url)).json()
            if job["state"] in ("done", "failed"):
                break
            import anyio

            await anyio.sleep(0.05)
        assert job["state"] == "done", job
