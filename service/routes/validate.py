"""Dry run: ``POST /v1/plans:validate`` checks a request as ``POST /v1/plans`` would, and
reports its size and the solver's work without solving or storing anything."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends

from service.dryrun import check_request
from service.routes.plans import PROBLEM_RESPONSES
from service.runtime import Runtime, get_runtime
from service.schemas import PlanRequest
from service.schemas_check import CheckOut

__all__ = ["router"]

router = APIRouter(tags=["plans"])


@router.post(
    "/v1/plans:validate",
    response_model=CheckOut,
    operation_id="validate_plan_request",
    summary="Check a planning request and report its size, without solving or storing it",
    responses=PROBLEM_RESPONSES,
)
def validate_plan_request(
    body: PlanRequest, runtime: Annotated[Runtime, Depends(get_runtime)]
) -> CheckOut:
    """200 with the report when ``POST /v1/plans`` would accept the request; otherwise the
    422 problem document it would answer, naming the same fields.  Counts against the request
    rate only (nothing is solved)."""
    return check_request(body, runtime.settings, runtime.store)
