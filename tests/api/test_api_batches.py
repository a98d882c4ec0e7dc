"""Batches: many plan and replan requests fanned out as jobs, per-item status and a summary."""

from __future__ import annotations

from typing import Any

import anyio
import httpx
import pytest

from service.app import create_app
from service.runtime import SolveFunction
from service.settings import Settings
from service.store import Store
from tests.api.api_support import serving, small_request

pytestmark = pytest.mark.anyio


def _unreachable_demand() -> dict[str, Any]:
    # 50 Mb/s at 3 dB Es/N0 in a 10 MHz block: no MODCOD closes the link in that width.
    return {"id": "far", "min_rate_bps": 50e6, "target_rate_bps": 60e6, "esn0_db": 3.0}


async def _finished(client: httpx.AsyncClient, location: str) -> dict[str, Any]:
    with anyio.fail_after(120):
        while True:
            answer = await client.get(location)
            assert answer.status_code == 200
            batch: dict[str, Any] = answer.json()
            if batch["summary"]["finished"]:
                return batch
            assert answer.headers["retry-after"]
            await anyio.sleep(0.1)


async def test_a_batch_of_plans_and_a_replan_reports_each_item_and_the_worst(
    settings: Settings, real_solve: SolveFunction
) -> None:
    async with serving(create_app(settings, solve=real_solve)) as client:
        first = await client.post("/v1/plans", json=small_request(time_limit_s=1.0))
        assert first.status_code == 201
        items = [
            small_request(name="north block", time_limit_s=1.0),
            small_request(name="replan", time_limit_s=1.0, previous_plan_id=first.json()["id"]),
            small_request(name="hopeless", time_limit_s=1.0, demands=[_unreachable_demand()]),
        ]
        accepted = await client.post("/v1/batches", json={"name": "nightly", "items": items})
        assert accepted.status_code == 202
        location = accepted.headers["location"]
        batch = await _finished(client, location)
        plan = await client.get(batch["items"][1]["plan_url"])
    assert location == f"/v1/batches/{accepted.json()['id']}"
    assert [i["position"] for i in batch["items"]] == [0, 1, 2]
    assert [i["name"] for i in batch["items"]] == ["north block", "replan", "hopeless"]
    assert [i["outcome"] for i in batch["items"]] == ["served", "served", "infeasible"]
    assert plan.json()["parent_id"] == first.json()["id"]
    summary = batch["summary"]
    assert (summary["total"], summary["done"], summary["failed"]) == (3, 3, 0)
    assert summary["worst"] == "infeasible"


async def test_one_bad_item_refuses_the_whole_batch_naming_it(settings: Settings) -> None:
    bad = small_request()
    bad["demands"][0]["target_rate_bps"] = 0.5e6  # below its min_rate_bps
    unknown = small_request(previous_plan_id="f" * 32)
    async with serving(create_app(settings)) as client:
        answer = await client.post("/v1/batches", json={"items": [small_request(), bad, unknown]})
        missing = await client.get("/v1/batches/" + "0" * 32)
    assert answer.status_code == 422
    fields = {e["field"] for e in answer.json()["errors"]}
    assert any(f.startswith("items[1].demands[0]") for f in fields), fields
    assert missing.status_code == 404
    store = Store(settings.database_url)
    assert store.count_plans() == 0
    store.close()


async def test_an_empty_batch_is_refused(settings: Settings) -> None:
    async with serving(create_app(settings)) as client:
        answer = await client.post("/v1/batches", json={"items": []})
    assert answer.status_code == 422
    assert answer.json()["errors"][0]["field"] == "items"
