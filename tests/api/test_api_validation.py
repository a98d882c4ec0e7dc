"""Every rejection is an RFC 9457 problem document naming the bad field.

Source of the document shape: RFC 9457 §3 (members type, title, status, detail, instance; an
extension array such as ``errors`` for several problems of one type) and §3 on the media type
``application/problem+json``.  Status codes: RFC 9110 §15.5.21 (422 Unprocessable Content),
§15.5.14 (413 Content Too Large), §15.5.5 (404).
"""

from __future__ import annotations

import copy
from typing import Any

import pytest
from api_support import SMALL_REQUEST, serving, small_request
from fastapi import FastAPI
from hypothesis import given, settings
from hypothesis import strategies as st
from pydantic import ValidationError

from service.errors import field_path
from service.schemas import PlanRequest

pytestmark = pytest.mark.anyio

PROBLEM_MEMBERS = {"type", "title", "status", "detail", "instance"}


def _set(doc: dict[str, Any], path: tuple[Any, ...], value: Any) -> dict[str, Any]:
    doc = copy.deepcopy(doc)
    target: Any = doc
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    return doc


def _demand(**changes: Any) -> dict[str, Any]:
    demand: dict[str, Any] = copy.deepcopy(SMALL_REQUEST["demands"][0])
    demand.update(changes)
    return demand


NO_LINK = {k: v for k, v in SMALL_REQUEST["demands"][0].items() if k != "esn0_db"}

# (request body, field the problem document must name)
INVALID_CASES: list[tuple[dict[str, Any], str]] = [
    (_set(SMALL_REQUEST, ("block", "stop_hz"), 2.39e9), "block.stop_hz"),
    (_set(SMALL_REQUEST, ("block", "start_hz"), -5.0), "block.start_hz"),
    (_set(SMALL_REQUEST, ("block", "raster_hz"), 0), "block.raster_hz"),
    (
        _set(SMALL_REQUEST, ("block", "exclusions"), [{"start_hz": 2.3e9, "stop_hz": 2.401e9}]),
        "block.exclusions[0]",
    ),
    (
        _set(
            SMALL_REQUEST,
            ("block", "exclusions"),
            [{"start_hz": 2.401e9, "stop_hz": 2.403e9}, {"start_hz": 2.402e9, "stop_hz": 2.404e9}],
        ),
        "block.exclusions[1]",
    ),
    (
        _set(SMALL_REQUEST, ("block", "exclusions"), [{"start_hz": 2.405e9, "stop_hz": 2.404e9}]),
        "block.exclusions[0].stop_hz",
    ),
    (_set(SMALL_REQUEST, ("demands", 1, "target_rate_bps"), 5e5), "demands[1].target_rate_bps"),
    (_set(SMALL_REQUEST, ("demands", 1, "min_rate_bps"), -1), "demands[1].min_rate_bps"),
    (_set(SMALL_REQUEST, ("demands", 0, "cn0_dbhz"), 70.0), "demands[0].esn0_db"),
    (_set(SMALL_REQUEST, ("demands",), [NO_LINK]), "demands[0].esn0_db"),
    (_set(SMALL_REQUEST, ("demands", 1, "id"), "north"), "demands[1].id"),
    (_set(SMALL_REQUEST, ("demands", 0, "id"), "has space"), "demands[0].id"),
    (_set(SMALL_REQUEST, ("demands", 0, "priority"), 0), "demands[0].priority"),
    (
        _set(SMALL_REQUEST, ("demands", 0, "modulations"), ["QPSK", "7QAM"]),
        "demands[0].modulations[1]",
    ),
    (_set(SMALL_REQUEST, ("demands", 0, "pinned_center_hz"), 1.0e9), "demands[0].pinned_center_hz"),
    (
        _set(
            SMALL_REQUEST,
            ("demands", 0, "current"),
            {
                "center_hz": 2.405e9,
                "symbol_rate_baud": 1e6,
                "rolloff": 0.2,
                "modulation": "QPSK",
                "code_rate": "5/4",
            },
        ),
        "demands[0].current.code_rate",
    ),
    (_set(SMALL_REQUEST, ("demands", 0, "margin_db"), "lots"), "demands[0].margin_db"),
    (_set(SMALL_REQUEST, ("demands", 0, "colour"), "blue"), "demands[0].colour"),
    (_set(SMALL_REQUEST, ("demands",), []), "demands"),
    (_set(SMALL_REQUEST, ("time_limit_s",), 301), "time_limit_s"),
    (_set(SMALL_REQUEST, ("time_limit_s",), 0), "time_limit_s"),
    (  # 250 demands need at least 5 s (20 ms each); the request allows 3 s
        _set(
            SMALL_REQUEST,
            ("demands",),
            [
                {"id": f"d{i}", "min_rate_bps": 1e4, "target_rate_bps": 2e4, "esn0_db": 12.0}
                for i in range(250)
            ],
        ),
        "time_limit_s",
    ),
    (_set(SMALL_REQUEST, ("objective",), "max_fun"), "objective"),
    (_set(SMALL_REQUEST, ("name",), "north\x00yard"), "name"),  # PostgreSQL text cannot hold NUL
    (_set(SMALL_REQUEST, ("name",), "line\nbreak"), "name"),
    (_set(SMALL_REQUEST, ("transmitter", "rolloffs"), [0.2, 1.5]), "transmitter.rolloffs[1]"),
    (
        _set(SMALL_REQUEST, ("transmitter", "filter_span_symbols"), 1),
        "transmitter.filter_span_symbols",
    ),
    (
        _set(SMALL_REQUEST, ("transmitter", "amplifier"), {"model": "tube"}),
        "transmitter.amplifier.model",
    ),
    (
        _set(SMALL_REQUEST, ("coding", "target_block_error_rate"), 0),
        "coding.target_block_error_rate",
    ),
    (_set(SMALL_REQUEST, ("coding", "framing_overhead"), 0.9), "coding.framing_overhead"),
    (_set(SMALL_REQUEST, ("leakage_limit_db",), -3), "leakage_limit_db"),
    ({k: v for k, v in SMALL_REQUEST.items() if k != "block"}, "block"),
]


