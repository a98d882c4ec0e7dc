"""RFC 9457 problem details, and the one place that maps exceptions to HTTP statuses.

Exception tree of the service::

    ServiceError
     ├── InvalidInputError     422  the request is well-formed JSON but not a valid problem
     ├── NotFoundError         404  no plan or job with that id
     ├── BodyTooLargeError     413  the body exceeds the limit
     ├── TooManyRequestsError  429  over the request rate, or the key's job cap (with Retry-After)
     ├── SolverBusyError       503  every solve slot and queue place is taken (with Retry-After)
     └── PicturesBusyError     503  every drawing process and waiting place is taken (Retry-After)

    StoreUnavailableError      503  the database does not answer (with Retry-After)
     └── SchemaNotReadyError   503  it answers, but its tables are not this version's

Also mapped here: :class:`solver.ProblemError` (422, naming its field), FastAPI's
``RequestValidationError`` (422, one entry per bad field; 400 ``malformed-json`` when the body is
not JSON at all, or not UTF-8), Starlette's ``HTTPException`` (its own status, e.g. 405 or 413)
and any other exception (500, logged with its traceback).  Every answer is an
``application/problem+json`` document; no request ever gets a bare 500.

Problem types are URNs of the service's own namespace, ``urn:bandwright:problem:<slug>``
(RFC 8141 syntax), one per entry of :data:`PROBLEM_TYPES`; a plain HTTP status with nothing more
to say is ``about:blank`` (RFC 9457 §4.2.1).  No type points at a web address.

References
----------
RFC 9457, "Problem Details for HTTP APIs", IETF, July 2023.
RFC 8141, "Uniform Resource Names (URNs)", IETF, April 2017.
RFC 9110, "HTTP Semantics", §15.5.1 (400 Bad Request), IETF, June 2022.
RFC 6585, "Additional HTTP Status Codes", §4 (429 Too Many Requests), IETF, April 2012.
RFC 9110, "HTTP Semantics", §10.2.3 (Retry-After), IETF, June 2022.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass
from http import HTTPStatus
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from solver import ProblemError

__all__ = [
    "PROBLEM_JSON",
    "PROBLEM_TYPES",
    "BodyLimitMiddleware",
    "BodyTooLargeError",
    "ConflictError",
    "FieldIssue",
    "ForbiddenError",
    "InvalidInputError",
    "NotFoundError",
    "PicturesBusyError",
    "SchemaNotReadyError",
    "ServiceError",
    "SolverBusyError",
    "StoreUnavailableError",
    "TooManyRequestsError",
    "UnauthenticatedError",
    "UnexpectedErrorMiddleware",
    "field_path",
    "install_error_handlers",
    "problem_document",
    "problem_response",
    "problem_type",
]

logger = logging.getLogger(__name__)

PROBLEM_JSON = "application/problem+json"
PROBLEM_URN_PREFIX = "urn:bandwright:problem:"
PROBLEM_TYPES: dict[str, str] = {
    "malformed-json": "Malformed JSON",  # 400: not JSON (RFC 8259), or not UTF-8
    "invalid-request": "Invalid request",  # 422: JSON, but `errors` names each bad field
    "unauthenticated": "Unauthenticated",  # 401: no API key, or an unknown or revoked one
    "forbidden": "Forbidden",  # 403: the key's scope does not cover the request
    "not-found": "Not found",  # 404
    "conflict": "Conflict",  # 409: the resource's state does not allow the request
    "body-too-large": "Body too large",  # 413
    "rate-limited": "Rate limited",  # 429, Retry-After
    "too-many-jobs": "Too many jobs",  # 429, Retry-After
    "internal": "Internal",  # 500, logged
    "solver-busy": "Solver busy",  # 503, Retry-After
    "pictures-busy": "Pictures busy",  # 503, Retry-After
    "store-unavailable": "Store unavailable",  # 503, Retry-After
}
"""Every problem type the service emits: slug (``urn:bandwright:problem:<slug>``) → title."""
VALUE_ERROR_PREFIX = "Value error, "  # pydantic prefixes messages of ValueError
REQUEST_PARTS = frozenset({"body", "query", "path", "header", "cookie"})


@dataclass(frozen=True)
class FieldIssue:
    """One invalid input: ``field`` is a path such as ``demands[3].target_rate_bps``."""

    field: str
    message: str


class ServiceError(Exception):
    """Base of the service's own errors."""


