"""Fixtures of the API tests: settings on a temporary SQLite file, an app, the real solver."""

from __future__ import annotations

from pathlib import Path

import pytest
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


@pytest.fixture
def real_solve() -> SolveFunction:
    from solver import solve

    solve_fn: SolveFunction = solve
    return solve_fn


@pytest.fixture
def app(settings: Settings) -> FastAPI:
    return create_app(settings)
