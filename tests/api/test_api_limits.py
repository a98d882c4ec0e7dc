"""Limits: request rates per API key, a cap on each key's jobs, and the work-size limit.

Sources: RFC 6585 §4 (429 Too Many Requests: "the user has sent too many requests in a given
amount of time"; the answer should say why and may carry Retry-After); RFC 9110 §10.2.3
(Retry-After as delay-seconds, a non-negative integer); RFC 9457 (problem details).
"""

from __future__ import annotations

import logging
import shutil
import socket
import subprocess
import time
from collections.abc import Iterator
from typing import Any

import httpx
import pytest
from api_support import BlockingSolve, serving, small_request

from service.app import create_app
from service.keys import Scope, create_key
from service.runtime import SolveFunction
from service.schemas import JobState
from service.settings import Settings
from service.store import Store

pytestmark = pytest.mark.anyio

MODULATIONS = 7
"""Modulations of the default MODCOD set, each allowed when a demand lists none: QPSK, 8PSK,
16APSK, 32APSK (ETSI EN 302 307-1) and 16QAM, 64QAM, 256QAM (3GPP TS 38.214 Table 5.1.3.1-2)."""
CODE_RATE_ENTRIES = 16
"""The most entries of one modulation in that set: QPSK's eleven DVB-S2 code rates
(EN 302 307-1 §5.3) and the five QPSK rows of TS 38.214 Table 5.1.3.1-2 (MCS 0–4)."""


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _keys(settings: Settings, *scopes: Scope) -> list[dict[str, str]]:
    """Bearer headers of new keys of ``scopes`` (once a key exists the service needs one)."""
    store = Store(settings.database_url)
    store.ensure_schema()
    keys = [create_key(store, scope, f"test {scope}", settings.keys_pepper)[0] for scope in scopes]
    store.close()
    return [{"Authorization": f"Bearer {key}"} for key in keys]


def _assert_too_many(answer: httpx.Response, slug: str, window_s: int) -> None:
    assert answer.status_code == 429, answer.text
    assert answer.headers["content-type"].startswith("application/problem+json")
    body = answer.json()
    # the service's own problem-type URN (RFC 8141 syntax; README "HTTP"), not a web address
    assert body["type"] == f"urn:bandwright:problem:{slug}" and body["status"] == 429
    retry_after = answer.headers["Retry-After"]
    assert retry_after.isdigit() and 1 <= int(retry_after) <= window_s  # RFC 9110 delay-seconds


# ----------------------------------------------------------------------------- request rates


async def test_past_the_request_rate_the_answer_is_429_with_retry_after(settings: Settings) -> None:
    limited = settings.model_copy(update={"rate_limit": "3/minute"})
    async with serving(create_app(limited)) as client:
        answers = [await client.get("/v1/plans") for _ in range(4)]
    assert [a.status_code for a in answers[:3]] == [200, 200, 200]
    _assert_too_many(answers[3], "rate-limited", 60)
    assert "BANDWRIGHT_RATE_LIMIT" in answers[3].json()["detail"]
    assert "client address" in answers[3].json()["detail"]  # served open: counted per address


async def test_each_api_key_has_a_count_of_its_own(settings: Settings) -> None:
    limited = settings.model_copy(update={"rate_limit": "2/minute"})
    first, second = _keys(limited, Scope.READ, Scope.READ)
    async with serving(create_app(limited)) as client:  # one client address for both keys
        used = [await client.get("/v1/plans", headers=first) for _ in range(3)]
        other = await client.get("/v1/plans", headers=second)
    assert [a.status_code for a in used] == [200, 200, 429]
    assert "API key" in used[2].json()["detail"]
    assert other.status_code == 200


async def test_the_probes_are_never_limited(settings: Settings) -> None:
    limited = settings.model_copy(update={"rate_limit": "1/minute"})
    async with serving(create_app(limited)) as client:
        probes = [await client.get(path) for path in ("/healthz", "/readyz") * 5]
        reads = [await client.get("/v1/modcods") for _ in range(2)]
    assert [p.status_code for p in probes] == [200] * 10
    assert [r.status_code for r in reads] == [200, 429]


async def test_solving_posts_count_against_the_stricter_solve_rate(settings: Settings) -> None:
    limited = settings.model_copy(
        update={"rate_limit": "50/minute", "solve_rate_limit": "2/minute"}
    )
    async with serving(create_app(limited)) as client:
        plan = await client.post("/v1/plans", json=small_request(time_limit_s=1.0))
        job = await client.post("/v1/jobs", json=small_request(time_limit_s=1.0))
        refused = await client.post("/v1/plans", json=small_request(time_limit_s=1.0))
        invalid = await client.post("/v1/jobs", json={"demands": "not a list"})
        reads = await client.get("/v1/plans")
    assert (plan.status_code, job.status_code) == (201, 202)
    _assert_too_many(refused, "rate-limited", 60)
    assert "BANDWRIGHT_SOLVE_RATE_LIMIT" in refused.json()["detail"]
    _assert_too_many(invalid, "rate-limited", 60)  # counted before the body is even validated
    assert reads.status_code == 200  # reads keep their own, wider rate


