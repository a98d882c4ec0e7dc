"""Plans: solve and store (``POST /v1/plans``), read, list, picture, carriers CSV, retunes."""

from __future__ import annotations

import threading
from collections.abc import Awaitable, Callable
from typing import Annotated, Any, TypeVar

import anyio
import anyio.to_thread
from fastapi import APIRouter, Depends, Path, Query, Request, Response

from service.caching import entity_tag, immutable, not_modified
from service.convert import setting_from_wire
from service.csvout import CSV_MEDIA_TYPE, carriers_csv
from service.errors import ClientGoneError, NotFoundError
from service.idempotency import IdempotencyKey, remember, replayed
from service.pictures import Picture, PictureKey, Pictures
from service.ratelimit import limit_solves
from service.runtime import Runtime, get_runtime, prepare, run_solve, store_plan
from service.schemas import (
    CarrierOut,
    DemandIn,
    PlanOut,
    PlanPage,
    PlanRequest,
    ProblemDocument,
    RetuneChange,
    RetuneList,
    RetuneOut,
    SettingOut,
)
from service.store import StoredPlan
from solver import Plan, Problem, SolveCancelledError, setting_change

__all__ = [
    "AUTH_RESPONSES",
    "COMMON_RESPONSES",
    "LIMIT_RESPONSES",
    "PROBLEM_RESPONSES",
    "router",
]

router = APIRouter(prefix="/v1/plans", tags=["plans"])

T = TypeVar("T")

MAX_PAGE = 100
PlanId = Annotated[str, Path(min_length=1, max_length=64, description="plan id")]


def _problem(description: str) -> dict[str, Any]:
    return {
        "model": ProblemDocument,
        "description": description,
        "content": {"application/problem+json": {}},
    }


COMMON_RESPONSES: dict[int | str, dict[str, Any]] = {
    400: _problem("a body that is not JSON, or not UTF-8"),
    422: _problem("invalid request; `errors` names each bad field"),
    500: _problem("unexpected failure (logged)"),
    503: _problem("the store does not answer (or every solver slot is busy); see Retry-After"),
}
"""What any operation may answer (declared for every one of them by the application)."""

AUTH_RESPONSES: dict[int | str, dict[str, Any]] = {
    401: _problem("no API key, or an unknown or revoked one (when the service has keys)"),
    403: _problem("the API key's scope does not cover this request"),
}
"""What the key check (:func:`service.keys.authorise`) may answer."""

RETRY_AFTER_HEADER: dict[str, Any] = {
    "Retry-After": {
        "description": "seconds to wait before trying again (RFC 9110 §10.2.3)",
        "schema": {"type": "integer", "minimum": 1},
    }
}

LIMIT_RESPONSES: dict[int | str, dict[str, Any]] = {
    429: {
        **_problem(
            "over the request rate of this API key (served open: of this client address), "
            "`rate-limited`; for POST /v1/jobs also over the key's cap of queued and running "
            "jobs, `too-many-jobs`; see Retry-After"
        ),
        "headers": RETRY_AFTER_HEADER,
    },
}
"""What the rate check (:mod:`service.ratelimit`) may answer."""

PROBLEM_RESPONSES: dict[int | str, dict[str, Any]] = {
    413: _problem("request body larger than the limit"),
    **COMMON_RESPONSES,
}
NOT_FOUND: dict[int | str, dict[str, Any]] = {404: _problem("no plan with that id")}
BUSY: dict[int | str, dict[str, Any]] = {
    503: {**_problem("every solver slot is busy; see Retry-After"), "headers": RETRY_AFTER_HEADER},
}
PICTURES_BUSY: dict[int | str, dict[str, Any]] = {
    503: {
        **_problem(
            "every picture drawing place is taken (`pictures-busy`), or the store does not "
            "answer; see Retry-After"
        ),
        "headers": RETRY_AFTER_HEADER,
    },
}


