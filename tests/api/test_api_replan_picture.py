"""The picture of a stored replan marks what changed since its parent plan, as the retunes
list does (``GET /v1/plans/{id}/spectrum.svg`` and ``GET /v1/plans/{id}/retunes``)."""

from __future__ import annotations

import re

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

from service.app import create_app
from service.runtime import SolveFunction
from service.settings import Settings

pytestmark = pytest.mark.anyio

NEW_DEMAND = {"id": "east", "min_rate_bps": 5e5, "target_rate_bps": 1e6, "esn0_db": 12.0}


@pytest.fixture
def solving_app(settings: Settings, real_solve: SolveFunction) -> FastAPI:
    return create_app(settings, solve=real_solve)


async def test_a_replans_picture_marks_its_changes_since_the_parent(solving_app: FastAPI) -> None:
    first = small_request()
    async with serving(solving_app) as client:
        parent = (await client.post("/v1/plans", json=first)).json()
        # the next day: one more demand, and "north" dropped
        demands = [d for d in first["demands"] if d["id"] != "north"] + [NEW_DEMAND]
        second = small_request(demands=demands, previous_plan_id=parent["id"])
        created = await client.post("/v1/plans", json=second)
        assert created.status_code == 201, created.text
        child = created.json()
        svg = (await client.get(f"/v1/plans/{child['id']}/spectrum.svg")).text
        retunes = (await client.get(f"/v1/plans/{child['id']}/retunes")).json()
        alone = (await client.get(f"/v1/plans/{parent['id']}/spectrum.svg")).text

    assert child["parent_id"] == parent["id"]
    listed = {r["demand_id"]: r["change"] for r in retunes["retunes"]}
    assert listed.get("east") == "added" and listed.get("north") == "dropped"
    ids = set(re.findall(r'<g id="([^"]+)"', svg))
    assert "dropped-north" in ids and "label-dropped-north" in ids
    assert "earlier-east" not in ids and "ghost-east" not in ids  # it has no earlier place
    assert "since the earlier plan:" in svg and "1 added" in svg and "1 dropped" in svg
    assert "since the earlier plan" not in alone  # the parent has no parent
