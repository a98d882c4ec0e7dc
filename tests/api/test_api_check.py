"""The dry run ``POST /v1/plans:validate``: the demo example's size against an independent count,
the same 422 documents as ``POST /v1/plans``, warnings, and nothing stored.

Independent count of the configurations the solver weighs (the work-size bound of
``solver.worksize``): per demand, the modulations of its MODCOD table that it allows × the most
code rates of one of them × its profile's roll-offs × its back-offs.  The tables are counted here
from the published standards, not from the project's MODCOD sets:

* DVB-S2, ETSI EN 302 307-1 §5.3 (from memory): QPSK 11 code rates (1/4 … 9/10), 8PSK 6
  (3/5 … 9/10), 16APSK 6 (2/3 … 9/10), 32APSK 5 (3/4 … 9/10);
* 3GPP TS 38.214 Table 5.1.3.1-2 (from memory): MCS 0–4 QPSK (5 rows), 5–10 16QAM (6),
  11–19 64QAM (9), 20–27 256QAM (8);
* the README's ``standard`` set is the two together (QPSK: 11 + 5 = 16 rows).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

from service.app import create_app
from service.convert import to_problem
from service.schemas import PlanRequest
from service.settings import Settings
from solver.candidates import _demand_combos

pytestmark = pytest.mark.anyio

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "demo-request.json"

DVB_S2 = {"QPSK": 11, "8PSK": 6, "16APSK": 6, "32APSK": 5}  # EN 302 307-1 (from memory)
NR_256QAM = {"QPSK": 5, "16QAM": 6, "64QAM": 9, "256QAM": 8}  # TS 38.214 5.1.3.1-2 (memory)
STANDARD = {m: DVB_S2.get(m, 0) + NR_256QAM.get(m, 0) for m in {*DVB_S2, *NR_256QAM}}
NAMED_TABLES = {"standard": STANDARD, "dvb-s2": DVB_S2, "nr-256qam": NR_256QAM}


def _rows_per_modulation(profile: dict[str, Any] | None) -> dict[str, int]:
    """Table rows by modulation: the profile's own rows, else its named set counted above."""
    if profile is None:
        return STANDARD
    if profile.get("modcods"):
        counts: dict[str, int] = {}
        for row in profile["modcods"]:
            counts[row["modulation"]] = counts.get(row["modulation"], 0) + 1
        return counts
    return NAMED_TABLES[profile.get("modcod_set", "standard")]


def _independent_count(request: dict[str, Any], demand: dict[str, Any]) -> int:
    profiles = {p["name"]: p for p in request.get("profiles", [])}
    profile = profiles.get(demand.get("profile", ""))
    table = _rows_per_modulation(profile)
    allowed = demand.get("modulations") or list(table)
    rates = [table[m] for m in allowed if table.get(m)]
    equipment = profile if profile is not None else request["transmitter"]
    backoffs = len(set(equipment.get("output_backoffs_db") or [])) if equipment["amplifier"] else 0
    return len(rates) * max(rates, default=0) * len(equipment["rolloffs"]) * max(backoffs, 1)


@pytest.fixture
def checking_app(settings: Settings) -> FastAPI:
    return create_app(settings)  # the solver is never called by a dry run


async def test_the_demo_example_reports_its_size_and_an_independently_counted_work(
    checking_app: FastAPI,
) -> None:
    request = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    async with serving(checking_app) as client:
        answer = await client.post("/v1/plans:validate", json=request)
        listed = await client.get("/v1/plans")
    assert answer.status_code == 200, answer.text
    report = answer.json()
    assert (report["demands"], report["profiles"], report["exclusions"]) == (12, 2, 1)
    # 7 410–7 430 MHz less the 7 418.0–7 419.5 MHz exclusion: 20 MHz − 1.5 MHz
    assert report["block_width_hz"] == pytest.approx(20e6, abs=1e-3)
    assert report["usable_width_hz"] == pytest.approx(18.5e6, abs=1e-3)
    expected = {d["id"]: _independent_count(request, d) for d in request["demands"]}
    got = {d["demand_id"]: d["configurations"] for d in report["per_demand"]}
    assert got == expected
    # worked by hand: teleprotection-ridge allows QPSK/8PSK/16APSK of `standard` (3 × 16) on the
    # transmitter's 6 roll-offs; a ridgeline-mw demand 4 modulations × 9 (64QAM) × 4 roll-offs ×
    # 3 back-offs; a fieldlink-nb demand of both modulations 2 × 2 × 2 roll-offs
    assert got["teleprotection-ridge"] == 3 * 16 * 6 == 288
    assert got["substation-bh-alder"] == 4 * 9 * 4 * 3 == 432
    assert got["ami-collector-west"] == 2 * 2 * 2 == 8
    assert report["candidate_configurations"] == sum(expected.values())
    assert report["execution"] == "inline" and report["warnings"] == []
    assert listed.json()["total"] == 0  # a dry run stores nothing


