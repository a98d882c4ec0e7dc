"""A plan over HTTP says, for each carrier below its target, what binds it and what would lift
it; a carrier at its target carries nulls.  The CSV (RFC 4180) and the CLI table carry the same.

Hand working: the "narrow" demand has Es/N0 12 dB and margin 3 dB in a block of 0.5 MHz; its
30 Mbit/s target needs at least 30e6 / 0.5e6 = 60 bit/s/Hz, far beyond any MODCOD at 9 dB, so
it is below target in any plan; with a fixed Es/N0 more width always carries more, so more
spectrum is a lift (finite spectrum_to_target_hz) and, the demand stating Es/N0, no symbol-rate
maximum applies (default profile): symbol_rate_needed_baud is null.
"""

from __future__ import annotations

import csv
import io

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

from service.app import create_app
from service.cli_report import summary_table
from service.csvout import carriers_csv
from service.runtime import SolveFunction
from service.schemas import PlanOut
from service.settings import Settings

pytestmark = pytest.mark.anyio

NARROW = small_request(
    block={"start_hz": 2.40e9, "stop_hz": 2.4005e9, "raster_hz": 1e3},
    demands=[{"id": "narrow", "min_rate_bps": 0.2e6, "target_rate_bps": 30e6, "esn0_db": 12.0}],
)


@pytest.fixture
def solving_app(settings: Settings, real_solve: SolveFunction) -> FastAPI:
    return create_app(settings, solve=real_solve)


async def test_a_carrier_below_target_says_why_and_one_at_target_says_nothing(
    solving_app: FastAPI,
) -> None:
    async with serving(solving_app) as client:
        below = await client.post("/v1/plans", json=NARROW)
        at = await client.post("/v1/plans", json=small_request())
    assert below.status_code == 201 and at.status_code == 201, (below.text, at.text)
    (carrier,) = below.json()["carriers"]
    assert carrier["throughput_bps"] < 30e6
    assert carrier["limited_by"] == "spectrum"
    assert carrier["spectrum_to_target_hz"] > 0
    assert carrier["symbol_rate_needed_baud"] is None
    assert carrier["limit_detail"]
    assert isinstance(carrier["also_limited_by"], list)
    for served in at.json()["carriers"]:
        if served["throughput_bps"] >= served["target_rate_bps"] * (1 - 1e-6):
            for field in ("limited_by", "also_limited_by", "spectrum_to_target_hz"):
                assert served[field] is None, field

    plan = PlanOut.model_validate(below.json())
    (row,) = csv.DictReader(io.StringIO(carriers_csv(plan), newline=""))
    assert row["limited_by"] == "spectrum"
    assert float(row["spectrum_to_target_hz"]) == carrier["spectrum_to_target_hz"]
    assert row["also_limited_by"] == ";".join(carrier["also_limited_by"])
    assert "below target narrow: spectrum" in summary_table(plan)
