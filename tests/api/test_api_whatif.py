"""``POST /v1/plans/{plan_id}/what-if`` with the real solver: worked cases, the difference, storing
only when asked, and the 422s and 404 that name what is wrong.

The worked cases rest on Shannon's capacity (C. E. Shannon, "A Mathematical Theory of
Communication", 1948; textbook): a carrier at Es/N0 = x carries at most log2(1 + x) bit per
symbol, and its allocated width is Rs(1 + α).  A demand stating Es/N0 12 dB with a 3 dB margin
must close at a threshold of at most 9 dB, so with any MODCOD it carries at most
log2(1 + 10^0.9) = 3.16 bit/symbol, and on the transmitter's least roll-off 0.2 a rate R needs a
width of at least R / 3.16 × 1.2.  RFC 9110 §15.3.2: 201 with Location for a created resource.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path
from typing import Any

import httpx
import pytest
from api_support import serving
from fastapi import FastAPI

from service.app import create_app
from service.dryrun import check_request
from service.runtime import SolveFunction
from service.schemas import PlanRequest
from service.schemas_whatif import WhatIfRequest
from service.settings import Settings
from service.whatif import apply_changes

pytestmark = pytest.mark.anyio

TX = {"filter_span_symbols": 16, "rolloffs": [0.2, 0.35]}
BITS_PER_SYMBOL_AT_9_DB = math.log2(1 + 10 ** (9 / 10))  # Shannon: 3.16


def _least_width_hz(rate_bps: float) -> float:
    """Shannon's least allocated width at 12 dB Es/N0 less a 3 dB margin, roll-off 0.2."""
    return rate_bps / BITS_PER_SYMBOL_AT_9_DB * 1.2


HELD_BACK: dict[str, Any] = {
    "name": "what-if test: invented block with a held-back stretch",
    "block": {
        "start_hz": 2.400e9,
        "stop_hz": 2.405e9,
        "raster_hz": 10e3,
        "exclusions": [{"start_hz": 2.401e9, "stop_hz": 2.404e9, "note": "held back"}],
    },
    "transmitter": TX,
    "demands": [
        {"id": "small", "min_rate_bps": 0.2e6, "target_rate_bps": 0.4e6, "esn0_db": 12.0},
        {"id": "wide", "min_rate_bps": 4e6, "target_rate_bps": 4e6, "esn0_db": 12.0},
    ],
    "time_limit_s": 3.0,
}
"""Two 1 MHz stretches either side of a 3 MHz exclusion; ``wide`` needs more than 1 MHz."""

ROOM_FOR_ONE: dict[str, Any] = {
    "name": "what-if test: two demands, room for one",
    "block": {"start_hz": 2.400e9, "stop_hz": 2.4015e9, "raster_hz": 10e3},
    "transmitter": TX,
    "demands": [
        {
            "id": "first",
            "min_rate_bps": 2e6,
            "target_rate_bps": 2e6,
            "esn0_db": 12.0,
            "priority": 5,
        },
        {"id": "second", "min_rate_bps": 2e6, "target_rate_bps": 2e6, "esn0_db": 12.0},
    ],
    "time_limit_s": 3.0,
}
"""1.5 MHz for two identical 2 Mbit/s demands that need at least 0.76 MHz each."""

CROWDED: dict[str, Any] = {
    "name": "what-if test: crowded block",
    "block": {"start_hz": 2.400e9, "stop_hz": 2.403e9, "raster_hz": 10e3},
    "transmitter": TX,
    "demands": [
        {
            "id": f"d{i}",
            "min_rate_bps": 0.8e6 + 0.2e6 * (i % 4),
            "target_rate_bps": 2e6,
            "esn0_db": 9.0 + (i * 5) % 9,
            "priority": 1 + i % 3,
        }
        for i in range(12)
    ],
    "time_limit_s": 3.0,
}


@pytest.fixture
def solving_app(settings: Settings, real_solve: SolveFunction) -> FastAPI:
    return create_app(settings, solve=real_solve)


async def _plan(client: httpx.AsyncClient, request: dict[str, Any]) -> dict[str, Any]:
    answer = await client.post("/v1/plans", json=request)
    assert answer.status_code == 201, answer.text
    plan: dict[str, Any] = answer.json()
    return plan


async def _what_if(
    client: httpx.AsyncClient, plan_id: str, changes: dict[str, Any], **more: Any
) -> httpx.Response:
    return await client.post(f"/v1/plans/{plan_id}/what-if", json={"changes": changes, **more})


async def _count(client: httpx.AsyncClient) -> int:
    total: int = (await client.get("/v1/plans")).json()["total"]
    return total