class InvalidInputError(ServiceError):
    """The request names values that cannot form a valid problem."""

    def __init__(self, issues: Sequence[FieldIssue]) -> None:
        super().__init__("; ".join(f"{i.field}: {i.message}" for i in issues))
        self.issues = tuple(issues)


class NotFoundError(ServiceError):
    """No resource of kind ``kind`` has id ``resource_id``."""

    def __init__(self, kind: str, resource_id: str) -> None:
        super().__init__(f"no {kind} with id {resource_id!r}")
        self.kind = kind
        self.resource_id = resource_id


class ConflictError(ServiceError):
    """The resource's state does not allow the request (409), e.g. cancelling an ended job."""


class StoreUnavailableError(RuntimeError):
    """The database cannot be reached (a 503 with Retry-After, never a 500)."""


class SchemaNotReadyError(StoreUnavailableError):
    """The database answers but its tables are not this version's: behind the newest migration
    (``bandwright db upgrade`` brings it there), or made by no known migration.  A 503 like an
    unreachable store, whose detail says what to do."""


class UnauthenticatedError(ServiceError):
    """No API key, or one that is unknown or revoked (401)."""


class ForbiddenError(ServiceError):
    """An API key whose scope does not cover the request (403)."""


class ClientGoneError(ServiceError):
    """The client left before its answer was ready (a synchronous plan: the solve was stopped
    and nothing was stored; a picture: the drawing was stopped)."""

    def __init__(
        self, detail: str = "the client disconnected; the solve was stopped and nothing stored"
    ) -> None:
        super().__init__(detail)


CLIENT_GONE_STATUS = 499
"""Status logged for a request whose client left (nginx's convention; nobody receives it)."""


class BodyTooLargeError(ServiceError):
    """The request body is larger than the limit (bytes)."""

    def __init__(self, limit_bytes: int) -> None:
        super().__init__(f"request body larger than {limit_bytes} bytes")
        self.limit_bytes = limit_bytes


class SolverBusyError(ServiceError):
    """Every solve slot and waiting place is taken; retry after ``retry_after_s`` seconds."""

    def __init__(self, retry_after_s: int) -> None:
        super().__init__(f"all solver slots are busy; retry after {retry_after_s} s")
        self.retry_after_s = retry_after_s


class TooManyRequestsError(ServiceError):
    """The client is over a limit of its own (429, RFC 6585 §4): its request rate
    (``rate-limited``) or its key's concurrent jobs (``too-many-jobs``); retry after
    ``retry_after_s`` seconds (RFC 9110 §10.2.3)."""

    def __init__(self, slug: str, detail: str, retry_after_s: int) -> None:
        super().__init__(detail)
        self.slug = slug
        self.retry_after_s = retry_after_s


class PicturesBusyError(ServiceError):
    """Every drawing process and waiting place is taken; retry after ``retry_after_s``."""

    def __init__(self, retry_after_s: int) -> None:
        super().__init__(f"every picture drawing slot is busy; retry after {retry_after_s} s")
        self.retry_after_s = retry_after_s


def field_path(loc: Sequence[int | str]) -> str:
    """Turn a validation location into a dotted path: ``demands[3].target_rate_bps``.

    >>> field_path(("body", "demands", 3, "target_rate_bps"))
    'demands[3].target_rate_bps'
    >>> field_path(("query", "block_length_bits"))
    'block_length_bits'
    """
    parts = list(loc)
    if parts and parts[0] in REQUEST_PARTS:
        parts = parts[1:]
    path = ""
    for part in parts:
        if isinstance(part, int):
            path += f"[{part}]"
        else:
            path += f".{part}" if path else str(part)
    return path or "body"


def problem_type(slug: str | None) -> str:
    """The ``type`` URI of a problem: ``urn:bandwright:problem:<slug>``, or ``about:blank``.

    >>> problem_type("not-found")
    'urn:bandwright:problem:not-found'
    >>> problem_type(None)
    'about:blank'
    """
    if slug is None:
        return "about:blank"
    if slug not in PROBLEM_TYPES:
        raise ValueError(f"{slug=} is not one of the service's problem types")
    return PROBLEM_URN_PREFIX + slug


