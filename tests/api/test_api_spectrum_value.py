"""The plan's spectrum value on the wire and in the CLI summary."""

from __future__ import annotations

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

from service.app import create_app
from service.cli_report import summary_table
from service.runtime import SolveFunction
from service.schemas import PlanOut
from service.settings import Settings

pytestmark = pytest.mark.anyio

METHODS = {"relaxation-dual", "relaxation-resolve", "plan-upgrade"}


@pytest.fixture
def solving_app(settings: Settings, real_solve: SolveFunction) -> FastAPI:
    return create_app(settings, solve=real_solve)


async def test_spectrum_value_on_the_wire_and_in_the_summary(solving_app: FastAPI) -> None:
    request = small_request()
    request["block"]["exclusions"] = [
        {"start_hz": 2.404e9, "stop_hz": 2.405e9, "note": "invented protected link"}
    ]
    async with serving(solving_app) as client:
        created = await client.post("/v1/plans", json=request)
    assert created.status_code == 201, created.text
    value = created.json()["summary"]["spectrum_value"]
    assert value["step_hz"] == 1e6  # 100 raster steps of 10 kHz
    figures = [value["lower_edge"], value["upper_edge"], *value["exclusions"]]
    assert [x["note"] for x in value["exclusions"]] == ["invented protected link"]
    assert value["exclusions"][0]["freed_hz"] == pytest.approx(1e6)
    for f in figures:
        assert f["bound_method"] in METHODS - {"plan-upgrade"}
        assert f["bound_gain_bps"] >= 0.0
        # per MHz = gain / freed width in MHz
        assert f["bound_bps_per_mhz"] == pytest.approx(f["bound_gain_bps"] / f["freed_hz"] * 1e6)
        if f["achieved_gain_bps"] is None:
            assert f["achieved_method"] is None and value["achieved_note"]
        else:
            assert f["achieved_method"] == "plan-upgrade" and f["achieved_gain_bps"] >= 0.0
    text = summary_table(PlanOut.model_validate(created.json()))
    assert "spectrum value (Mbit/s per MHz, 1.000 MHz step): lower edge bound" in text
    assert "exclusion 0 'invented protected link' (1.000 MHz)" in text
