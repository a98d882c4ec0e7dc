"""Idempotency-Key on POST /v1/plans and /v1/jobs (IETF HTTP API working group draft, "The
Idempotency-Key HTTP Header Field": the same key and payload give the first answer again; the
same key with another payload is an error, here a 422 problem naming the header)."""

from __future__ import annotations

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

pytestmark = pytest.mark.anyio


@pytest.mark.parametrize(("path", "status"), [("/v1/plans", 201), ("/v1/jobs", 202)])
async def test_the_same_key_and_body_give_the_first_answer_again(
    app: FastAPI, path: str, status: int
) -> None:
    key = {"Idempotency-Key": "nightly-2026-12-02-north"}
    async with serving(app) as client:
        first = await client.post(path, json=small_request(), headers=key)
        again = await client.post(path, json=small_request(), headers=key)
        other = await client.post(path, json=small_request(name="another"), headers=key)
        fresh = await client.post(path, json=small_request())
        plans = (await client.get("/v1/plans")).json()
    assert first.status_code == again.status_code == status, first.text
    assert again.json() == first.json()
    assert again.headers["Location"] == first.headers["Location"]
    assert again.headers["Idempotent-Replayed"] == "true"
    assert other.status_code == 422 and other.json()["errors"][0]["field"] == "Idempotency-Key"
    assert fresh.status_code == status and fresh.json()["id"] != first.json()["id"]
    if path == "/v1/plans":
        assert plans["total"] == 2  # the replay stored nothing new


async def test_a_key_is_kept_per_credential(app: FastAPI) -> None:
    key = {"Idempotency-Key": "k1"}
    async with serving(app) as client:
        one = await client.post("/v1/plans", json=small_request(), headers=key)
        two = await client.post(
            "/v1/plans", json=small_request(), headers=key | {"Authorization": "Bearer other"}
        )
    assert one.status_code == two.status_code == 201
    assert one.json()["id"] != two.json()["id"]
