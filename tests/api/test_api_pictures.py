"""Spectrum pictures: drawn once and kept in bounded memory, drawn in a bounded pool of worker
processes, and stopped when the client leaves.

The drawing doubles (:func:`api_support.held_picture`, :func:`api_support.sized_picture`) run
in the worker processes like the real drawing; a held drawing writes its process id, so a test
can see the process that did the work end.  Retry-After: RFC 9110 §10.2.3; 304 and ETag:
RFC 9110 §15.4.5 and §8.8.3.
"""

from __future__ import annotations

import functools
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import anyio
import httpx
import pytest
from api_support import HELD_PICTURE, held_picture, serving, sized_picture, small_request
from fastapi import FastAPI

from service.app import create_app
from service.pictures import Pictures
from service.settings import Settings

pytestmark = pytest.mark.anyio

WITHIN_S = 60.0
"""Bound on waiting for a worker to start or end (never reached when things work)."""


@pytest.fixture
def drawing(settings: Settings) -> Settings:
    return settings.model_copy(
        update={"picture_workers": 1, "picture_queue": 1, "solve_rate_limit": ""}
    )


def _counter(metrics: str, sample: str) -> float:
    for line in metrics.splitlines():
        if line.startswith(sample + " "):
            return float(line.split()[-1])
    return 0.0