def assert_problem(response: Any, status: int) -> dict[str, Any]:
    assert response.status_code == status, response.text
    assert response.headers["content-type"].startswith("application/problem+json")
    doc: dict[str, Any] = response.json()
    assert doc.keys() >= PROBLEM_MEMBERS
    assert doc["status"] == status
    return doc


@pytest.mark.parametrize(("body", "field"), INVALID_CASES, ids=[f for _, f in INVALID_CASES])
async def test_each_invalid_field_is_named(app: FastAPI, body: dict[str, Any], field: str) -> None:
    async with serving(app) as client:
        response = await client.post("/v1/plans", json=body)
    doc = assert_problem(response, 422)
    fields = [e["field"] for e in doc["errors"]]
    assert field in fields
    assert all(e["message"] for e in doc["errors"])


async def test_too_many_demands_is_rejected(app: FastAPI) -> None:
    demands = [_demand(id=f"d{k}") for k in range(2001)]
    async with serving(app) as client:
        response = await client.post("/v1/plans", json=small_request(demands=demands))
    doc = assert_problem(response, 422)
    assert [e["field"] for e in doc["errors"]] == ["demands"]


async def test_body_over_5_mb_gets_413_problem(app: FastAPI) -> None:
    body = b'{"name": "' + b"x" * (5 * 1024 * 1024 + 10) + b'"}'
    headers = {"content-type": "application/json"}
    async with serving(app) as client:
        response = await client.post("/v1/plans", content=body, headers=headers)
    assert_problem(response, 413)


# Bodies that are not JSON text (RFC 8259 §2: a JSON text is one value; §8.1: UTF-8), each on a
# route that takes a body: the server cannot understand the request at all, so it is a 400
# (RFC 9110 §15.5.1), not a 422, which is for content it understood (§15.5.21).
MALFORMED_BODIES: list[tuple[str, bytes]] = [
    ("/v1/plans", b'{"name": '),  # cut short
    ("/v1/plans", b"{'name': 'single quotes'}"),
    ("/v1/carriers/evaluate", b"not json"),
    ("/v1/carriers/evaluate", b'{"symbol_rate_baud": 1e6,}'),  # trailing comma
    ("/v1/carriers/evaluate", b'{"modulation": "\xff"}'),  # not UTF-8
    ("/v1/jobs", b"[1, 2"),
    ("/v1/batches", b"   "),  # whitespace only: no value
]


