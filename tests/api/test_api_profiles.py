"""Equipment profiles over HTTP: a plan on a profile says which back-off, EVM and thermal Es/N0
each carrier runs at and keeps its rates on the profile's grid, a replan keeps the back-off,
and bad profiles are refused with a 422 naming the field."""

from __future__ import annotations

from typing import Any

import httpx
import pytest
from api_support import serving, small_request
from fastapi import FastAPI

from service.app import create_app
from service.runtime import SolveFunction
from service.settings import Settings

pytestmark = pytest.mark.anyio

RADIO: dict[str, Any] = {
    "name": "radio-a",
    "modcod_set": "nr-256qam",
    "symbol_rate_step_baud": 1000,
    "tx_evm_pct": 2.0,
    "rolloffs": [0.2, 0.35],
    "amplifier": {"model": "rapp", "smoothness": 2, "output_backoff_db": 6},
    "output_backoffs_db": [6, 8],
    "reference_backoff_db": 6,
}


def _on_radio(request: dict[str, Any]) -> dict[str, Any]:
    for demand in request["demands"]:
        demand["profile"] = "radio-a"
        demand["modulations"] = []
    return {**request, "profiles": [RADIO]}


def _fields(answer: httpx.Response) -> dict[str, str]:
    assert answer.status_code == 422, answer.text
    return {e["field"]: e["message"] for e in answer.json()["errors"]}


@pytest.fixture
def solving_app(settings: Settings, real_solve: SolveFunction) -> FastAPI:
    return create_app(settings, solve=real_solve)


async def test_a_plan_on_a_profile_reports_backoff_evm_and_grid(solving_app: FastAPI) -> None:
    async with serving(solving_app) as client:
        created = await client.post("/v1/plans", json=_on_radio(small_request()))
    assert created.status_code == 201, created.text
    carriers = created.json()["carriers"]
    assert carriers
    for c in carriers:
        assert c["profile"] == "radio-a"
        assert c["output_backoff_db"] in (6.0, 8.0)
        assert c["evm_pct"] >= 2.0  # the transmitter's floor, plus the amplifier's distortion
        assert c["esn0_db"] < c["thermal_esn0_db"]
        steps = c["symbol_rate_baud"] / 1000  # whole steps of the radio's 1 kbaud grid
        assert steps == pytest.approx(round(steps), abs=1e-9)


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"modcod_set": "dvb-s9"}, "profiles[0].modcod_set"),
        ({"amplifier": None}, "profiles[0].amplifier"),
        ({"output_backoffs_db": [0]}, "profiles[0].output_backoffs_db[0]"),
        ({"tx_evm_pct": 140}, "profiles[0].tx_evm_pct"),
        (
            {"modcods": [{"modulation": "QPSK", "code_rate": "1/2", "required_esn0_db": "x"}]},
            "profiles[0].modcods[0].required_esn0_db",
        ),
        (
            {"symbol_rate_max_baud": 10, "symbol_rate_min_baud": 100},
            "profiles[0].symbol_rate_max_baud",
        ),
    ],
)
async def test_a_bad_profile_is_refused_naming_the_field(
    app: FastAPI, change: dict[str, Any], field: str
) -> None:
    request = _on_radio(small_request())
    request["profiles"] = [{**RADIO, **change}]
    async with serving(app) as client:
        answer = await client.post("/v1/plans", json=request)
    assert field in _fields(answer)


async def test_a_demand_naming_an_unknown_profile_is_refused(app: FastAPI) -> None:
    request = _on_radio(small_request())
    request["demands"][0]["profile"] = "radio-b"
    async with serving(app) as client:
        answer = await client.post("/v1/plans", json=request)
    message = _fields(answer)["demands[0].profile"]
    assert "radio-b" in message and "radio-a" in message


async def test_modcods_lists_a_named_set_with_its_labels(app: FastAPI) -> None:
    # 3GPP TS 38.214 Table 5.1.3.1-2 (from memory): MCS 0 is QPSK at R = 120/1024, MCS 27
    # 256QAM at 948/1024; 28 rows in all, of which these thresholds must all be finite.
    async with serving(app) as client:
        answer = await client.get("/v1/modcods", params={"modcod_set": "nr-256qam"})
        unknown = await client.get("/v1/modcods", params={"modcod_set": "dvb-s9"})
    assert answer.status_code == 200, answer.text
    rows = answer.json()
    assert len(rows) == 28
    assert (rows[0]["label"], rows[0]["modulation"], rows[0]["code_rate"]) == (
        "MCS 0",
        "QPSK",
        "15/128",
    )
    assert (rows[-1]["label"], rows[-1]["modulation"], rows[-1]["code_rate"]) == (
        "MCS 27",
        "256QAM",
        "237/256",
    )
    assert unknown.status_code == 422
