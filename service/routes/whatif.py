"""What-if: ``POST /v1/plans/{plan_id}/what-if`` plans a stored plan's request with small
changes and answers the changed plan and how it differs, storing it only when asked."""

from __future__ import annotations

import threading
from typing import Annotated

import anyio
import anyio.to_thread
from fastapi import APIRouter, Depends, Request, Response

from service.convert import plan_to_wire
from service.ratelimit import limit_solves
from service.routes.plans import (
    BUSY,
    NOT_FOUND,
    PROBLEM_RESPONSES,
    PlanId,
    in_solver_slot,
    solve_for_client,
    stored_plan,
)
from service.runtime import Runtime, get_runtime, store_plan
from service.schemas_whatif import WhatIfOut, WhatIfRequest
from service.store import StoredPlan, utc_now
from service.whatif import ChangedRequest, apply_changes, difference, prepare_changed

__all__ = ["router"]

router = APIRouter(prefix="/v1/plans", tags=["plans"])


def _what_if(
    runtime: Runtime,
    stored: StoredPlan,
    changed: ChangedRequest,
    body: WhatIfRequest,
    cancel: threading.Event,
) -> WhatIfOut:
    """Check, solve (blocking: run in a solver slot) and compare; store if asked."""
    plan_id = stored.plan.id
    runtime.store.ping()  # a store that is down is a 503 before any solve, not after
    prepared = prepare_changed(changed, runtime.store, runtime.settings)
    plan = solve_for_client(runtime, prepared.problem, cancel)
    if body.store:
        out = store_plan(runtime, prepared, plan)
    else:
        out = plan_to_wire(
            plan, plan_id=None, created_at=utc_now(), parent_id=plan_id, request=prepared.request
        )
    return WhatIfOut(
        stored=body.store, plan=out, difference=difference(stored.plan, out, changed.dropped)
    )


@router.post(
    "/{plan_id}/what-if",
    response_model=WhatIfOut,
    operation_id="what_if_plan",
    summary="Plan a stored plan's request with small changes; compare, store only if asked",
    responses={
        201: {"model": WhatIfOut, "description": "store was true: the changed plan is stored"},
        **NOT_FOUND,
        **PROBLEM_RESPONSES,
        **BUSY,
    },
    dependencies=[Depends(limit_solves)],
)
async def what_if_plan(
    plan_id: PlanId,
    body: WhatIfRequest,
    request: Request,
    response: Response,
    runtime: Annotated[Runtime, Depends(get_runtime)],
) -> WhatIfOut:
    """The changed request replans the stored plan (its carriers are the demands' current
    settings, kept where they still fit, as in any replan) and is solved inline like
    ``POST /v1/plans``, in a solver slot; a client that leaves stops it.  200 and nothing
    stored when ``store`` is false; 201 with Location when true (``parent_id``: this plan).
    404 for an unknown plan; 422 naming the field of the changes (or of the changed request)
    that is invalid."""
    stored = await anyio.to_thread.run_sync(stored_plan, runtime, plan_id)
    changed = apply_changes(stored.request, plan_id, body)
    out = await in_solver_slot(
        runtime, request, lambda cancel: _what_if(runtime, stored, changed, body, cancel)
    )
    if out.stored:
        response.status_code = 201
        response.headers["Location"] = f"/v1/plans/{out.plan.id}"
    return out