@pytest.mark.parametrize(("path", "body"), MALFORMED_BODIES)
async def test_malformed_json_is_a_400_problem(app: FastAPI, path: str, body: bytes) -> None:
    headers = {"content-type": "application/json"}
    async with serving(app) as client:
        response = await client.post(path, content=body, headers=headers)
    doc = assert_problem(response, 400)
    assert doc["type"] == "urn:bandwright:problem:malformed-json"  # RFC 9457 §3.1.1, RFC 8141
    assert [e["field"] for e in doc["errors"]] == ["body"]
    assert "JSON" in doc["detail"]


async def test_json_that_parses_but_is_invalid_stays_a_422_naming_the_field(app: FastAPI) -> None:
    headers = {"content-type": "application/json"}
    body = b'{"symbol_rate_baud": "fast", "rolloff": 0.2, "modulation": "QPSK", '
    body += b'"code_rate": "3/4", "esn0_db": 10}'
    async with serving(app) as client:
        response = await client.post("/v1/carriers/evaluate", content=body, headers=headers)
        empty_object = await client.post("/v1/plans", content=b"{}", headers=headers)
    doc = assert_problem(response, 422)  # RFC 9110 §15.5.21: understood, but not processable
    assert doc["type"] == "urn:bandwright:problem:invalid-request"
    assert [e["field"] for e in doc["errors"]] == ["symbol_rate_baud"]
    fields = {e["field"] for e in assert_problem(empty_object, 422)["errors"]}
    assert {"block", "demands"} <= fields


async def test_unknown_previous_plan_is_named(app: FastAPI) -> None:
    async with serving(app) as client:
        response = await client.post("/v1/plans", json=small_request(previous_plan_id="f" * 32))
    doc = assert_problem(response, 422)
    assert [e["field"] for e in doc["errors"]] == ["previous_plan_id"]


async def test_unknown_plan_and_job_are_404_problems(app: FastAPI) -> None:
    async with serving(app) as client:
        plans = ("/v1/plans/nope", "/v1/plans/nope/retunes", "/v1/plans/nope/carriers.csv")
        for path in (*plans, "/v1/jobs/nope", "/nowhere"):
            assert_problem(await client.get(path), 404)
        assert_problem(await client.delete("/v1/plans"), 405)


async def test_unexpected_failure_is_a_logged_500_problem(settings: Any) -> None:
    from service.app import create_app

    def broken_solve(problem: Any, **_: Any) -> Any:
        raise RuntimeError("disk on fire")

    async with serving(create_app(settings, solve=broken_solve)) as client:
        response = await client.post("/v1/plans", json=small_request())
    doc = assert_problem(response, 500)
    assert "disk on fire" not in doc["detail"]


async def test_solver_problem_error_is_422_naming_its_field(settings: Any) -> None:
    from service.app import create_app
    from solver.model import ProblemError

    def refusing_solve(problem: Any, **_: Any) -> Any:
        raise ProblemError("demands[1].cn0_dbhz", "too weak for any catalogue entry")

    async with serving(create_app(settings, solve=refusing_solve)) as client:
        response = await client.post("/v1/plans", json=small_request())
    doc = assert_problem(response, 422)
    assert doc["errors"] == [
        {"field": "demands[1].cn0_dbhz", "message": "too weak for any catalogue entry"}
    ]


# Property: whatever a client puts in a demand, the validator either accepts it or names
# a field path under that demand (never an unnamed or a 500-style failure).
JSON_SCALARS = (
    st.none() | st.booleans() | st.floats(allow_nan=False) | st.integers() | st.text(max_size=8)
)
DEMAND_KEYS = [
    "id",
    "min_rate_bps",
    "target_rate_bps",
    "priority",
    "cn0_dbhz",
    "esn0_db",
    "margin_db",
    "relative_level_db",
    "pinned_center_hz",
    "unknown_key",
]


@settings(max_examples=150, deadline=None)
@given(st.dictionaries(st.sampled_from(DEMAND_KEYS), JSON_SCALARS, max_size=6))
def test_any_demand_is_accepted_or_its_bad_fields_named(changes: dict[str, Any]) -> None:
    body = _set(SMALL_REQUEST, ("demands", 0), _demand(**changes))
    try:
        PlanRequest.model_validate(body)
    except ValidationError as exc:
        paths = [field_path(e["loc"]) for e in exc.errors()]
        assert paths
        assert all(p.startswith("demands[0]") for p in paths), paths
