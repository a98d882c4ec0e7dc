"""API keys and scopes: bearer keys (RFC 6750 §2.1), 401 with WWW-Authenticate: Bearer for a
missing or unknown key (RFC 6750 §3, RFC 9110 §15.5.2), 403 for a scope too narrow (RFC 9110
§15.5.4); keys stored only as keyed hashes; the service open only where that is safe."""

from __future__ import annotations

from pathlib import Path

import pytest
import sqlalchemy as sa
from api_support import serving, small_request

from service.app import create_app
from service.cli import main
from service.keys import Scope, create_key, key_hash, open_serving_refused
from service.settings import Settings
from service.store import Store

pytestmark = pytest.mark.anyio


def _keyed(settings: Settings, *scopes: Scope) -> list[str]:
    store = Store(settings.database_url)
    store.ensure_schema()
    keys = [create_key(store, scope, f"test {scope}", settings.keys_pepper)[0] for scope in scopes]
    store.close()
    return keys


def _bearer(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


async def test_with_keys_each_scope_reaches_what_it_covers(stores: Settings) -> None:
    read, plan, admin = _keyed(stores, Scope.READ, Scope.PLAN, Scope.ADMIN)
    async with serving(create_app(stores)) as client:
        anonymous = await client.get("/v1/plans")
        wrong = await client.get("/v1/plans", headers=_bearer("bw_not-a-key"))
        listed = await client.get("/v1/plans", headers=_bearer(read))
        refused = await client.post("/v1/plans", json=small_request(), headers=_bearer(read))
        planned = await client.post("/v1/plans", json=small_request(), headers=_bearer(plan))
        metrics_as_plan = await client.get("/metrics", headers=_bearer(plan))
        metrics_as_admin = await client.get("/metrics", headers=_bearer(admin))
        probes = [await client.get("/healthz"), await client.get("/readyz")]
    assert anonymous.status_code == wrong.status_code == 401
    assert anonymous.headers["WWW-Authenticate"].startswith("Bearer")
    assert anonymous.headers["content-type"].startswith("application/problem+json")
    assert listed.status_code == 200
    assert refused.status_code == 403 and "'plan' is needed" in refused.json()["detail"]
    assert planned.status_code == 201, planned.text
    assert metrics_as_plan.status_code == 403 and metrics_as_admin.status_code == 200
    assert [p.status_code for p in probes] == [200, 200]


async def test_a_revoked_key_is_refused(stores: Settings) -> None:
    read, _admin = _keyed(stores, Scope.READ, Scope.ADMIN)
    store = Store(stores.database_url)
    victim = next(k for k in store.list_keys() if k.scope == "read")
    assert store.revoke_key(victim.id) and not store.revoke_key(victim.id)
    store.close()
    async with serving(create_app(stores)) as client:
        response = await client.get("/v1/plans", headers=_bearer(read))
    assert response.status_code == 401


async def test_without_keys_the_service_is_open(stores: Settings) -> None:
    async with serving(create_app(stores)) as client:
        response = await client.get("/v1/plans")
    assert response.status_code == 200


def test_only_a_keyed_hash_is_stored(stores: Settings) -> None:
    (key,) = _keyed(stores, Scope.PLAN)
    engine = sa.create_engine(stores.database_url)
    with engine.connect() as db:
        (row,) = db.execute(sa.text("SELECT * FROM api_keys")).mappings().all()
    engine.dispose()
    assert row["key_hash"] == key_hash(key, stores.keys_pepper)
    assert not [column for column, value in row.items() if key in str(value)]
    assert key_hash(key, "another pepper") != row["key_hash"]
    if stores.database_url.startswith("sqlite:///"):  # nor anywhere in the file
        database = Path(stores.database_url.removeprefix("sqlite:///"))
        assert key not in database.read_bytes().decode("latin-1")


def test_the_openapi_document_declares_the_bearer_scheme(settings: Settings) -> None:
    document = create_app(settings).openapi()
    schemes = document["components"]["securitySchemes"]
    assert [s["scheme"].lower() for s in schemes.values()] == ["bearer"]
    create = document["paths"]["/v1/plans"]["post"]
    assert create["security"] and {"401", "403"} <= create["responses"].keys()
    assert "security" not in document["paths"]["/healthz"]["get"]


def test_open_serving_is_refused_off_loopback_without_keys(stores: Settings) -> None:
    store = Store(stores.database_url)
    store.ensure_schema()
    assert open_serving_refused("127.0.0.1", store, allow_open=False) is None
    assert open_serving_refused("::1", store, allow_open=False) is None
    assert "not loopback" in (open_serving_refused("0.0.0.0", store, allow_open=False) or "")
    assert open_serving_refused("0.0.0.0", store, allow_open=True) is None
    create_key(store, Scope.ADMIN, "ops", stores.keys_pepper)
    assert open_serving_refused("0.0.0.0", store, allow_open=False) is None
    store.close()


def test_keys_from_the_command_line(
    settings: Settings, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.setenv("BANDWRIGHT_DATABASE_URL", settings.database_url)
    assert main(["keys", "create", "--scope", "plan", "--name", "nightly replan"]) == 0
    key = capsys.readouterr().out.strip()
    assert key.startswith("bw_") and len(key) > 40
    assert main(["keys", "list"]) == 0
    listing = capsys.readouterr().out
    assert "plan\tlive" in listing and "nightly replan" in listing and key not in listing
    key_id = listing.split("\t")[0]
    assert main(["keys", "revoke", key_id]) == 0
    assert main(["keys", "revoke", key_id]) == 2
    main(["keys", "list"])
    assert "plan\trevoked" in capsys.readouterr().out


async def test_the_docs_pages_can_be_switched_off(settings: Settings) -> None:
    quiet = settings.model_copy(update={"docs": False})
    async with serving(create_app(quiet)) as client:
        pages = [await client.get("/docs"), await client.get("/redoc")]
        document = await client.get("/openapi.json")
    assert [p.status_code for p in pages] == [404, 404]
    assert document.status_code == 200
