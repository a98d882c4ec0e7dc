"""A dry run: every check ``POST /v1/plans`` makes before it solves, and the request's size.

:func:`check_request` runs the same checks, in the same order, as a plan's solve does before its
search starts — the request model (by the caller), :func:`service.runtime.prepare` (consistency
across fields, ``previous_plan_id``, the work-size limit) and :func:`solver.validate_problem` —
so an invalid request gets the very field errors ``POST /v1/plans`` would give it.  Nothing is
solved and nothing is stored.  The work figures are those of :mod:`service.worksize`.
"""

from __future__ import annotations

from service.convert import to_problem
from service.runtime import prepare
from service.schemas import PlanRequest
from service.schemas_check import CheckOut, DemandWorkOut
from service.settings import Settings
from service.store import Store
from service.worksize import check_work_size, work_size
from solver import ConfigurationBound, Problem, validate_problem

__all__ = ["EXECUTION_NOTE", "NEAR_LIMIT", "check_request"]

EXECUTION_NOTE = (
    "POST /v1/plans solves every request inline, whatever its size, and answers when the solve "
    "ends (within time_limit_s and a little closing time); POST /v1/jobs runs the same request "
    "as a background job. The service does not choose between them from the size: the client "
    "does, and only the work-size limit refuses a request for its size."
)
"""What :attr:`CheckOut.execution_note` says (the routes of :mod:`service.routes.plans`)."""

NEAR_LIMIT = 0.5
"""A request weighing more than this share of the work-size limit is warned about."""


def check_request(request: PlanRequest, settings: Settings, store: Store | None) -> CheckOut:
    """Check ``request`` as a plan's solve would and describe its size.

    Parameters
    ----------
    request : PlanRequest
        A request that passed the wire model.
    settings : Settings
        The work-size limit and the solver workers per solve.
    store : Store or None
        Resolves ``previous_plan_id``; ``None`` (the command line, offline) leaves it unchecked
        and says so in the warnings.

    Raises
    ------
    InvalidInputError
        Naming every inconsistent field, an unknown ``previous_plan_id``, or the fields that
        drive a request over the work-size limit.
    ProblemError
        Naming the first field the solver's own checks refuse.
    """
    warnings: list[str] = []
    if store is not None:
        problem = prepare(request, store, settings).problem
    else:
        problem = to_problem(request, num_workers=settings.workers_per_solve)
        check_work_size(problem, settings.max_work_configurations)
        if request.previous_plan_id is not None:
            warnings.append(
                f"previous_plan_id {request.previous_plan_id!r} was not checked: no plan store "
                "here (the service checks it)"
            )
    validate_problem(problem)
    total, bounds = work_size(problem)
    warnings.extend(_work_warnings(problem, total, bounds, settings.max_work_configurations))
    block = problem.block
    return CheckOut(
        name=request.name,
        objective=request.objective,
        demands=len(request.demands),
        profiles=len(request.profiles),
        exclusions=len(block.exclusions),
        block_width_hz=block.width_hz,
        usable_width_hz=block.usable_width_hz,
        candidate_configurations=total,
        configuration_limit=settings.max_work_configurations,
        per_demand=[
            _demand_work(d.id, d.profile, b) for d, b in zip(request.demands, bounds, strict=True)
        ],
        execution="inline",
        execution_note=EXECUTION_NOTE,
        time_limit_s=request.time_limit_s,
        warnings=warnings,
    )


def _demand_work(demand_id: str, profile: str, bound: ConfigurationBound) -> DemandWorkOut:
    return DemandWorkOut(
        demand_id=demand_id,
        profile=profile,
        modulations=bound.modulations,
        code_rates=bound.code_rates,
        rolloffs=bound.rolloffs,
        backoffs=bound.backoffs,
        width_steps=bound.width_steps,
        configurations=bound.total,
    )


def _work_warnings(
    problem: Problem, total: int, bounds: list[ConfigurationBound], limit: int
) -> list[str]:
    """Demands with no configuration at all, and a request near the work-size limit."""
    out = [
        f"demands[{k}] ({d.id!r}): none of the modulations it allows is in its MODCOD table; "
        "it will be left unserved"
        for k, (d, b) in enumerate(zip(problem.demands, bounds, strict=True))
        if b.total == 0
    ]
    if total > NEAR_LIMIT * limit:
        out.append(
            f"the solver would weigh up to {total:,} carrier configurations, over "
            f"{NEAR_LIMIT:.0%} of the limit ({limit:,})"
        )
    return out