async def test_a_storage_that_is_down_lets_requests_through_and_says_so(
    settings: Settings, caplog: pytest.LogCaptureFixture
) -> None:
    nobody_there = f"redis://127.0.0.1:{_free_port()}/0"  # a closed port: connection refused
    down = settings.model_copy(update={"broker_url": nobody_there, "rate_limit": "1/minute"})
    with caplog.at_level(logging.WARNING, logger="service.ratelimit"):
        async with serving(create_app(down)) as client:
            answers = [await client.get("/v1/plans") for _ in range(3)]
            metrics = (await client.get("/metrics")).text
    assert [a.status_code for a in answers] == [200, 200, 200]  # counted, the 2nd would be 429
    warnings = [r for r in caplog.records if "rate-limit storage (redis) failed" in r.message]
    assert len(warnings) == 1  # logged, not once per request
    assert "bandwright_rate_limit_storage_failures_total 4.0" in metrics  # 3 reads + /metrics


@pytest.fixture
def redis_url() -> Iterator[str]:
    """A private Redis server on a free loopback port (skipped where none is installed)."""
    binary = shutil.which("redis-server")
    if binary is None:
        pytest.skip("redis-server is not installed (Debian package redis-server)")
    port = _free_port()
    server = subprocess.Popen(
        [binary, "--port", str(port), "--bind", "127.0.0.1", "--save", "", "--appendonly", "no"],
        stdout=subprocess.DEVNULL,
    )
    try:
        deadline = time.monotonic() + 20.0
        while True:
            try:
                socket.create_connection(("127.0.0.1", port), timeout=0.5).close()
                break
            except OSError:
                if time.monotonic() > deadline or server.poll() is not None:
                    pytest.fail("redis-server did not start")
                time.sleep(0.05)
        yield f"redis://127.0.0.1:{port}/0"
    finally:
        server.terminate()
        server.wait(timeout=10)


async def test_replicas_on_one_redis_share_the_counts(settings: Settings, redis_url: str) -> None:
    shared = settings.model_copy(update={"broker_url": redis_url, "rate_limit": "3/minute"})
    one, two = create_app(shared), create_app(shared)
    async with serving(one) as first, serving(two) as second:
        answers = [
            await first.get("/v1/plans"),
            await second.get("/v1/plans"),
            await first.get("/v1/plans"),
            await second.get("/v1/plans"),
        ]
    assert [a.status_code for a in answers] == [200, 200, 200, 429]  # 2 + 2 against one count


# ----------------------------------------------------------------------------- jobs per key


async def test_a_key_past_its_job_cap_gets_429_naming_the_cap(
    settings: Settings, real_solve: SolveFunction
) -> None:
    capped = settings.model_copy(update={"max_jobs_per_key": 2, "solve_rate_limit": ""})
    first, second = _keys(capped, Scope.PLAN, Scope.PLAN)
    held = BlockingSolve(real_solve)  # jobs stay running or queued until released
    async with serving(create_app(capped, solve=held)) as client:
        body = small_request(time_limit_s=1.0)
        kept = [await client.post("/v1/jobs", json=body, headers=first) for _ in range(2)]
        refused = await client.post("/v1/jobs", json=body, headers=first)
        other = await client.post("/v1/jobs", json=body, headers=second)
        await client.delete(kept[1].headers["Location"], headers=first)
        after_cancel = await client.post("/v1/jobs", json=body, headers=first)
        held.release.set()
    assert [a.status_code for a in kept] == [202, 202]
    _assert_too_many(refused, "too-many-jobs", capped.retry_after_s)
    assert int(refused.headers["Retry-After"]) == capped.retry_after_s
    assert "2 queued or running jobs" in refused.json()["detail"]
    assert "cap is 2" in refused.json()["detail"]
    assert other.status_code == 202  # another key's jobs are its own
    assert after_cancel.status_code == 202  # a cancelled job no longer counts


async def test_a_batch_that_would_pass_the_job_cap_is_refused_whole(
    settings: Settings, real_solve: SolveFunction
) -> None:
    capped = settings.model_copy(update={"max_jobs_per_key": 3, "solve_rate_limit": ""})
    [key] = _keys(capped, Scope.PLAN)
    held = BlockingSolve(real_solve)
    app = create_app(capped, solve=held)
    body = small_request(time_limit_s=1.0)
    async with serving(app) as client:
        single = await client.post("/v1/jobs", json=body, headers=key)
        too_big = await client.post(
            "/v1/batches", json={"name": "nightly", "items": [body] * 3}, headers=key
        )
        stored = sum(app.state.runtime.store.count_jobs(state) for state in JobState)
        fits = await client.post(
            "/v1/batches", json={"name": "nightly", "items": [body] * 2}, headers=key
        )
        held.release.set()
    assert single.status_code == 202
    _assert_too_many(too_big, "too-many-jobs", capped.retry_after_s)
    assert "3 more cannot be queued" in too_big.json()["detail"]
    assert stored == 1  # none of the batch's items was queued
    assert fits.status_code == 202, fits.text