def _by_id(answer: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {d["demand_id"]: d for d in answer["difference"]["demands"]}


async def test_removing_the_exclusion_serves_the_demand_it_starved(solving_app: FastAPI) -> None:
    # by hand: wide needs at least 4e6 / 3.16 × 1.2 = 1.52 MHz, more than either 1 MHz stretch
    assert _least_width_hz(4e6) > 1.0e6
    async with serving(solving_app) as client:
        plan = await _plan(client, HELD_BACK)
        before = await _count(client)
        answer = await _what_if(client, plan["id"], {"remove_exclusions": [0]})
        after = await _count(client)
    assert [u["demand_id"] for u in plan["unserved"]] == ["wide"]
    assert plan["unserved"][0]["reason"] == "no_spectrum"
    assert answer.status_code == 200, answer.text
    body = answer.json()
    assert body["stored"] is False and body["plan"]["id"] is None and after == before
    assert body["plan"]["parent_id"] == plan["id"]
    assert body["plan"]["request"]["block"]["exclusions"] == []
    diff = body["difference"]
    assert (diff["served_before"], diff["served_after"]) == (1, 2)
    assert diff["total_throughput_before_bps"] == plan["summary"]["total_throughput_bps"]
    assert diff["total_throughput_after_bps"] == body["plan"]["summary"]["total_throughput_bps"]
    assert diff["throughput_change_bps"] == pytest.approx(
        diff["total_throughput_after_bps"] - diff["total_throughput_before_bps"]
    )
    assert diff["throughput_change_bps"] >= 4e6  # wide's minimum rate, now carried
    wide = _by_id(body)["wide"]
    assert wide["change"] == "added" and wide["before"] is None
    assert wide["after"]["allocated_bandwidth_hz"] >= _least_width_hz(4e6)
    assert wide["after"]["throughput_bps"] >= 4e6


async def test_dropping_a_demand_frees_its_spectrum_for_the_one_it_kept_out(
    solving_app: FastAPI,
) -> None:
    # by hand: two demands need at least 2 × 2e6 / 3.16 × 1.2 = 1.52 MHz > the 1.5 MHz block,
    # so only the higher priority is served; the second is the same demand, so it fits alone
    assert 2 * _least_width_hz(2e6) > 1.5e6
    async with serving(solving_app) as client:
        plan = await _plan(client, ROOM_FOR_ONE)
        answer = await _what_if(client, plan["id"], {"drop_demands": ["first"]})
    assert [c["demand_id"] for c in plan["carriers"]] == ["first"]
    assert answer.status_code == 200, answer.text
    rows = _by_id(answer.json())
    assert rows["first"]["change"] == "removed" and rows["first"]["after"] is None
    assert rows["first"]["note"] == "dropped by the changes"
    assert rows["second"]["change"] == "added"
    freed, taken = rows["first"]["before"], rows["second"]["after"]
    lo, hi = (
        freed["center_hz"] - freed["allocated_bandwidth_hz"] / 2,
        freed["center_hz"] + (freed["allocated_bandwidth_hz"] / 2),
    )
    assert lo < taken["center_hz"] < hi  # it sits in the spectrum the dropped carrier held
    assert answer.json()["difference"]["served_after"] == 1


def _served_by_priority(plan: dict[str, Any]) -> tuple[int, ...]:
    """Served demands per priority level, highest first: the planner serves higher priorities
    first (DESIGN.md, Admission), so plans compare lexicographically on this."""
    priority = {d["id"]: d["priority"] for d in plan["request"]["demands"]}
    served = [priority[c["demand_id"]] for c in plan["carriers"]]
    levels = sorted(set(priority.values()), reverse=True)
    return tuple(served.count(level) for level in levels)


async def test_widening_the_block_never_lowers_the_served_weight(solving_app: FastAPI) -> None:
    async with serving(solving_app) as client:
        plan = await _plan(client, CROWDED)
        assert plan["unserved"]  # the block is crowded to begin with
        start, stop = CROWDED["block"]["start_hz"], CROWDED["block"]["stop_hz"]
        weights = [_served_by_priority(plan)]
        for below, above in ((0.0, 0.3e6), (0.2e6, 0.5e6), (0.5e6, 1e6), (1e6, 2e6)):
            edges = {"start_hz": start - below, "stop_hz": stop + above}
            answer = await _what_if(client, plan["id"], {"block_edges": edges})
            assert answer.status_code == 200, answer.text
            weights.append(_served_by_priority(answer.json()["plan"]))
    assert all(weights[0] <= w for w in weights[1:]), weights
    assert weights[-1] > weights[0]  # 3 MHz more serves more


async def test_stored_what_if_is_a_child_plan_with_its_location(solving_app: FastAPI) -> None:
    extra = {"id": "extra", "min_rate_bps": 0.1e6, "target_rate_bps": 0.1e6, "esn0_db": 12.0}
    changes = {
        "demand_rates": [{"demand_id": "small", "target_rate_bps": 0.3e6}],
        "add_demands": [extra],
    }
    async with serving(solving_app) as client:
        plan = await _plan(client, HELD_BACK)
        answer = await _what_if(client, plan["id"], changes, store=True, time_limit_s=2.0)
        body = answer.json()
        fetched = await client.get(answer.headers.get("location", "/none"))
        retunes = await client.get(f"/v1/plans/{body['plan']['id']}/retunes")
        total = await _count(client)
    assert answer.status_code == 201, answer.text
    assert (
        body["stored"] is True and answer.headers["location"] == f"/v1/plans/{body['plan']['id']}"
    )
    assert fetched.json() == body["plan"] and total == 2
    assert body["plan"]["parent_id"] == plan["id"] == retunes.json()["parent_id"]
    changed = body["plan"]["request"]
    assert changed["previous_plan_id"] == plan["id"] and changed["time_limit_s"] == 2.0
    assert changed["demands"][0]["target_rate_bps"] == 0.3e6
    assert [d["id"] for d in changed["demands"]] == ["small", "wide", "extra"]
    assert _by_id(body)["extra"]["change"] == "added"  # 0.1 Mbit/s fits beside small
    small = _by_id(body)["small"]
    assert small["after"]["throughput_bps"] <= small["before"]["throughput_bps"]


def _bad_changes() -> list[tuple[dict[str, Any], str]]:
    return [
        ({"drop_demands": ["nobody"]}, "changes.drop_demands[0]"),
        ({"drop_demands": ["small", "small"]}, "changes.drop_demands[1]"),
        ({"remove_exclusions": [3]}, "changes.remove_exclusions[0]"),
        (
            {"demand_rates": [{"demand_id": "ghost", "min_rate_bps": 1e6}]},
            "changes.demand_rates[0].demand_id",
        ),
        (
            {"demand_rates": [{"demand_id": "small", "min_rate_bps": 1e6}]},
            "changes.demand_rates[0].target_rate_bps",
        ),
        ({"demand_rates": [{"demand_id": "small"}]}, "changes.demand_rates[0]"),
        ({"add_demands": [{**HELD_BACK["demands"][0]}]}, "changes.add_demands[0].id"),
        (
            {
                "add_demands": [
                    {
                        "id": "new",
                        "min_rate_bps": 1e6,
                        "target_rate_bps": 1e6,
                        "esn0_db": 9.0,
                        "profile": "none",
                    }
                ]
            },
            "changes.add_demands[0].profile",
        ),
        ({"block_edges": {"stop_hz": 2.3e9}}, "changes.block_edges.stop_hz"),
        ({"block_edges": {"stop_hz": 2.4035e9}}, "block.exclusions[0]"),
        ({"drop_demands": ["small", "wide"]}, "changes.drop_demands"),
        ({"rename": "x"}, "changes.rename"),
    ]


@pytest.mark.parametrize(("changes", "field"), _bad_changes(), ids=lambda v: str(v)[:48])
async def test_bad_changes_are_422s_naming_the_field(
    solving_app: FastAPI, changes: dict[str, Any], field: str
) -> None:
    async with serving(solving_app) as client:
        plan = await _plan(client, HELD_BACK)
        answer = await _what_if(client, plan["id"], copy.deepcopy(changes), store=True)
        total = await _count(client)
    assert answer.status_code == 422, answer.text
    assert answer.headers["content-type"] == "application/problem+json"
    assert field in [e["field"] for e in answer.json()["errors"]]
    assert total == 1  # nothing stored, even with store=true


async def test_an_unknown_plan_is_a_404(solving_app: FastAPI) -> None:
    async with serving(solving_app) as client:
        answer = await _what_if(client, "no-such-plan", {"drop_demands": ["x"]})
    assert answer.status_code == 404
    assert answer.json()["type"] == "urn:bandwright:problem:not-found"


def test_the_example_changes_apply_to_the_demo_request_and_pass_every_check(
    settings: Settings,
) -> None:
    """examples/what-if-changes.json on examples/demo-request.json, checked without a solve."""
    examples = Path(__file__).resolve().parents[2] / "examples"
    demo = PlanRequest.model_validate_json((examples / "demo-request.json").read_text("utf-8"))
    body = WhatIfRequest.model_validate_json((examples / "what-if-changes.json").read_text("utf-8"))
    changed = apply_changes(demo, "stored-plan", body).request
    ids = [d.id for d in changed.demands]
    assert "scada-marsh-rtu" not in ids and ids[-1] == "depot-access-cams" and len(ids) == 12
    assert changed.block.exclusions == [] and changed.previous_plan_id == "stored-plan"
    cctv = next(d for d in changed.demands if d.id == "cctv-yard-depot")
    assert (cctv.min_rate_bps, cctv.target_rate_bps) == (3e6, 12e6)
    assert all(d.current is None for d in changed.demands)  # the stored plan's carriers instead
    report = check_request(changed, settings, None)
    assert report.exclusions == 0 and report.usable_width_hz == pytest.approx(20e6, abs=1e-3)
