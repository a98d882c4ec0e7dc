"""The work-size limit: how many carrier configurations one plan may ask the solver to weigh.

A demand count alone says little: a demand allowing every modulation on a transmitter with
sixteen roll-offs weighs 10 × 12 × 16 = 1,920 configurations, and under ``max_margin`` every
one of them again at each width of a 1 % grid between its minimum and target rates.  The work
size is the sum over the demands of :func:`solver.configuration_bound` (modulations × code rates
of the catalogue × roll-offs × width steps), an upper bound computed from the request alone in
microseconds per demand.  Over ``BANDWRIGHT_MAX_WORK_CONFIGURATIONS`` the request is refused with
a 422 whose ``errors`` name the fields that drive the figure and give the figures.

Measured on the 2-core development machine: building the candidates took about 4 µs per
configuration for families and 0.2–0.7 µs per grid point under ``max_margin``, where one demand
of 2 million grid points took 1.4 s and held 320 MB at its peak.  The default limit of 2,000,000
admits 2,000 demands on the default six roll-offs (1,440,000) and refuses requests whose
candidates alone would hold gigabytes.
"""

from __future__ import annotations

from service.errors import FieldIssue, InvalidInputError
from solver import ConfigurationBound, Objective, Problem, configuration_bound

__all__ = ["check_work_size", "work_size"]


def work_size(problem: Problem) -> tuple[int, list[ConfigurationBound]]:
    """The work size of ``problem`` and each demand's bound, in the order of its demands."""
    bounds = [configuration_bound(problem, demand) for demand in problem.demands]
    return sum(b.total for b in bounds), bounds


def check_work_size(problem: Problem, limit: int) -> None:
    """Raise :class:`~service.errors.InvalidInputError` when the work size exceeds ``limit``;
    its issues name ``demands``, ``transmitter.rolloffs``, the largest demand's
    ``modulations`` and, under ``max_margin``, its rate range, each with its figure."""
    total, bounds = work_size(problem)
    if total <= limit:
        return
    k = max(range(len(bounds)), key=lambda i: bounds[i].total)
    largest = bounds[k]
    issues = [
        FieldIssue(
            "demands",
            f"{len(bounds)} demands weigh up to {total:,} carrier configurations together; "
            f"the limit is {limit:,}",
        ),
        FieldIssue(
            "transmitter.rolloffs",
            f"{largest.rolloffs} roll-offs multiply every demand's configurations",
        ),
        FieldIssue(
            f"demands[{k}].modulations",
            f"{largest.modulations} modulations of its MODCOD table, up to "
            f"{largest.code_rates} code rates each, {largest.backoffs} back-off(s): "
            f"demands[{k}] alone weighs up to {largest.total:,} configurations",
        ),
    ]
    if problem.objective is Objective.MAX_MARGIN:
        issues.append(
            FieldIssue(
                f"demands[{k}].target_rate_bps",
                f"objective max_margin weighs every width on a 1 % grid from min_rate_bps to "
                f"target_rate_bps: up to {largest.width_steps:,} widths for demands[{k}]",
            )
        )
    raise InvalidInputError(issues)