async def test_a_batch_counts_once_against_the_solve_rate(settings: Settings) -> None:
    limited = settings.model_copy(update={"solve_rate_limit": "1/minute"})
    batch = {"name": "nightly", "items": [small_request(time_limit_s=1.0)] * 2}
    async with serving(create_app(limited)) as client:
        first = await client.post("/v1/batches", json=batch)
        second = await client.post("/v1/batches", json=batch)
    assert first.status_code == 202, first.text
    _assert_too_many(second, "rate-limited", 60)


# ----------------------------------------------------------------------------- work size


def _demands(count: int, **extra: Any) -> list[dict[str, Any]]:
    return [
        {"id": f"d{i}", "min_rate_bps": 1e6, "target_rate_bps": 2e6, "esn0_db": 12.0, **extra}
        for i in range(count)
    ]


def _fields(answer: httpx.Response) -> dict[str, str]:
    return {e["field"]: e["message"] for e in answer.json()["errors"]}


async def test_a_request_over_the_work_size_is_refused_naming_its_fields(
    settings: Settings,
) -> None:
    limit = 1000
    sized = settings.model_copy(update={"max_work_configurations": limit, "solve_rate_limit": ""})
    two_rolloffs = small_request(demands=_demands(5))  # SMALL_REQUEST lists two roll-offs
    expected = 5 * MODULATIONS * CODE_RATE_ENTRIES * 2
    one_rolloff = small_request(
        demands=_demands(5), transmitter={"filter_span_symbols": 16, "rolloffs": [0.2]}
    )
    app = create_app(sized)
    async with serving(app) as client:
        plan = await client.post("/v1/plans", json=two_rolloffs)
        job = await client.post("/v1/jobs", json=two_rolloffs)
        batch = await client.post(
            "/v1/batches", json={"name": "nightly", "items": [one_rolloff, two_rolloffs]}
        )
        jobs_stored = sum(app.state.runtime.store.count_jobs(state) for state in JobState)
        narrower = await client.post("/v1/plans", json=one_rolloff)
    assert expected > limit >= expected // 2  # the request is over only by its roll-offs
    for answer in (plan, job):
        assert answer.status_code == 422, answer.text
        fields = _fields(answer)
        assert {"demands", "transmitter.rolloffs", "demands[0].modulations"} <= fields.keys()
        assert f"{expected:,}" in fields["demands"] and f"{limit:,}" in fields["demands"]
        assert "2 roll-offs" in fields["transmitter.rolloffs"]
        assert f"{MODULATIONS} modulations of its MODCOD table" in fields["demands[0].modulations"]
    assert batch.status_code == 422, batch.text
    assert f"{expected:,}" in _fields(batch)["items[1].demands"]  # the item over it, by place
    assert jobs_stored == 0  # the job and the batch were refused before anything was stored
    assert narrower.status_code == 201, narrower.text  # half the configurations: under it


async def test_under_max_margin_the_width_grid_counts_too(settings: Settings) -> None:
    sized = settings.model_copy(update={"max_work_configurations": 1000, "solve_rate_limit": ""})
    demands = _demands(2, modulations=["QPSK"])  # 2 × 1 × 16 × 2 = 64 configurations as families
    families = small_request(demands=demands)
    margin = small_request(demands=demands, objective="max_margin")
    async with serving(create_app(sized)) as client:
        as_families = await client.post("/v1/plans", json=families)
        on_a_grid = await client.post("/v1/plans", json=margin)
    assert as_families.status_code == 201, as_families.text
    assert on_a_grid.status_code == 422, on_a_grid.text
    fields = _fields(on_a_grid)
    assert "max_margin" in fields["demands[0].target_rate_bps"]
    assert "1 modulations of its MODCOD table" in fields["demands[0].modulations"]


async def test_the_limit_is_checked_before_any_solve_starts(
    settings: Settings, real_solve: SolveFunction
) -> None:
    sized = settings.model_copy(update={"max_work_configurations": 10})
    held = BlockingSolve(real_solve)
    async with serving(create_app(sized, solve=held)) as client:
        answer = await client.post("/v1/plans", json=small_request())
        held.release.set()
    assert answer.status_code == 422
    assert not held.entered.acquire(blocking=False)  # the solve function was never called