async def _cancel_when_client_leaves(
    request: Request, cancel: threading.Event, scope: anyio.CancelScope | None = None
) -> None:
    """Set ``cancel`` (and cancel ``scope``) once the client disconnects."""
    while True:
        message = await request.receive()
        if message["type"] == "http.disconnect":
            cancel.set()
            if scope is not None:
                scope.cancel()
            return


def solve_for_client(runtime: Runtime, problem: Problem, cancel: threading.Event) -> Plan:
    """``problem`` solved in this thread (a solver slot); a client that left while it ran is a
    :class:`ClientGoneError`, so the plan it would not see is not stored either."""
    try:
        plan = run_solve(runtime, problem, mode="sync", cancel=cancel)
    except SolveCancelledError:
        raise ClientGoneError() from None
    if cancel.is_set():
        raise ClientGoneError()
    return plan


async def in_solver_slot(
    runtime: Runtime, request: Request, work: Callable[[threading.Event], T]
) -> T:
    """``work(cancel)`` run in a solver slot, with ``cancel`` set once the client disconnects;
    its exception, if any, is raised here, outside the watching task group."""
    cancel = threading.Event()
    failure: Exception | None = None
    async with anyio.create_task_group() as watchers:
        watchers.start_soon(_cancel_when_client_leaves, request, cancel)
        try:
            out = await runtime.gate.run(lambda: work(cancel))
        except Exception as exc:  # re-raised below, outside the task group
            failure = exc
        finally:
            watchers.cancel_scope.cancel()
    if failure is not None:
        raise failure
    return out


@router.post(
    "",
    status_code=201,
    response_model=PlanOut,
    operation_id="create_plan",
    summary="Solve a planning request and store the plan",
    responses={**PROBLEM_RESPONSES, **BUSY},
    dependencies=[Depends(limit_solves)],
)
async def create_plan(
    body: PlanRequest,
    request: Request,
    response: Response,
    runtime: Annotated[Runtime, Depends(get_runtime)],
    idempotency_key: IdempotencyKey = None,
) -> PlanOut | Response:
    """An infeasible problem is a successful computation: 201 with status "infeasible".

    A client that disconnects stops the solve, whatever its stage, and nothing is stored."""
    first = await anyio.to_thread.run_sync(replayed, runtime.store, request, idempotency_key, body)
    if first is not None:
        return first

    def work(cancel: threading.Event) -> PlanOut:
        runtime.store.ping()  # a store that is down is a 503 before any solve, not after
        prepared = prepare(body, runtime.store, runtime.settings)
        plan = solve_for_client(runtime, prepared.problem, cancel)
        return store_plan(runtime, prepared, plan)

    out = await in_solver_slot(runtime, request, work)
    location = f"/v1/plans/{out.id}"
    answer = (201, location, out)
    await anyio.to_thread.run_sync(remember, runtime.store, request, idempotency_key, body, answer)
    response.headers["Location"] = location
    return out


MAX_OFFSET = 2**53
"""Plans a page may skip: every store's integer (64-bit) holds it, and so does a JSON number."""


@router.get("", operation_id="list_plans", summary="List stored plans, newest first")
def list_plans(
    runtime: Annotated[Runtime, Depends(get_runtime)],
    offset: Annotated[int, Query(ge=0, le=MAX_OFFSET, description="plans to skip")] = 0,
    limit: Annotated[int, Query(ge=1, le=MAX_PAGE, description="page size")] = 20,
) -> PlanPage:
    """One page of the stored plans."""
    items, total = runtime.store.list_plans(offset, limit)
    return PlanPage(items=items, total=total, offset=offset, limit=limit)


def stored_plan(runtime: Runtime, plan_id: str) -> StoredPlan:
    """The stored plan ``plan_id``, or a 404 problem."""
    stored = runtime.store.get_plan(plan_id)
    if stored is None:
        raise NotFoundError("plan", plan_id)
    return stored


NOT_MODIFIED: dict[int | str, dict[str, Any]] = {
    304: {"description": "the client's copy (If-None-Match) is current; no body"}
}


