"""CORS: off by default, an allow-list of exact origins when configured.

Source: WHATWG Fetch Standard §3.2 "CORS protocol": a preflight is an OPTIONS request with
``Origin`` and ``Access-Control-Request-Method`` (and ``Access-Control-Request-Headers``); a
successful answer carries ``Access-Control-Allow-Origin`` (the origin, or ``*``),
``Access-Control-Allow-Methods`` and ``Access-Control-Allow-Headers`` naming what was asked; an
answer to a CORS request is shared only when ``Access-Control-Allow-Origin`` matches the
request's origin, and only the headers listed in ``Access-Control-Expose-Headers`` (beyond the
safelisted ones) can be read.  A server that varies ``Access-Control-Allow-Origin`` by origin
lists ``Origin`` in ``Vary`` (Fetch §3.2.5, "CORS protocol and HTTP caches").
"""

from __future__ import annotations

import httpx
import pytest
from api_support import serving
from pydantic import ValidationError

from service.app import create_app
from service.keys import Scope, create_key
from service.settings import Settings
from service.store import Store

pytestmark = pytest.mark.anyio

ALLOWED = "https://ops.example.org"
ALSO_ALLOWED = "http://localhost:5173"
REFUSED = "https://elsewhere.example.net"


def _preflight(
    origin: str, method: str = "POST", headers: str = "authorization, content-type"
) -> dict[str, str]:
    return {
        "Origin": origin,
        "Access-Control-Request-Method": method,
        "Access-Control-Request-Headers": headers,
    }


def _cors_headers(answer: httpx.Response) -> dict[str, str]:
    return {k: v for k, v in answer.headers.items() if k.lower().startswith("access-control-")}


def _listed(value: str) -> set[str]:
    return {item.strip().lower() for item in value.split(",")}


@pytest.fixture
def cors(settings: Settings) -> Settings:
    return settings.model_copy(update={"cors_origins": [ALLOWED, ALSO_ALLOWED]})


async def test_without_an_allow_list_no_cors_header_is_sent(settings: Settings) -> None:
    async with serving(create_app(settings)) as client:
        simple = await client.get("/v1/plans", headers={"Origin": ALLOWED})
        preflight = await client.options("/v1/plans", headers=_preflight(ALLOWED))
    assert simple.status_code == 200 and _cors_headers(simple) == {}
    assert preflight.status_code == 405  # no CORS: OPTIONS is a method like any other
    assert _cors_headers(preflight) == {}
    assert preflight.headers["content-type"].startswith("application/problem+json")


async def test_a_preflight_from_a_listed_origin_allows_what_it_asks(cors: Settings) -> None:
    asked = "authorization, content-type, idempotency-key"
    async with serving(create_app(cors)) as client:
        answer = await client.options("/v1/plans", headers=_preflight(ALSO_ALLOWED, "POST", asked))
    assert answer.status_code == 200
    assert answer.headers["Access-Control-Allow-Origin"] == ALSO_ALLOWED  # exact, never "*"
    methods = {m.strip() for m in answer.headers["Access-Control-Allow-Methods"].split(",")}
    assert {"GET", "POST", "DELETE"} <= methods  # methods compare case-sensitively
    assert _listed(asked) <= _listed(answer.headers["Access-Control-Allow-Headers"])
    assert "origin" in _listed(answer.headers["Vary"])
    assert "Access-Control-Allow-Credentials" not in answer.headers  # keys go in Authorization


async def test_a_preflight_from_an_unlisted_origin_is_refused(cors: Settings) -> None:
    async with serving(create_app(cors)) as client:
        answer = await client.options("/v1/plans", headers=_preflight(REFUSED))
        near_miss = await client.options("/v1/plans", headers=_preflight(ALLOWED + ":443"))
    for refused in (answer, near_miss):  # origins compare exactly, port included
        assert refused.status_code == 400
        assert "Access-Control-Allow-Origin" not in refused.headers
        assert refused.headers["content-type"].startswith("application/problem+json")
        assert "origin" in refused.json()["detail"]


async def test_a_preflight_asking_for_an_unlisted_header_is_refused(cors: Settings) -> None:
    async with serving(create_app(cors)) as client:
        answer = await client.options("/v1/plans", headers=_preflight(ALLOWED, "POST", "x-secret"))
    assert answer.status_code == 400 and "headers" in answer.json()["detail"]


async def test_a_listed_origin_may_read_the_answer_and_its_headers(cors: Settings) -> None:
    async with serving(create_app(cors)) as client:
        answer = await client.get("/v1/plans", headers={"Origin": ALLOWED})
    assert answer.status_code == 200
    assert answer.headers["Access-Control-Allow-Origin"] == ALLOWED
    assert "origin" in _listed(answer.headers["Vary"])
    exposed = _listed(answer.headers["Access-Control-Expose-Headers"])
    assert {"location", "retry-after", "etag"} <= exposed


async def test_an_unlisted_origin_gets_the_answer_but_no_permission_to_read_it(
    cors: Settings,
) -> None:
    async with serving(create_app(cors)) as client:
        answer = await client.get("/v1/plans", headers={"Origin": REFUSED})
        no_origin = await client.get("/v1/plans")
    assert answer.status_code == 200  # the browser, not the server, withholds it
    assert "Access-Control-Allow-Origin" not in answer.headers
    assert "origin" in _listed(answer.headers["Vary"])
    assert "Access-Control-Allow-Origin" not in no_origin.headers  # not a CORS request


async def test_refusals_carry_the_cors_headers_so_a_page_can_read_why(cors: Settings) -> None:
    limited = cors.model_copy(update={"rate_limit": "1/minute", "max_body_bytes": 1024})
    async with serving(create_app(limited)) as client:
        await client.get("/v1/plans", headers={"Origin": ALLOWED})
        too_many = await client.get("/v1/plans", headers={"Origin": ALLOWED})
        too_large = await client.post(
            "/v1/plans", content=b" " * 2048, headers={"Origin": ALLOWED}
        )  # answered by the body-limit middleware, before any route
    store = Store(cors.database_url)
    store.ensure_schema()
    create_key(store, Scope.READ, "test read", cors.keys_pepper)
    store.close()
    async with serving(create_app(cors)) as client:
        unauthenticated = await client.get("/v1/plans", headers={"Origin": ALLOWED})
    for refused, status in ((too_many, 429), (too_large, 413), (unauthenticated, 401)):
        assert refused.status_code == status
        assert refused.headers["Access-Control-Allow-Origin"] == ALLOWED
        assert "retry-after" in _listed(refused.headers["Access-Control-Expose-Headers"])


def test_origins_are_exact_and_read_comma_separated(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("BANDWRIGHT_CORS_ORIGINS", f" {ALLOWED}, {ALSO_ALLOWED} ")
    assert Settings().cors_origins == [ALLOWED, ALSO_ALLOWED]
    for bad in ("*", "https://ops.example.org/", "ops.example.org", "https://ops.example.org/app"):
        with pytest.raises(ValidationError) as refused:
            Settings(cors_origins=bad)
        assert "cors_origins" in str(refused.value)
