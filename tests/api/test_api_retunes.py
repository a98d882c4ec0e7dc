"""One rule for "retuned": the plan's own flags and count, and ``GET /v1/plans/{id}/retunes``.

The case is a shift smaller than half a raster step but far more than round-off: the plan
summary used to call it "not retuned" (it allowed half a raster step) while the route called
it "moved" (it allowed 1 Hz).  A carrier that moved by any part of a raster step must be
retuned on air, so both must now say "moved".
"""

from __future__ import annotations

from typing import Any

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

from service.app import create_app
from service.runtime import SolveFunction
from service.settings import Settings

pytestmark = pytest.mark.anyio

CHANGED = {"moved", "reconfigured", "moved_and_reconfigured"}


@pytest.fixture
def solving_app(settings: Settings, real_solve: SolveFunction) -> FastAPI:
    return create_app(settings, solve=real_solve)


def _setting(carrier: dict[str, Any], shift_hz: float) -> dict[str, Any]:
    keys = ("symbol_rate_baud", "rolloff", "modulation", "code_rate")
    return {"center_hz": carrier["center_hz"] + shift_hz, **{k: carrier[k] for k in keys}}


async def test_plan_flags_and_the_retunes_route_agree_below_half_a_raster(
    solving_app: FastAPI,
) -> None:
    request = small_request(retune_penalty=0.0)
    raster_hz = request["block"]["raster_hz"]
    shift_hz = raster_hz / 4  # 2.5 kHz: more than 1 Hz, less than half a 10 kHz raster step
    async with serving(solving_app) as client:
        first = (await client.post("/v1/plans", json=request)).json()
        today = {c["demand_id"]: _setting(c, shift_hz) for c in first["carriers"]}
        assert set(today) == {d["id"] for d in request["demands"]}, "both demands served"
        for demand in request["demands"]:
            demand["current"] = today[demand["id"]]
        second = (await client.post("/v1/plans", json=request)).json()
        retunes = (await client.get(f"/v1/plans/{second['id']}/retunes")).json()

    listed = {r["demand_id"]: r["change"] for r in retunes["retunes"]}
    flagged = {c["demand_id"] for c in second["carriers"] if c["retuned"]}
    assert flagged == {d for d, change in listed.items() if change in CHANGED}
    assert second["summary"]["retune_count"] == len(flagged)
    # The case in question happened: a carrier less than half a raster step from today's
    # centre, yet more than round-off away.  Both must call it moved.
    near = {
        c["demand_id"]
        for c in second["carriers"]
        if 1.0 < abs(c["center_hz"] - today[c["demand_id"]]["center_hz"]) < raster_hz / 2
    }
    assert near, "no carrier landed within half a raster step of its shifted centre"
    assert near <= flagged
    assert all(listed[d] in {"moved", "moved_and_reconfigured"} for d in near)