def test_the_count_covers_the_rows_the_candidate_builder_enumerates() -> None:
    """For a linear transmitter every row of its own table is undominated, so the rows
    ``solver.candidates`` lays out (table × roll-offs × back-offs) are exactly the count."""
    request = PlanRequest.model_validate(json.loads(EXAMPLE.read_text(encoding="utf-8")))
    problem = to_problem(request)
    demand = next(d for d in problem.demands if d.id == "ami-collector-west")
    assert _demand_combos(problem, demand).size == 8


def _invalid_variants() -> list[tuple[str, dict[str, Any]]]:
    base = small_request()
    low_target = small_request()
    low_target["demands"][0]["target_rate_bps"] = 10.0
    twice = small_request()
    twice["demands"][1]["id"] = twice["demands"][0]["id"]
    outside = small_request()
    outside["block"]["exclusions"] = [{"start_hz": 2.39e9, "stop_hz": 2.401e9}]
    return [
        ("wire model: target below min", low_target),
        ("consistency: a demand id twice", twice),
        ("consistency: an exclusion outside the block", outside),
        ("unknown previous_plan_id", {**base, "previous_plan_id": "no-such-plan"}),
        ("solver check: 30 ms for 2 demands (20 ms each needed)", {**base, "time_limit_s": 0.03}),
        ("not a request at all", {"demands": "many"}),
    ]


@pytest.mark.parametrize(("case", "body"), _invalid_variants(), ids=lambda v: str(v)[:40])
async def test_an_invalid_request_gets_the_problem_document_post_plans_gives(
    settings: Settings, real_solve: Any, case: str, body: dict[str, Any]
) -> None:
    app = create_app(settings, solve=real_solve)
    async with serving(app) as client:
        dry = await client.post("/v1/plans:validate", json=body)
        real = await client.post("/v1/plans", json=body)
        listed = await client.get("/v1/plans")
    assert dry.status_code == real.status_code == 422, case
    assert dry.headers["content-type"] == real.headers["content-type"] == "application/problem+json"
    dry_doc, real_doc = dry.json(), real.json()
    assert dry_doc["errors"] and dry_doc["errors"] == real_doc["errors"], case
    assert {k: v for k, v in dry_doc.items() if k != "instance"} == {
        k: v for k, v in real_doc.items() if k != "instance"
    }
    assert listed.json()["total"] == 0


async def test_over_the_work_limit_is_the_same_422_and_near_it_a_warning(
    settings: Settings,
) -> None:
    """The small request weighs 2 × (7 modulations × 16 rates × 2 roll-offs) = 448."""
    over = create_app(settings.model_copy(update={"max_work_configurations": 447}))
    near = create_app(settings.model_copy(update={"max_work_configurations": 800}))
    async with serving(over) as client:
        dry = await client.post("/v1/plans:validate", json=small_request())
        real = await client.post("/v1/plans", json=small_request())
    assert dry.status_code == real.status_code == 422
    assert dry.json()["errors"] == real.json()["errors"]
    assert dry.json()["errors"][0]["field"] == "demands"
    async with serving(near) as client:
        report = (await client.post("/v1/plans:validate", json=small_request())).json()
    assert report["candidate_configurations"] == 448
    assert any("448" in w and "800" in w for w in report["warnings"])


async def test_a_demand_with_no_configuration_is_warned_about(checking_app: FastAPI) -> None:
    request = small_request(
        profiles=[{"name": "cell", "modcod_set": "nr-256qam", "rolloffs": [0.2]}],
    )
    request["demands"][1] |= {"profile": "cell", "modulations": ["8PSK"]}  # not in TS 38.214
    async with serving(checking_app) as client:
        report = (await client.post("/v1/plans:validate", json=request)).json()
    assert report["per_demand"][1]["configurations"] == 0
    assert [w for w in report["warnings"] if w.startswith("demands[1]")]


def test_the_openapi_document_lists_the_dry_run_and_the_what_if() -> None:
    from service.openapi_export import openapi_document

    paths = openapi_document()["paths"]
    assert "post" in paths["/v1/plans:validate"]
    assert "post" in paths["/v1/plans/{plan_id}/what-if"]
    responses = paths["/v1/plans/{plan_id}/what-if"]["post"]["responses"]
    assert {"200", "201", "404", "422"} <= responses.keys()
