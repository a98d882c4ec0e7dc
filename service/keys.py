"""API keys with scopes: who may read, who may plan, who may administer.

A key is ``bw_`` and 43 URL-safe random characters (256 bits, :func:`secrets.token_urlsafe`).
Only its HMAC-SHA-256 under the service's pepper (``BANDWRIGHT_KEYS_PEPPER``) is stored, so a
copy of the database does not give keys away.  Clients send ``Authorization: Bearer KEY``
(RFC 6750 §2.1); a missing or unknown key is 401 with ``WWW-Authenticate: Bearer`` (RFC 6750
§3), a key whose scope is too narrow is 403.

Scopes nest: ``read`` (GET), ``plan`` (read, and POST: plans, jobs, evaluations), ``admin``
(everything, ``/metrics`` included).  Health and readiness probes stay open.  With no live key
in the store the service runs open; :func:`open_serving_refused` keeps that to loopback unless
the operator says otherwise.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import secrets
import uuid
from enum import StrEnum
from typing import Annotated

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from service.errors import ForbiddenError, UnauthenticatedError
from service.runtime import Runtime, get_runtime
from service.store import KeyRecord, Store

__all__ = ["Scope", "authorise", "create_key", "key_hash", "key_id_of", "open_serving_refused"]

KEY_PREFIX = "bw_"
OPEN_PATHS = frozenset({"/healthz", "/readyz"})


class Scope(StrEnum):
    READ = "read"
    PLAN = "plan"
    ADMIN = "admin"


_RANK = {Scope.READ: 0, Scope.PLAN: 1, Scope.ADMIN: 2}


def key_hash(key: str, pepper: str) -> str:
    """The stored form of a key: HMAC-SHA-256 under the pepper, hex."""
    return hmac.new(pepper.encode(), key.encode(), hashlib.sha256).hexdigest()


def create_key(store: Store, scope: Scope, name: str, pepper: str) -> tuple[str, KeyRecord]:
    """A new key (returned once, never stored) and its stored record."""
    key = KEY_PREFIX + secrets.token_urlsafe(32)
    record = store.add_key(uuid.uuid4().hex, name, scope.value, key_hash(key, pepper))
    return key, record


def needed_scope(request: Request) -> Scope | None:
    """What a request needs: nothing for the probes, admin for metrics, read for reading,
    plan for anything that computes or stores."""
    path = request.url.path
    if path in OPEN_PATHS:
        return None
    if path == "/metrics":
        return Scope.ADMIN
    return Scope.READ if request.method in ("GET", "HEAD") else Scope.PLAN


_bearer = HTTPBearer(auto_error=False, description="an API key: `bandwright keys create`")


def authorise(
    request: Request,
    runtime: Annotated[Runtime, Depends(get_runtime)],
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
) -> None:
    """FastAPI dependency on every route: the bearer key must be live and wide enough (open
    when the store holds no live key)."""
    needed = needed_scope(request)
    if needed is None or not runtime.store.has_keys():
        return
    if credentials is None:
        raise UnauthenticatedError("send `Authorization: Bearer <API key>`")
    record = runtime.store.find_key(key_hash(credentials.credentials, runtime.settings.keys_pepper))
    if record is None:
        raise UnauthenticatedError("unknown or revoked API key")
    if _RANK[Scope(record.scope)] < _RANK[needed]:
        raise ForbiddenError(f"this key's scope is {record.scope!r}; {needed.value!r} is needed")
    request.state.key_id = record.id


def key_id_of(request: Request) -> str | None:
    """The id of the API key that :func:`authorise` accepted for this request (None when open)."""
    key_id: str | None = getattr(request.state, "key_id", None)
    return key_id


def open_serving_refused(host: str, store: Store, allow_open: bool) -> str | None:
    """Why ``bandwright serve`` must not start open on ``host`` (None when it may): without a
    live key, only loopback runs open, unless ``allow_open`` says so."""
    if allow_open or store.has_keys():
        return None
    try:
        loopback = ipaddress.ip_address(host).is_loopback
    except ValueError:
        loopback = host == "localhost"
    if loopback:
        return None
    return (
        f"no API key exists and {host} is not loopback: create one with `bandwright keys create "
        "--scope admin`, or set BANDWRIGHT_ALLOW_OPEN=true to serve without keys"
    )
