"""Schema-valid requests that once answered 500, found by fuzzing the OpenAPI document: each now
gets a proper answer (a result, or a 422 problem naming the field)."""

from __future__ import annotations

import math

import pytest
from api_support import serving, small_request
from fastapi import FastAPI
from scipy import special

from solver.model import Modulation
from solver.physics import modcod

pytestmark = pytest.mark.anyio

EVALUATE = {
    "symbol_rate_baud": 1e6,
    "rolloff": 0.2,
    "modulation": "QPSK",
    "code_rate": "1/2",
    "esn0_db": 10.0,
}


@pytest.mark.parametrize("target", [0.33, 0.4, 0.49])
def test_a_lax_uncoded_bit_error_rate_has_a_threshold(target: float) -> None:
    # Before: above about 0.327 the root-finder's bracket held no root and raised.
    # BPSK on AWGN: BER = ½·erfc(√(Es/N0)) (Proakis & Salehi, Digital Communications, 5th ed.,
    # eq. 4.3-13), evaluated here with scipy.special.erfc as the independent reference.
    threshold_db = modcod._uncoded_threshold_db(Modulation.BPSK, target)
    esn0 = 10.0 ** (threshold_db / 10.0)
    assert 0.5 * special.erfc(math.sqrt(esn0)) == pytest.approx(target, rel=1e-4)


async def test_evaluate_with_a_lax_bit_error_rate_answers(app: FastAPI) -> None:
    body = EVALUATE | {"code_rate": "uncoded", "coding": {"target_bit_error_rate": 0.4}}
    async with serving(app) as client:
        response = await client.post("/v1/carriers/evaluate", json=body)
        modcods = await client.get("/v1/modcods", params={"target_bit_error_rate": 0.4})
    assert response.status_code == 200, response.text
    assert response.json()["required_esn0_db"] < 0  # QPSK needs far less than 0 dB for 0.4
    assert modcods.status_code == 200, modcods.text


async def test_evaluate_beyond_the_profiles_reach_reports_no_leakage(app: FastAPI) -> None:
    # Before: a gap wider than the spectrum profile (about 14 symbol periods) raised.
    body = EVALUATE | {"gaps_hz": [0.1e6, 15e6, 20e6]}
    async with serving(app) as client:
        response = await client.post("/v1/carriers/evaluate", json=body)
    assert response.status_code == 200, response.text
    ratios = [item["ratio_db"] for item in response.json()["leakage_ratio_db"]]
    assert ratios[0] is not None and ratios[0] > 0
    assert ratios[1:] == [None, None]


async def test_an_offset_past_any_store_is_a_422(app: FastAPI) -> None:
    # Before: 2**63 overflowed SQLite's integer and answered 500.
    async with serving(app) as client:
        response = await client.get("/v1/plans", params={"offset": 2**63})
        fine = await client.get("/v1/plans", params={"offset": 2**53})
    assert response.status_code == 422, response.text
    assert response.json()["errors"][0]["field"] == "offset"
    assert fine.status_code == 200 and fine.json()["items"] == []


async def test_max_margin_with_the_least_minimum_rate_is_planned(app: FastAPI) -> None:
    # Before: a minimum rate of 1e-7 bit/s made the width grid start at zero raster steps and
    # answered 500.  Rates below 1 bit/s are now refused (422); 1 bit/s is planned.
    request = small_request(objective="max_margin")
    for demand in request["demands"]:
        demand["min_rate_bps"] = demand["target_rate_bps"] = 1.0
    tiny = small_request(objective="max_margin")
    tiny["demands"][0]["min_rate_bps"] = tiny["demands"][0]["target_rate_bps"] = 1e-7
    async with serving(app) as client:
        response = await client.post("/v1/plans", json=request)
        refused = await client.post("/v1/plans", json=tiny)
    assert response.status_code == 201, response.text
    assert len(response.json()["carriers"]) == 2
    assert refused.status_code == 422
    assert refused.json()["errors"][0]["field"] == "demands[0].min_rate_bps"