@router.get(
    "/{plan_id}",
    operation_id="get_plan",
    response_model=PlanOut,
    responses={**NOT_FOUND, **NOT_MODIFIED},
)
def get_plan(
    plan_id: PlanId, request: Request, runtime: Annotated[Runtime, Depends(get_runtime)]
) -> Response:
    """A stored plan (immutable: strong ETag, If-None-Match answered with 304)."""
    body = stored_plan(runtime, plan_id).plan.model_dump_json().encode()
    tag = entity_tag(body)
    return not_modified(request, tag) or immutable(body, "application/json", tag)


RENDERING = b"spectrum picture 2"
"""Part of every picture's ETag: change it when the drawing changes."""
MEDIA_TYPES = {"svg": "image/svg+xml", "png": "image/png"}


def get_pictures(request: Request) -> Pictures:
    """FastAPI dependency: the application's :class:`~service.pictures.Pictures`."""
    pictures: Pictures = request.app.state.pictures
    return pictures


async def _picture(
    runtime: Runtime, pictures: Pictures, key: PictureKey, request: Request
) -> Response:
    """A picture kept in memory, else drawn (once for every client asking meanwhile) in a
    worker process that stops when its last client leaves.  A replan's picture marks what
    changed since its parent plan (when the parent is still stored)."""
    plan_id, fmt = key
    picture = pictures.kept(key)
    if picture is None:
        stored = await anyio.to_thread.run_sync(stored_plan, runtime, plan_id)
        plan_json = stored.plan.model_dump_json()
        parent_json = await anyio.to_thread.run_sync(_parent_json, runtime, stored)
        parent_part = b"" if parent_json is None else parent_json.encode()
        tag = entity_tag(plan_json.encode(), fmt.encode(), RENDERING, parent_part)
        unchanged = not_modified(request, tag)
        if unchanged is not None:
            return unchanged
        args = (key, tag, plan_json, stored.request.model_dump_json(), parent_json)
        picture = await _unless_client_leaves(request, pictures.draw(*args))
    unchanged = not_modified(request, picture.tag)
    return unchanged or immutable(picture.content, MEDIA_TYPES[fmt], picture.tag)


def _parent_json(runtime: Runtime, stored: StoredPlan) -> str | None:
    """The stored plan's parent plan as JSON; None without a parent or when it is gone."""
    parent_id = stored.plan.parent_id
    parent = None if parent_id is None else runtime.store.get_plan(parent_id)
    return None if parent is None else parent.plan.model_dump_json()


async def _unless_client_leaves(request: Request, drawn: Awaitable[Picture]) -> Picture:
    """Await ``drawn``, abandoned (and with it the drawing) when the client disconnects."""
    picture: Picture | None = None
    failure: Exception | None = None
    async with anyio.create_task_group() as watchers:
        gone = threading.Event()
        watchers.start_soon(_cancel_when_client_leaves, request, gone, watchers.cancel_scope)
        try:
            picture = await drawn
        except Exception as exc:  # re-raised below, outside the task group
            failure = exc
        finally:
            watchers.cancel_scope.cancel()
    if failure is not None:
        raise failure
    if picture is None:
        raise ClientGoneError("the client disconnected; the drawing was stopped")
    return picture


Pictured = Annotated[Pictures, Depends(get_pictures)]


@router.get(
    "/{plan_id}/spectrum.svg",
    operation_id="get_plan_spectrum_svg",
    response_class=Response,
    responses={
        200: {"content": {"image/svg+xml": {}}},
        **NOT_FOUND,
        **NOT_MODIFIED,
        **PICTURES_BUSY,
    },
)
async def get_spectrum_svg(
    plan_id: PlanId,
    request: Request,
    runtime: Annotated[Runtime, Depends(get_runtime)],
    pictures: Pictured,
) -> Response:
    """The plan's spectrum picture (SVG), drawn once and then served from memory."""
    return await _picture(runtime, pictures, (plan_id, "svg"), request)


