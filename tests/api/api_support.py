"""Helpers of the API tests: the small invented request, an in-process client, a solve double.

Requests are small invented scenarios with short time limits so the whole API suite stays fast.
"""

from __future__ import annotations

import copy
import os
import threading
import time
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Any

import httpx
from db_support import POSTGRES_URL as POSTGRES_URL  # kept importable from here
from db_support import fresh_postgres_url
from fastapi import FastAPI

from service.runtime import SolveFunction
from service.settings import Settings
from service.store import Store
from solver.model import Plan, Problem, ProgressEvent

SMALL_REQUEST: dict[str, Any] = {
    "name": "test: invented two-link block",
    "block": {"start_hz": 2.40e9, "stop_hz": 2.41e9, "raster_hz": 10e3},
    "leakage_limit_db": 30.0,
    "transmitter": {"filter_span_symbols": 16, "rolloffs": [0.2, 0.35]},
    "coding": {"block_length_bits": 16200, "implementation_loss_db": 1.0},
    "demands": [
        {"id": "north", "min_rate_bps": 1e6, "target_rate_bps": 2e6, "esn0_db": 12.0},
        {"id": "south", "min_rate_bps": 1e6, "target_rate_bps": 3e6, "cn0_dbhz": 78.0},
    ],
    "time_limit_s": 3.0,
}


def small_request(**changes: Any) -> dict[str, Any]:
    """A deep copy of the small request with top-level fields replaced."""
    request = copy.deepcopy(SMALL_REQUEST)
    request.update(changes)
    return request


def crowded_request(name: str, time_limit_s: float) -> dict[str, Any]:
    """70 demands over-subscribing the small request's 10 MHz block: a solve that takes a
    couple of seconds (for tests that must catch one mid-solve)."""
    demands = [
        {
            "id": f"d{i}",
            "min_rate_bps": 0.3e6 + 0.05e6 * (i % 7),
            "target_rate_bps": 0.8e6 + 0.2e6 * (i % 5),
            "esn0_db": 9.0 + (i * 7) % 11,
            "priority": 1 + i % 4,
        }
        for i in range(70)
    ]
    return small_request(name=name, demands=demands, time_limit_s=time_limit_s)


@asynccontextmanager
async def serving(app: FastAPI) -> AsyncIterator[httpx.AsyncClient]:
    """Run the app's lifespan and yield a client talking to it in-process."""
    async with app.router.lifespan_context(app):
        # The server-error middleware re-raises after answering (so servers log it); the
        # client must see the answer, as it would over a socket.
        transport = httpx.ASGITransport(app=app, raise_app_exceptions=False)
        async with httpx.AsyncClient(transport=transport, base_url="http://testserver") as client:
            yield client


class BlockingSolve:
    """A test double of ``solver.solve`` that waits until released, then calls the real one.

    Only for tests of the service machinery (slots, 503, probes during a solve, job restart);
    every plan it returns still comes from the real solver.
    """

    def __init__(self, real: SolveFunction) -> None:
        self.real = real
        self.release = threading.Event()
        self.entered = threading.Semaphore(0)

    def __call__(
        self,
        problem: Problem,
        *,
        progress: Callable[[ProgressEvent], None] | None = None,
        cancel: threading.Event | None = None,
    ) -> Plan:
        self.entered.release()
        while not self.release.wait(0.01):
            if cancel is not None and cancel.is_set():
                break
        return self.real(problem, progress=progress, cancel=cancel)


def on_postgres(settings: Settings, *, migrated: bool = True) -> Settings:
    """``settings`` with a fresh schema of the test PostgreSQL database as the store, brought to
    the newest migration (as ``bandwright db upgrade`` does; replicas never migrate it), or left
    empty with ``migrated=False``.  The test is skipped when there is no test database."""
    url = fresh_postgres_url()
    if migrated:
        store = Store(url)
        store.upgrade_schema()
        store.close()
    return settings.model_copy(update={"database_url": url})


# ----------------------------------------------------------------------------- drawing doubles
# They run in the picture worker processes, so they are module-level functions (picklable),
# bound to their arguments with functools.partial.


def sized_picture(
    size: int, plan_json: str, request_json: str, fmt: str, parent_json: str | None = None
) -> bytes:
    """A drawing double: a picture of ``size`` bytes, drawn at once (no matplotlib)."""
    return b"<svg/>".ljust(size)


HELD_PICTURE = b"<svg>held</svg>"


def held_picture(
    folder: str, plan_json: str, request_json: str, fmt: str, parent_json: str | None = None
) -> bytes:
    """A drawing double that keeps working until released: it writes ``pid-<its pid>`` into
    ``folder``, then works until a file ``release`` appears there."""
    here = Path(folder)
    (here / f"pid-{os.getpid()}").write_text(plan_json)
    while not (here / "release").exists():
        sum(range(20_000))  # a little CPU work, as a drawing does
        time.sleep(0.005)
    return HELD_PICTURE
