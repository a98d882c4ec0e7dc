"""Plans over HTTP with the real solver: create, read, list, pictures, replan, retunes, load.

Checks against outside sources: RFC 9110 §15.3.2 (201 Created with Location naming the new
resource), §10.2.2 (Location); PNG signature from the PNG specification (ISO/IEC 15948 §5.2:
bytes 89 50 4E 47 0D 0A 1A 0A); SVG root element from the W3C SVG 1.1 specification (§5.1);
CSV from RFC 4180 (§2: CRLF record ends, header row; §3: the text/csv media type).
"""

from __future__ import annotations

import asyncio
import csv
import io
import math
from typing import Any

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

from service.app import create_app
from service.runtime import SolveFunction
from service.settings import Settings

pytestmark = pytest.mark.anyio

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948 §5.2


@pytest.fixture
def solving_app(settings: Settings, real_solve: SolveFunction) -> FastAPI:
    return create_app(settings, solve=real_solve)


async def test_create_read_list_and_pictures(solving_app: FastAPI) -> None:
    async with serving(solving_app) as client:
        created = await client.post("/v1/plans", json=small_request())
        assert created.status_code == 201, created.text
        plan = created.json()
        assert created.headers["location"] == f"/v1/plans/{plan['id']}"
        fetched = await client.get(created.headers["location"])
        assert fetched.json() == plan
        page = await client.get("/v1/plans", params={"limit": 5})
        assert page.json()["total"] == 1
        assert page.json()["items"][0]["id"] == plan["id"]
        svg = await client.get(f"/v1/plans/{plan['id']}/spectrum.svg")
        png = await client.get(f"/v1/plans/{plan['id']}/spectrum.png")
    assert svg.headers["content-type"].startswith("image/svg+xml")
    assert b"<svg" in svg.content[:2000]
    assert png.headers["content-type"] == "image/png"
    assert png.content.startswith(PNG_SIGNATURE)


async def test_carriers_csv_reads_back_to_the_plan(solving_app: FastAPI) -> None:
    async with serving(solving_app) as client:
        plan = (await client.post("/v1/plans", json=small_request())).json()
        answer = await client.get(f"/v1/plans/{plan['id']}/carriers.csv")
        again = await client.get(
            f"/v1/plans/{plan['id']}/carriers.csv",
            headers={"If-None-Match": answer.headers["etag"]},
        )
        missing = await client.get("/v1/plans/nope/carriers.csv")
    assert answer.status_code == 200
    assert answer.headers["content-type"] == "text/csv; charset=utf-8"  # RFC 4180 §3
    assert again.status_code == 304  # RFC 9110 §13.1.2: the same representation
    assert missing.status_code == 404
    assert missing.headers["content-type"].startswith("application/problem+json")  # RFC 9457
    text = answer.content.decode("utf-8")
    assert text.endswith("\r\n") and "\n" not in text.replace("\r\n", "")  # RFC 4180 §2
    rows = list(csv.DictReader(io.StringIO(text, newline="")))
    carriers = sorted(plan["carriers"], key=lambda c: c["center_hz"])
    assert rows and [r["demand_id"] for r in rows] == [c["demand_id"] for c in carriers]
    for row, carrier in zip(rows, carriers, strict=True):
        for column in ("center_hz", "lower_edge_hz", "symbol_rate_baud", "throughput_bps"):
            assert float(row[column]) == carrier[column], column
        assert row["modulation"] == carrier["modulation"]
        assert row["code_rate"] == carrier["code_rate"]
        assert row["retuned"] == str(carrier["retuned"]).lower()
        backoff = carrier["output_backoff_db"]
        assert row["output_backoff_db"] == ("" if backoff is None else str(backoff))


async def test_plan_fields_follow_the_contract(solving_app: FastAPI) -> None:
    async with serving(solving_app) as client:
        plan = (await client.post("/v1/plans", json=small_request())).json()
    assert plan["status"] in {"optimal", "feasible"}
    assert plan["parent_id"] is None
    assert plan["notices"], "every plan carries its cautions"
    assert any("measure" in n.lower() for n in plan["notices"])
    for c in plan["carriers"]:
        # Nominal width Rs(1 + α): raised-cosine definition (Proakis & Salehi 5th ed. §9.2).
        assert math.isclose(
            c["allocated_bandwidth_hz"], c["symbol_rate_baud"] * (1 + c["rolloff"]), rel_tol=1e-9
        )
        assert math.isclose(c["upper_edge_hz"] - c["lower_edge_hz"], c["allocated_bandwidth_hz"])
        assert c["headroom_db"] == pytest.approx(c["esn0_db"] - c["required_esn0_db"], abs=1e-9)
        assert c["code_rate"] == "uncoded" or "/" in c["code_rate"]


