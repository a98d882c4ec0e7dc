"""Probes and metrics: ``/healthz`` (alive), ``/readyz`` (store reachable and its schema this
version's), ``/metrics``.

The probes need no key and are never rate-limited; ``/metrics`` needs an admin key and counts
against the request rate."""

from __future__ import annotations

import logging
from typing import Annotated

from fastapi import APIRouter, Depends, Response
from fastapi.responses import JSONResponse

from service.errors import SchemaNotReadyError
from service.keys import authorise
from service.metrics import CONTENT_TYPE
from service.ratelimit import limit_requests
from service.routes.plans import AUTH_RESPONSES, LIMIT_RESPONSES
from service.runtime import Runtime, get_runtime
from service.schemas import HealthOut
from service.store import StoreUnavailableError

__all__ = ["router"]

logger = logging.getLogger(__name__)
router = APIRouter(tags=["health"])


@router.get("/healthz", operation_id="healthz", summary="The process answers")
async def healthz() -> HealthOut:
    """Never touches the store or the solver, so it answers during long solves."""
    return HealthOut(status="ok")


@router.get(
    "/readyz",
    operation_id="readyz",
    summary="The store answers, with this version's schema",
    responses={
        200: {"model": HealthOut, "description": "store reachable"},
        503: {
            "model": HealthOut,
            "description": "store unreachable, or its schema behind this version (the detail "
            "says to run `bandwright db upgrade`)",
        },
    },
)
def readyz(runtime: Annotated[Runtime, Depends(get_runtime)]) -> JSONResponse:
    """503 while the store cannot be reached or its schema is behind this version.  The first
    time it answers, a job queue that could not start without it starts."""
    try:
        runtime.store.ping()
        runtime.store_ready()
    except SchemaNotReadyError as exc:
        logger.warning("not ready: %s", exc)
        body = HealthOut(status="unavailable", store="outdated", detail=str(exc))
        return JSONResponse(body.model_dump(), status_code=503)
    except StoreUnavailableError as exc:
        logger.warning("not ready: %s", exc)
        body = HealthOut(status="unavailable", store="unreachable")
        return JSONResponse(body.model_dump(), status_code=503)
    return JSONResponse(HealthOut(status="ok", store="ok").model_dump())


@router.get(
    "/metrics",
    operation_id="metrics",
    summary="Prometheus text exposition",
    response_class=Response,
    responses={200: {"content": {"text/plain": {}}}, **AUTH_RESPONSES, **LIMIT_RESPONSES},
    dependencies=[Depends(authorise), Depends(limit_requests)],
)
async def metrics(runtime: Annotated[Runtime, Depends(get_runtime)]) -> Response:
    """Requests and latency by route, solve-time histogram, solver outcomes."""
    return Response(runtime.metrics.render(), media_type=CONTENT_TYPE)
