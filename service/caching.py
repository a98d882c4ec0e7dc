"""HTTP caching of immutable plans and the headers every answer carries.

A stored plan never changes, so its representations (JSON, pictures, retunes) get a strong
ETag and ``Cache-Control: immutable`` (RFC 9110 §8.8.3 ETag, §13.1.2 If-None-Match with its weak
comparison, §15.4.5 304 Not Modified; RFC 9111 §5.2.2 Cache-Control and RFC 8246 immutable).
Every answer carries ``X-Content-Type-Options: nosniff`` (WHATWG Fetch, the header's definition).
"""

from __future__ import annotations

import hashlib

from fastapi import Request, Response
from starlette.types import ASGIApp, Message, Receive, Scope, Send

__all__ = ["IMMUTABLE", "NoSniffMiddleware", "entity_tag", "immutable", "not_modified"]

IMMUTABLE = "private, max-age=31536000, immutable"
"""A stored plan's representations never change (private: plans are not for shared caches)."""


def entity_tag(*parts: bytes) -> str:
    """A strong entity tag for a representation made from ``parts`` (and only from them)."""
    digest = hashlib.sha256()
    for part in parts:
        digest.update(len(part).to_bytes(8, "big"))
        digest.update(part)
    return f'"{digest.hexdigest()[:32]}"'


def not_modified(request: Request, tag: str) -> Response | None:
    """A 304 when If-None-Match holds ``tag`` (weak comparison: a W/ prefix is ignored) or
    ``*``; otherwise None."""
    header = request.headers.get("if-none-match")
    if header is None:
        return None
    listed = [item.strip().removeprefix("W/") for item in header.split(",")]
    if "*" in listed or tag in listed:
        return Response(status_code=304, headers={"ETag": tag, "Cache-Control": IMMUTABLE})
    return None


def immutable(content: bytes, media_type: str, tag: str) -> Response:
    """``content`` with its ETag, cacheable for good."""
    headers = {"ETag": tag, "Cache-Control": IMMUTABLE}
    return Response(content, media_type=media_type, headers=headers)


NOSNIFF = (b"x-content-type-options", b"nosniff")


class NoSniffMiddleware:
    """Adds ``X-Content-Type-Options: nosniff`` to every HTTP answer."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def sending(message: Message) -> None:
            if message["type"] == "http.response.start":
                message = dict(message)
                message["headers"] = [
                    *message.get("headers", []),
                    (b"x-content-type-options", b"nosniff"),
                ]
            await send(message)

        await self.app(scope, receive, sending)