def _running(pid: int) -> bool:
    """Whether process ``pid`` exists and has not ended (a zombie has ended)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except FileNotFoundError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] not in ("Z", "X")


async def _until(condition: Callable[[], bool], what: str) -> None:
    deadline = time.monotonic() + WITHIN_S
    while not condition():
        if time.monotonic() > deadline:
            pytest.fail(f"not within {WITHIN_S} s: {what}")
        await anyio.sleep(0.02)


def _pids(folder: Path) -> list[int]:
    return sorted(int(p.name.removeprefix("pid-")) for p in folder.glob("pid-*"))


async def _get_and_leave(app: FastAPI, path: str, leave: anyio.Event, sent: list[Any]) -> None:
    """GET ``path`` over raw ASGI and disconnect once ``leave`` is set."""
    scope = {
        "type": "http",
        "asgi": {"version": "3.0"},
        "http_version": "1.1",
        "method": "GET",
        "scheme": "http",
        "path": path,
        "raw_path": path.encode(),
        "query_string": b"",
        "headers": [(b"host", b"testserver")],
        "client": ("127.0.0.1", 50001),
        "server": ("testserver", 80),
    }
    asked = False

    async def receive() -> dict[str, Any]:
        nonlocal asked
        if not asked:
            asked = True
            return {"type": "http.request", "body": b"", "more_body": False}
        await leave.wait()
        return {"type": "http.disconnect"}

    async def send(message: dict[str, Any]) -> None:
        sent.append(message)

    await app(scope, receive, send)


async def _plan(client: httpx.AsyncClient, name: str = "pictured") -> str:
    created = await client.post("/v1/plans", json=small_request(name=name))
    assert created.status_code == 201, created.text
    return str(created.headers["Location"])


def _pictures(app: FastAPI) -> Pictures:
    pictures: Pictures = app.state.pictures
    return pictures


async def test_a_picture_is_drawn_once_then_served_from_memory(drawing: Settings) -> None:
    async with serving(create_app(drawing)) as client:  # the real drawing, in a worker
        where = await _plan(client)
        first = await client.get(where + "/spectrum.svg")
        second = await client.get(where + "/spectrum.svg")
        png = await client.get(where + "/spectrum.png")
        revalidated = await client.get(
            where + "/spectrum.png", headers={"If-None-Match": png.headers["ETag"]}
        )
        metrics = (await client.get("/metrics")).text
    assert first.status_code == second.status_code == png.status_code == 200
    assert first.content.startswith(b"<?xml") and png.content.startswith(b"\x89PNG")
    assert second.content == first.content and second.headers["ETag"] == first.headers["ETag"]
    assert png.headers["ETag"] != first.headers["ETag"]
    assert revalidated.status_code == 304
    assert _counter(metrics, 'bandwright_pictures_drawn_total{format="svg"}') == 1
    assert _counter(metrics, 'bandwright_pictures_drawn_total{format="png"}') == 1
    assert _counter(metrics, "bandwright_picture_cache_hits_total") == 2  # 2nd SVG, the 304


async def test_kept_pictures_are_bounded_in_bytes_least_recently_used_out(
    drawing: Settings,
) -> None:
    size = 1000
    room_for_two = drawing.model_copy(update={"picture_cache_bytes": 2 * size + 200})
    app = create_app(room_for_two, draw=functools.partial(sized_picture, size))
    async with serving(app) as client:
        plans = [await _plan(client, f"plan {k}") for k in range(3)]
        drawn = [await client.get(where + "/spectrum.svg") for where in plans]
        newest = await client.get(plans[2] + "/spectrum.svg")  # still kept
        oldest = await client.get(plans[0] + "/spectrum.svg")  # pushed out by the third
        metrics = (await client.get("/metrics")).text
    assert [a.status_code for a in (*drawn, newest, oldest)] == [200] * 5
    assert len(oldest.content) == size
    assert _counter(metrics, 'bandwright_pictures_drawn_total{format="svg"}') == 4
    assert _counter(metrics, "bandwright_picture_cache_hits_total") == 1


async def test_a_client_that_leaves_stops_the_drawing_process(
    drawing: Settings, tmp_path: Path
) -> None:
    folder = tmp_path / "drawing"
    folder.mkdir()
    app = create_app(drawing, draw=functools.partial(held_picture, str(folder)))
    async with serving(app) as client:
        path = (await _plan(client)).removeprefix("http://testserver") + "/spectrum.svg"
        leave, sent = anyio.Event(), []
        async with anyio.create_task_group() as group:
            group.start_soon(_get_and_leave, app, path, leave, sent)
            await _until(lambda: len(_pids(folder)) == 1, "the drawing started")
            [worker] = _pids(folder)
            assert _running(worker)
            leave.set()
        await _until(lambda: not _running(worker), f"worker {worker} ended")
        assert _pictures(app).drawing == 0
        (folder / "release").touch()  # from here a drawing ends by itself
        again = await client.get(path)
        metrics = (await client.get("/metrics")).text
    assert sent[0]["status"] == 499  # logged as a client gone; nobody receives it
    assert again.status_code == 200 and again.content == HELD_PICTURE
    assert len(_pids(folder)) == 2  # drawn anew: nothing of the stopped drawing was kept
    assert _counter(metrics, 'bandwright_pictures_drawn_total{format="svg"}') == 1


async def test_a_drawing_goes_on_while_another_client_waits_for_it(
    drawing: Settings, tmp_path: Path
) -> None:
    folder = tmp_path / "drawing"
    folder.mkdir()
    app = create_app(drawing, draw=functools.partial(held_picture, str(folder)))
    stayed: list[httpx.Response] = []
    async with serving(app) as client:
        path = (await _plan(client)).removeprefix("http://testserver") + "/spectrum.svg"
        leave, sent = anyio.Event(), []

        async def stay() -> None:
            stayed.append(await client.get(path))

        async with anyio.create_task_group() as group:
            group.start_soon(_get_and_leave, app, path, leave, sent)
            await _until(lambda: len(_pids(folder)) == 1, "the drawing started")
            group.start_soon(stay)
            await _until(lambda: _pictures(app).waiting == 2, "both clients wait")
            leave.set()
            await _until(lambda: bool(sent), "the first client's request ended")
            [worker] = _pids(folder)
            assert _running(worker)  # one client still waits: the drawing goes on
            (folder / "release").touch()
    assert sent[0]["status"] == 499
    assert stayed[0].status_code == 200 and stayed[0].content == HELD_PICTURE
    assert len(_pids(folder)) == 1  # one drawing served both


async def test_past_the_drawing_places_the_answer_is_503_with_retry_after(
    drawing: Settings, tmp_path: Path
) -> None:
    folder = tmp_path / "drawing"
    folder.mkdir()
    one_place = drawing.model_copy(update={"picture_workers": 1, "picture_queue": 0})
    app = create_app(one_place, draw=functools.partial(held_picture, str(folder)))
    answers: list[httpx.Response] = []
    async with serving(app) as client:
        first, second = await _plan(client, "first"), await _plan(client, "second")

        async def get(path: str) -> None:
            answers.append(await client.get(path))

        async with anyio.create_task_group() as group:
            group.start_soon(get, first + "/spectrum.svg")
            await _until(lambda: len(_pids(folder)) == 1, "the first drawing started")
            with anyio.fail_after(WITHIN_S):  # a drawing place would hold it until released
                busy = await client.get(second + "/spectrum.svg")
            group.start_soon(get, first + "/spectrum.svg")  # the same picture: it waits
            await _until(lambda: _pictures(app).waiting == 2, "both clients of it wait")
            (folder / "release").touch()
    assert busy.status_code == 503
    assert busy.headers["content-type"].startswith("application/problem+json")
    assert busy.json()["type"] == "urn:bandwright:problem:pictures-busy"  # RFC 8141 URN
    assert busy.headers["Retry-After"] == str(one_place.retry_after_s)
    assert [a.status_code for a in answers] == [200, 200]
    assert len(_pids(folder)) == 1