async def test_a_job_is_refused_up_front_for_what_a_plan_is_refused(app: FastAPI) -> None:
    # Before: accepted (202), then failed, for errors the synchronous path rejects at once.
    demands = [
        {"id": f"d{i}", "min_rate_bps": 1e4, "target_rate_bps": 2e4, "esn0_db": 12.0}
        for i in range(250)
    ]
    request = small_request(demands=demands, time_limit_s=3.0)  # 250 × 20 ms needs 5 s
    async with serving(app) as client:
        job = await client.post("/v1/jobs", json=request)
        plan = await client.post("/v1/plans", json=request)
    assert job.status_code == plan.status_code == 422, job.text
    assert job.json()["errors"][0]["field"] == plan.json()["errors"][0]["field"] == "time_limit_s"


FUZZ_PLAN_BODIES = [
    # (with a minimum rate of 5e-324 bit/s, now refused) a carrier was sized at 0 baud and a
    # C/N0 of 0 dBHz put the Shannon bound's root outside its bracket
    {
        "block": {"start_hz": 0.0, "stop_hz": 2500000.0},
        "demands": [{"cn0_dbhz": 0.0, "id": "d0", "min_rate_bps": 1.0, "target_rate_bps": 1.0}],
        "time_limit_s": 1.0,
    },
    # an Es/N0 of about 0 dB gave a sensitivity far below 0 dB, and 10^(−level/10) overflowed
    {
        "block": {"start_hz": 7.4e-293, "stop_hz": 2500000.0},
        "demands": [
            {"id": "d0", "min_rate_bps": 6.6e11, "target_rate_bps": 1e12, "cn0_dbhz": 99.9},
            {
                "id": "d1",
                "min_rate_bps": 2.2e10,
                "target_rate_bps": 2.0e11,
                "modulations": ["8PSK", "32APSK"],
                "esn0_db": 2.76e-260,
                "priority": 248,
            },
            {"id": "d2", "min_rate_bps": 1.0, "target_rate_bps": 5.7e11, "cn0_dbhz": -4.7e-157},
        ],
        "time_limit_s": 1.0,
    },
    # a leakage limit no gap meets for some configurations: the bound kept them as carriers
    # that can only sit alone, and rounding their infinite guard to the raster overflowed
    {
        "block": {"start_hz": 304624011717.696, "stop_hz": 304626511717.696},
        "leakage_limit_db": 63.52603824064244,
        "demands": [
            {
                "id": "d0",
                "min_rate_bps": 1.1,
                "target_rate_bps": 907465062437.6057,
                "modulations": ["32APSK", "QPSK", "4PAM", "16QAM"],
                "relative_level_db": 38.74304975590759,
                "priority": 94,
                "margin_db": 38.43319592791033,
                "cn0_dbhz": 85.96167254047168,
            },
            {
                "id": "d1",
                "min_rate_bps": 285825061720.875,
                "target_rate_bps": 984337387791.9238,
                "esn0_db": 51.05591009661033,
                "priority": 832,
                "margin_db": 31.368919932917272,
            },
        ],
        "time_limit_s": 1.0,
    },
]


@pytest.mark.parametrize(
    "body", FUZZ_PLAN_BODIES, ids=["tiny minimum rate", "tiny Es/N0", "unreachable leakage limit"]
)
async def test_extreme_but_valid_plan_requests_are_planned(
    app: FastAPI, body: dict[str, object]
) -> None:
    async with serving(app) as client:
        response = await client.post("/v1/plans", json=body)
    assert response.status_code == 201, response.text


async def test_a_back_off_at_saturation_is_a_422_naming_it(app: FastAPI) -> None:
    # Before: the drive solver's secant step did not converge near saturation and raised.
    body = EVALUATE | {
        "modulation": "4PAM",
        "code_rate": "4/97",
        "rolloff": 0.015,
        "symbol_rate_baud": 9.3e9,
        "window": "kaiser",
        "amplifier": {"output_backoff_db": 2.2e-128, "smoothness": 66.0},
    }
    async with serving(app) as client:
        response = await client.post("/v1/carriers/evaluate", json=body)
    assert response.status_code in (200, 422), response.text
    if response.status_code == 422:
        assert response.json()["errors"][0]["field"] == "amplifier.output_backoff_db"
