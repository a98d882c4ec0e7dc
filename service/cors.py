"""Cross-origin calls from browsers, for an allow-list of exact origins; off by default.

With ``BANDWRIGHT_CORS_ORIGINS`` empty no CORS header is ever sent, so browsers keep pages of
other origins from reading any answer.  With origins listed, Starlette's
:class:`~starlette.middleware.cors.CORSMiddleware` answers preflights (``OPTIONS`` with
``Access-Control-Request-Method``) and adds ``Access-Control-Allow-Origin`` (echoing the origin,
with ``Vary: Origin``) to answers for a listed origin only.  No credentials mode: the API key
travels in ``Authorization``, which the preflight allows by name.  A preflight that is refused
is answered with a 400 problem document instead of Starlette's plain text.

The middleware sits outside every other, so refusals (401, 429, 503 …) carry the headers too and
a page can read why it was refused.

References
----------
WHATWG Fetch Standard, §3.2 "CORS protocol" (preflight, Access-Control-Allow-Origin,
Access-Control-Allow-Headers, Access-Control-Expose-Headers); RFC 6454 §6.2 (origin serialisation).
"""

from __future__ import annotations

from fastapi import FastAPI
from starlette.datastructures import Headers
from starlette.middleware.cors import CORSMiddleware
from starlette.responses import Response
from starlette.types import Receive, Scope, Send

from service.errors import problem_response

__all__ = ["ALLOWED_HEADERS", "ALLOWED_METHODS", "EXPOSED_HEADERS", "add_cors"]

ALLOWED_METHODS = ("GET", "POST", "DELETE")
ALLOWED_HEADERS = ("Authorization", "Content-Type", "Idempotency-Key", "If-None-Match")
EXPOSED_HEADERS = ("Location", "Retry-After", "ETag", "Idempotent-Replayed")
"""Answer headers a page may read besides the CORS-safelisted ones."""
PREFLIGHT_MAX_AGE_S = 600
REFUSED = 400


class _ProblemCORSMiddleware(CORSMiddleware):
    """Starlette's middleware, with a refused preflight told as a problem document."""

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http" and scope["method"] == "OPTIONS":
            headers = Headers(scope=scope)
            if "origin" in headers and "access-control-request-method" in headers:
                response = self.preflight_response(request_headers=headers)
                if response.status_code == REFUSED:
                    response = _as_problem(response, scope["path"])
                await response(scope, receive, send)
                return
        await super().__call__(scope, receive, send)


def _as_problem(refused: Response, path: str) -> Response:
    """Starlette's plain-text refusal ("Disallowed CORS origin, …") as a problem document, with
    the same CORS headers."""
    detail = bytes(refused.body).decode() + " (the allow-list is BANDWRIGHT_CORS_ORIGINS)"
    kept = ("access-control-", "vary")
    headers = {name: value for name, value in refused.headers.items() if name.startswith(kept)}
    return problem_response(REFUSED, slug=None, detail=detail, instance=path, headers=headers)


def add_cors(app: FastAPI, origins: list[str]) -> None:
    """Add the CORS middleware for ``origins`` (outside every middleware added before);
    nothing when the list is empty."""
    if not origins:
        return
    app.add_middleware(
        _ProblemCORSMiddleware,
        allow_origins=origins,
        allow_methods=ALLOWED_METHODS,
        allow_headers=ALLOWED_HEADERS,
        expose_headers=EXPOSED_HEADERS,
        allow_credentials=False,
        max_age=PREFLIGHT_MAX_AGE_S,
    )
