"""``bandwright check REQUEST.json|-``: the dry run of :mod:`service.dryrun` on the command line.

The request is checked here, in this process, as ``POST /v1/plans`` checks it (the work-size
limit is ``BANDWRIGHT_MAX_WORK_CONFIGURATIONS``); nothing is solved or stored, and a
``previous_plan_id`` is left unchecked (there is no plan store here; a warning says so).
Exit 0 when valid, 2 when not (one ``invalid input: FIELD: MESSAGE`` line per field on stderr).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

import pydantic

from service.cli_report import CliError, ExitCode, invalid
from service.dryrun import check_request
from service.errors import FieldIssue, InvalidInputError, field_path
from service.schemas import PlanRequest
from service.schemas_check import CheckOut
from service.settings import Settings
from solver import ProblemError

__all__ = ["add_check_command", "check_text", "read_request"]

STDIN = "-"
MHZ = 1e6


def read_request(source: str) -> PlanRequest:
    """The request in file ``source`` (``-``: standard input); exit 2 naming each bad field."""
    where = "<stdin>" if source == STDIN else source
    try:
        text = sys.stdin.read() if source == STDIN else Path(source).read_text(encoding="utf-8")
        data: Any = json.loads(text)
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CliError(ExitCode.INVALID, f"invalid input: REQUEST: {where}: {exc}") from exc
    try:
        return PlanRequest.model_validate(data)
    except pydantic.ValidationError as exc:
        issues = [
            FieldIssue(field_path(e["loc"]), e["msg"].removeprefix("Value error, "))
            for e in exc.errors()
        ]
        raise invalid(issues) from exc


def check_text(report: CheckOut) -> str:
    """The report as lines for a person: sizes, the work per demand, how it would run, warnings."""
    lines = [
        f"valid: {report.name!r}: {report.demands} demand(s), {report.profiles} profile(s), "
        f"{report.exclusions} exclusion(s)",
        f"block {report.block_width_hz / MHZ:.4f} MHz, usable {report.usable_width_hz / MHZ:.4f} "
        f"MHz; objective {report.objective.value}",
        f"the solver would weigh up to {report.candidate_configurations:,} carrier "
        f"configurations (limit {report.configuration_limit:,}):",
    ]
    width = max([len("demand"), *(len(d.demand_id) for d in report.per_demand)]) + 2
    lines.append(
        f"  {'demand':<{width}}{'profile':<16}modulations × code rates × roll-offs × "
        "back-offs × widths = configurations"
    )
    for d in report.per_demand:
        factors = (
            f"{d.modulations} × {d.code_rates} × {d.rolloffs} × {d.backoffs} × {d.width_steps}"
        )
        lines.append(
            f"  {d.demand_id:<{width}}{d.profile or '-':<16}{factors} = {d.configurations:,}"
        )
    lines.append(
        f"runs {report.execution} on POST /v1/plans (time limit {report.time_limit_s:g} s)"
    )
    lines.extend(f"warning: {w}" for w in report.warnings)
    return "\n".join(lines) + "\n"


def _cmd_check(args: argparse.Namespace) -> ExitCode:
    request = read_request(args.request)
    try:
        report = check_request(request, Settings(), None)
    except InvalidInputError as exc:
        raise invalid(exc.issues) from exc
    except ProblemError as exc:
        raise invalid([FieldIssue(exc.field, exc.message)]) from exc
    if args.json:
        sys.stdout.write(report.model_dump_json(indent=2) + "\n")
    else:
        sys.stdout.write(check_text(report))
    return ExitCode.SERVED


def add_check_command(sub: Any) -> None:
    """Register ``check`` on the ``bandwright`` parser's sub-commands."""
    cmd = sub.add_parser(
        "check", help="check a request and report its size, without solving (exit 0 or 2)"
    )
    cmd.add_argument("request", metavar="REQUEST.json", help="the plan request (JSON); - : stdin")
    cmd.add_argument("--json", action="store_true", help="write the report as JSON")
    cmd.set_defaults(run=_cmd_check)
