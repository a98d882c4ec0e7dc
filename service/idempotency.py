"""``Idempotency-Key`` on the POSTs that create something (the IETF HTTP API working group's
draft "The Idempotency-Key HTTP Header Field"): the same key with the same body gives the first
answer again, status, Location and body, without computing or storing anything new; the same key
with another body is a 422 problem naming the header.

A key is remembered per route and per credential (the hash of the Authorization header), so two
clients cannot replay each other's answers.
"""

from __future__ import annotations

import hashlib
import json
from typing import Annotated

from fastapi import Header, Request
from fastapi.responses import JSONResponse
from pydantic import BaseModel

from service.errors import FieldIssue, InvalidInputError
from service.store import Replay, Store

__all__ = ["IdempotencyKey", "remember", "replayed"]

IdempotencyKey = Annotated[
    str | None,
    Header(
        alias="Idempotency-Key",
        min_length=1,
        max_length=255,
        pattern=r"^[\x21-\x7e]+$",
        description="repeat a POST safely: the same key and body give the first answer again",
    ),
]


def _slot(request: Request, key: str) -> str:
    who = hashlib.sha256(request.headers.get("authorization", "").encode()).hexdigest()[:16]
    return f"{request.url.path} {who} {key}"


def _digest(body: BaseModel) -> str:
    return hashlib.sha256(body.model_dump_json().encode()).hexdigest()


def replayed(
    store: Store, request: Request, key: str | None, body: BaseModel
) -> JSONResponse | None:
    """The first answer given for ``key`` with this body, or None when there is none yet;
    InvalidInputError when the key was used with another body."""
    if key is None:
        return None
    first = store.find_replay(_slot(request, key))
    if first is None:
        return None
    if first.body_hash != _digest(body):
        issue = FieldIssue("Idempotency-Key", "already used with a different request body")
        raise InvalidInputError([issue])
    headers = {"Location": first.location, "Idempotent-Replayed": "true"}
    return JSONResponse(json.loads(first.body_json), status_code=first.status, headers=headers)


def remember(
    store: Store,
    request: Request,
    key: str | None,
    body: BaseModel,
    answer: tuple[int, str, BaseModel],
) -> None:
    """Keep ``answer`` (status, Location, body) as the one to give again for ``key``."""
    if key is None:
        return
    status, location, out = answer
    replay = Replay(_digest(body), status, location, out.model_dump_json())
    store.add_replay(_slot(request, key), replay)
