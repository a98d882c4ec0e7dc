"""Fixtures of the API tests: settings on a temporary SQLite file (or, for the store tests, on
SQLite and on PostgreSQL), an app, the real solver."""

from __future__ import annotations

from pathlib import Path

import pytest
from api_support import on_postgres
from db_support import BACKENDS
from fastapi import FastAPI

from service.app import create_app
from service.runtime import SolveFunction
from service.settings import Settings


@pytest.fixture
def anyio_backend() -> str:
    return "asyncio"


@pytest.fixture
def settings(tmp_path: Path) -> Settings:
    return Settings(
        database_url=f"sqlite:///{tmp_path / 'plans.db'}",
        max_concurrent_solves=2,
        max_queued=1,
        workers_per_solve=1,
        job_workers=1,
        retry_after_s=3,
        progress_interval_s=0.01,
    )


@pytest.fixture(params=BACKENDS)
def stores(request: pytest.FixtureRequest, settings: Settings) -> Settings:
    """``settings`` on SQLite, then on PostgreSQL: the tests that go through the store run on
    both (the PostgreSQL run is skipped when there is no test database)."""
    return settings if request.param == "sqlite" else on_postgres(settings)


@pytest.fixture
def real_solve() -> SolveFunction:
    from solver import solve

    solve_fn: SolveFunction = solve
    return solve_fn


@pytest.fixture
def app(settings: Settings) -> FastAPI:
    return create_app(settings)