async def test_infeasible_is_a_successful_computation(solving_app: FastAPI) -> None:
    # A 100 kHz block cannot hold 50 Mbit/s at any catalogue entry (Shannon: C = B log2(1+S/N)).
    request = small_request(
        block={"start_hz": 2.4e9, "stop_hz": 2.4001e9, "raster_hz": 1e3},
        demands=[{"id": "big", "min_rate_bps": 5e7, "target_rate_bps": 5e7, "esn0_db": 20.0}],
    )
    async with serving(solving_app) as client:
        response = await client.post("/v1/plans", json=request)
    assert response.status_code == 201, response.text
    plan = response.json()
    assert plan["status"] == "infeasible"
    assert plan["carriers"] == []
    assert [u["demand_id"] for u in plan["unserved"]] == ["big"]


async def test_replan_sets_parent_and_lists_retunes(solving_app: FastAPI) -> None:
    async with serving(solving_app) as client:
        first = (await client.post("/v1/plans", json=small_request())).json()
        # The block loses its lower 4 MHz to an exclusion: carriers there must move.
        exclusion = {"start_hz": 2.400e9, "stop_hz": 2.404e9, "note": "new protected link"}
        request = small_request(previous_plan_id=first["id"])
        request["block"]["exclusions"] = [exclusion]
        second_response = await client.post("/v1/plans", json=request)
        assert second_response.status_code == 201, second_response.text
        second = second_response.json()
        retunes = (await client.get(f"/v1/plans/{second['id']}/retunes")).json()
    assert second["parent_id"] == first["id"]
    before = {c["demand_id"]: c for c in first["carriers"]}
    after = {c["demand_id"]: c for c in second["carriers"]}
    assert retunes["parent_id"] == first["id"]
    listed = {r["demand_id"]: r for r in retunes["retunes"]}
    for demand_id, carrier in after.items():
        old = before.get(demand_id)
        if old is None:
            assert listed[demand_id]["change"] == "added"
        elif old["center_hz"] != carrier["center_hz"]:
            assert listed[demand_id]["shift_hz"] == pytest.approx(
                carrier["center_hz"] - old["center_hz"]
            )
    for carrier in after.values():
        assert carrier["lower_edge_hz"] >= 2.404e9 or carrier["upper_edge_hz"] <= 2.400e9


async def test_twenty_parallel_plans_all_complete_and_are_stored(
    tmp_path: Any, real_solve: SolveFunction
) -> None:
    settings = Settings(
        database_url=f"sqlite:///{tmp_path / 'load.db'}",
        max_concurrent_solves=2,
        max_queued=20,
        solve_rate_limit="",  # the gate is under test here, not the client's rate
    )
    async with serving(create_app(settings, solve=real_solve)) as client:
        await client.post("/v1/plans", json=small_request(time_limit_s=1.0))  # warm caches
        requests = [small_request(name=f"parallel {k}", time_limit_s=1.0) for k in range(20)]
        answers = await asyncio.gather(*(client.post("/v1/plans", json=r) for r in requests))
        assert [a.status_code for a in answers] == [201] * 20
        ids = {a.json()["id"] for a in answers}
        page = (await client.get("/v1/plans", params={"limit": 100})).json()
    assert len(ids) == 20
    assert page["total"] == 21
    assert ids <= {item["id"] for item in page["items"]}


async def test_a_plan_stands_alone(solving_app: FastAPI) -> None:
    # A stored plan echoes the request it answers, and each carrier its demand's figures.
    request = small_request()
    async with serving(solving_app) as client:
        created = await client.post("/v1/plans", json=request)
        fetched = await client.get(created.headers["location"])
    plan = fetched.json()
    assert plan["request"]["block"]["start_hz"] == request["block"]["start_hz"]
    assert [d["id"] for d in plan["request"]["demands"]] == [d["id"] for d in request["demands"]]
    asked = {d["id"]: d for d in request["demands"]}
    assert plan["carriers"]
    for c in plan["carriers"]:
        demand = asked[c["demand_id"]]
        assert c["min_rate_bps"] == demand["min_rate_bps"]
        assert c["target_rate_bps"] == demand["target_rate_bps"]
        assert c["priority"] == demand.get("priority", 1)