def problem_document(
    status: int, slug: str | None, detail: str, instance: str, errors: Sequence[FieldIssue] = ()
) -> dict[str, Any]:
    """One problem details document; ``slug=None`` means ``about:blank`` (plain HTTP status)."""
    phrase = HTTPStatus(status).phrase
    body: dict[str, Any] = {
        "type": problem_type(slug),
        "title": phrase if slug is None else PROBLEM_TYPES[slug],
        "status": status,
        "detail": detail,
        "instance": instance,
    }
    if errors:
        body["errors"] = [{"field": e.field, "message": e.message} for e in errors]
    return body


def problem_response(
    status: int,
    *,
    slug: str | None,
    detail: str,
    instance: str,
    errors: Sequence[FieldIssue] = (),
    headers: dict[str, str] | None = None,
) -> JSONResponse:
    """A problem details answer with media type application/problem+json."""
    body = problem_document(status, slug, detail, instance, errors)
    return JSONResponse(body, status_code=status, headers=headers, media_type=PROBLEM_JSON)


def _issues_from_validation(exc: RequestValidationError) -> list[FieldIssue]:
    issues = []
    for err in exc.errors():
        message = str(err.get("msg", "invalid value")).removeprefix(VALUE_ERROR_PREFIX)
        issues.append(FieldIssue(field_path(err.get("loc", ())), message))
    return issues


def _malformed_json(request: Request, message: str) -> JSONResponse:
    """400 (RFC 9110 §15.5.1): the body cannot be parsed, so no field can be named but ``body``."""
    return problem_response(
        400,
        slug="malformed-json",
        detail=f"the request body is not valid JSON: {message}",
        instance=request.url.path,
        errors=[FieldIssue("body", message)],
    )


def _json_syntax_error(exc: RequestValidationError) -> str | None:
    """Where and why the body failed to parse as JSON, or ``None`` if it parsed."""
    for err in exc.errors():
        if err.get("type") == "json_invalid":
            reason = str(err.get("ctx", {}).get("error", "JSON decode error"))
            loc = err.get("loc", ())
            offset = loc[-1] if len(loc) > 1 and isinstance(loc[-1], int) else None
            return reason if offset is None else f"{reason} at character {offset}"
    return None


async def _on_validation(request: Request, exc: Exception) -> JSONResponse:
    if not isinstance(exc, RequestValidationError):
        return await _on_unexpected(request, exc)
    syntax_error = _json_syntax_error(exc)
    if syntax_error is not None:
        return _malformed_json(request, syntax_error)
    issues = _issues_from_validation(exc)
    detail = f"{len(issues)} invalid field(s): " + ", ".join(i.field for i in issues)
    return problem_response(
        422, slug="invalid-request", detail=detail, instance=request.url.path, errors=issues
    )


async def _on_service_error(request: Request, exc: Exception) -> JSONResponse:
    path = request.url.path
    if isinstance(exc, InvalidInputError):
        return problem_response(
            422, slug="invalid-request", detail=str(exc), instance=path, errors=exc.issues
        )
    if isinstance(exc, NotFoundError):
        return problem_response(404, slug="not-found", detail=str(exc), instance=path)
    if isinstance(exc, ConflictError):
        return problem_response(409, slug="conflict", detail=str(exc), instance=path)
    if isinstance(exc, UnauthenticatedError):
        headers = {"WWW-Authenticate": 'Bearer realm="bandwright"'}
        return problem_response(
            401, slug="unauthenticated", detail=str(exc), instance=path, headers=headers
        )
    if isinstance(exc, ForbiddenError):
        return problem_response(403, slug="forbidden", detail=str(exc), instance=path)
    if isinstance(exc, ClientGoneError):
        logger.info("%s %s: %s", request.method, path, exc)
        return JSONResponse({"detail": str(exc)}, status_code=CLIENT_GONE_STATUS)
    if isinstance(exc, BodyTooLargeError):
        return problem_response(413, slug="body-too-large", detail=str(exc), instance=path)
    if isinstance(exc, TooManyRequestsError):
        headers = {"Retry-After": str(exc.retry_after_s)}
        return problem_response(429, slug=exc.slug, detail=str(exc), instance=path, headers=headers)
    if isinstance(exc, SolverBusyError | PicturesBusyError):
        slug = "solver-busy" if isinstance(exc, SolverBusyError) else "pictures-busy"
        headers = {"Retry-After": str(exc.retry_after_s)}
        return problem_response(503, slug=slug, detail=str(exc), instance=path, headers=headers)
    return await _on_unexpected(request, exc)