@router.get(
    "/{plan_id}/spectrum.png",
    operation_id="get_plan_spectrum_png",
    response_class=Response,
    responses={200: {"content": {"image/png": {}}}, **NOT_FOUND, **NOT_MODIFIED, **PICTURES_BUSY},
)
async def get_spectrum_png(
    plan_id: PlanId,
    request: Request,
    runtime: Annotated[Runtime, Depends(get_runtime)],
    pictures: Pictured,
) -> Response:
    """The plan's spectrum picture (PNG), drawn once and then served from memory."""
    return await _picture(runtime, pictures, (plan_id, "png"), request)


@router.get(
    "/{plan_id}/carriers.csv",
    operation_id="get_plan_carriers_csv",
    response_class=Response,
    responses={200: {"content": {"text/csv": {}}}, **NOT_FOUND, **NOT_MODIFIED},
    summary="The plan's carriers as CSV (RFC 4180); the plan's notices apply to every row",
)
def get_carriers_csv(
    plan_id: PlanId, request: Request, runtime: Annotated[Runtime, Depends(get_runtime)]
) -> Response:
    """One row per carrier by centre frequency, units in the column names (Hz, baud, dB, %,
    bit/s), an empty cell for null.  CSV has no place for the plan's cautions: read them in
    the plan's ``notices`` (``GET /v1/plans/{plan_id}``); they apply to every row."""
    body = carriers_csv(stored_plan(runtime, plan_id).plan).encode()
    tag = entity_tag(body)
    return not_modified(request, tag) or immutable(body, CSV_MEDIA_TYPE, tag)


@router.get(
    "/{plan_id}/retunes",
    operation_id="get_plan_retunes",
    responses=NOT_FOUND,
    summary="Carriers that moved or changed relative to the parent plan",
)
def get_retunes(plan_id: PlanId, runtime: Annotated[Runtime, Depends(get_runtime)]) -> RetuneList:
    """Relative to the parent plan; without a parent, to the request's ``current`` settings."""
    stored = stored_plan(runtime, plan_id)
    parent_id = stored.plan.parent_id
    parent = None if parent_id is None else runtime.store.get_plan(parent_id)
    if parent is not None:
        before = {c.demand_id: _setting(c) for c in parent.plan.carriers}
    else:
        before = _request_settings(stored.request.demands)
    after = {c.demand_id: _setting(c) for c in stored.plan.carriers}
    return RetuneList(plan_id=plan_id, parent_id=parent_id, retunes=compare_settings(before, after))


def _setting(carrier: CarrierOut) -> SettingOut:
    return SettingOut(
        center_hz=carrier.center_hz,
        symbol_rate_baud=carrier.symbol_rate_baud,
        rolloff=carrier.rolloff,
        modulation=carrier.modulation,
        code_rate=carrier.code_rate,
        output_backoff_db=carrier.output_backoff_db,
    )


def _request_settings(demands: list[DemandIn]) -> dict[str, SettingOut]:
    return {d.id: SettingOut(**d.current.model_dump()) for d in demands if d.current is not None}


def compare_settings(
    before: dict[str, SettingOut], after: dict[str, SettingOut]
) -> list[RetuneOut]:
    """Every demand whose carrier moved, changed configuration, appeared or disappeared."""
    retunes = []
    for demand_id in sorted(before.keys() | after.keys()):
        old, new = before.get(demand_id), after.get(demand_id)
        change = _change(old, new)
        if change is None:
            continue
        shift = None if old is None or new is None else new.center_hz - old.center_hz
        retunes.append(
            RetuneOut(demand_id=demand_id, change=change, shift_hz=shift, previous=old, current=new)
        )
    return retunes


def _change(old: SettingOut | None, new: SettingOut | None) -> RetuneChange | None:
    """The solver's rule (:func:`solver.setting_change`), so that this list and the plan's
    ``retuned`` flags agree."""
    if old is None:
        return RetuneChange.ADDED
    if new is None:
        return RetuneChange.DROPPED
    change = setting_change(setting_from_wire(old), setting_from_wire(new))
    if change.moved and change.reconfigured:
        return RetuneChange.MOVED_AND_RECONFIGURED
    if change.moved:
        return RetuneChange.MOVED
    return RetuneChange.RECONFIGURED if change.reconfigured else None