async def _on_problem_error(request: Request, exc: Exception) -> JSONResponse:
    if not isinstance(exc, ProblemError):
        return await _on_unexpected(request, exc)
    issue = FieldIssue(exc.field, exc.message)
    return problem_response(
        422, slug="invalid-request", detail=str(exc), instance=request.url.path, errors=[issue]
    )


async def _on_http_error(request: Request, exc: Exception) -> JSONResponse:
    if not isinstance(exc, StarletteHTTPException):
        return await _on_unexpected(request, exc)
    if exc.status_code == 400 and isinstance(exc.__cause__, UnicodeDecodeError):
        # FastAPI's answer to a JSON body whose bytes are not UTF-8 (RFC 8259 §8.1)
        return _malformed_json(request, f"not UTF-8 ({exc.__cause__.reason})")
    detail = exc.detail if isinstance(exc.detail, str) else HTTPStatus(exc.status_code).phrase
    headers = dict(exc.headers) if exc.headers else None
    return problem_response(
        exc.status_code, slug=None, detail=detail, instance=request.url.path, headers=headers
    )


async def _on_unexpected(request: Request, exc: Exception) -> JSONResponse:
    logger.exception("unhandled error on %s %s", request.method, request.url.path, exc_info=exc)
    return problem_response(
        500,
        slug="internal",
        detail="the service failed to answer this request; the error has been logged",
        instance=request.url.path,
    )


class UnexpectedErrorMiddleware:
    """Answers an unhandled error with a 500 problem document (and logs it), without letting
    it reach the server: re-raised, it would make the server close the connection, and the
    client's next request on it would fail."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = False

        async def sending(message: Message) -> None:
            nonlocal started
            started = started or message["type"] == "http.response.start"
            await send(message)

        try:
            await self.app(scope, receive, sending)
        except Exception as exc:
            if started:  # too late for a problem document: the server must end the response
                raise
            response = await _on_unexpected(Request(scope), exc)
            await response(scope, receive, send)


class BodyLimitMiddleware:
    """Refuses bodies over ``limit_bytes`` with a 413 problem document.

    A declared ``Content-Length`` over the limit is answered at once; a streamed body is
    counted as it arrives and :class:`BodyTooLargeError` is raised inside the route.
    """

    def __init__(self, app: ASGIApp, limit_bytes: int) -> None:
        self.app = app
        self.limit_bytes = limit_bytes

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers", [])).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit_bytes:
            error = BodyTooLargeError(self.limit_bytes)
            response = problem_response(
                413, slug="body-too-large", detail=str(error), instance=scope.get("path", "")
            )
            await response(scope, receive, send)
            return
        received = 0

        async def counted() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > self.limit_bytes:
                    raise BodyTooLargeError(self.limit_bytes)
            return message

        await self.app(scope, counted, send)


async def _on_store_unavailable(request: Request, exc: Exception) -> JSONResponse:
    logger.warning("%s %s: %s", request.method, request.url.path, exc)
    retry_after_s = request.app.state.runtime.settings.retry_after_s
    unready = isinstance(exc, SchemaNotReadyError)
    return problem_response(
        503,
        slug="store-unavailable",
        detail=str(exc) if unready else "the plan store does not answer; try again later",
        instance=request.url.path,
        headers={"Retry-After": str(retry_after_s)},
    )


def install_error_handlers(app: FastAPI) -> None:
    """Register every handler on ``app``; call once from the app factory."""
    app.add_exception_handler(StoreUnavailableError, _on_store_unavailable)
    app.add_exception_handler(RequestValidationError, _on_validation)
    app.add_exception_handler(ServiceError, _on_service_error)
    app.add_exception_handler(ProblemError, _on_problem_error)
    app.add_exception_handler(StarletteHTTPException, _on_http_error)
