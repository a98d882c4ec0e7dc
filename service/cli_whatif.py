"""``bandwright what-if PLAN_ID CHANGES.json --server URL``: changes tried on a stored plan.

CHANGES.json is the body of ``POST /v1/plans/{plan_id}/what-if`` (``{"changes": {...}}``, with
``store`` and ``time_limit_s`` optional); ``--store`` and ``--time-limit`` override it.  The
difference goes to stdout, the changed plan to ``-o``.  Exit codes as for ``plan``: 0 every
demand of the changed plan served, 3 some unserved, 4 infeasible, 2 invalid changes or an
unknown plan, 5 server unreachable, 1 any other failure.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path
from typing import Any

import httpx

from service.cli_remote import SERVER_ENV, WAIT_AND_RETRY, open_client, problem_exit, server_url
from service.cli_report import CliError, ExitCode, exit_code_for, invalid
from service.errors import FieldIssue
from service.schemas import MAX_TIME_LIMIT_S
from service.schemas_whatif import CarrierBriefOut, DifferenceOut, WhatIfOut

__all__ = ["add_what_if_command", "difference_text"]

MHZ = 1e6
KHZ = 1e3
WAIT_S = MAX_TIME_LIMIT_S + 60.0
"""How long to wait for the answer: the longest solve and its closing, with room to spare."""
BUSY_RETRIES = 10


def _body(args: argparse.Namespace) -> dict[str, Any]:
    try:
        body = json.loads(Path(args.changes).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CliError(ExitCode.INVALID, f"invalid input: CHANGES: {args.changes}: {exc}") from exc
    if not isinstance(body, dict):
        raise invalid([FieldIssue("CHANGES", 'must be a JSON object {"changes": {...}}')])
    if args.store:
        body["store"] = True
    if args.time_limit is not None:
        body["time_limit_s"] = args.time_limit
    return body


def _post(server: str, plan_id: str, body: dict[str, Any]) -> WhatIfOut:
    """POST the what-if, waiting out 503 and 429 answers; the answer, or the exit it calls for."""
    path = f"/v1/plans/{plan_id}/what-if"
    try:
        with open_client(server) as client:
            for _ in range(BUSY_RETRIES):
                response = client.post(path, json=body, timeout=WAIT_S)
                if response.status_code not in WAIT_AND_RETRY:
                    break
                time.sleep(float(response.headers.get("Retry-After", "1")))
    except httpx.TransportError as exc:
        raise CliError(ExitCode.UNREACHABLE, f"server unreachable: {server}: {exc}") from exc
    if response.status_code == httpx.codes.NOT_FOUND:
        raise invalid([FieldIssue("PLAN_ID", f"no plan {plan_id!r} on {server}")])
    if response.status_code not in (httpx.codes.OK, httpx.codes.CREATED):
        raise problem_exit(response)
    return WhatIfOut.model_validate(response.json())


def _brief(c: CarrierBriefOut | None) -> tuple[str, str, str, str]:
    if c is None:
        return ("—", "—", "—", "—")
    return (
        f"{c.center_hz / MHZ:.4f}",
        f"{c.allocated_bandwidth_hz / KHZ:.1f}",
        f"{c.modulation.value} {c.code_rate}",
        f"{c.throughput_bps / MHZ:.3f}",
    )


def difference_text(answer: WhatIfOut) -> str:
    """The difference as lines for a person: one per demand, then the totals."""
    plan = answer.plan
    stored = f"stored as {plan.id}" if answer.stored else "not stored"
    d: DifferenceOut = answer.difference
    width = max([len("demand"), *(len(r.demand_id) for r in d.demands)]) + 2
    lines = [
        f"what-if on plan {plan.parent_id}: status {plan.status.value}, {stored}",
        f"  {'demand':<{width}}{'change':<24}{'centre MHz':<25}{'width kHz':<22}"
        f"{'MODCOD':<34}Mbit/s",
    ]
    for r in d.demands:
        old, new = _brief(r.before), _brief(r.after)
        pairs = [f"{a} → {b}" for a, b in zip(old, new, strict=True)]
        lines.append(
            f"  {r.demand_id:<{width}}{r.change.value:<24}{pairs[0]:<24} {pairs[1]:<21} "
            f"{pairs[2]:<33} {pairs[3]}" + (f"  ({r.note})" if r.note else "")
        )
    lines.append(
        f"throughput {d.total_throughput_before_bps / MHZ:.3f} → "
        f"{d.total_throughput_after_bps / MHZ:.3f} Mbit/s ({d.throughput_change_bps / MHZ:+.3f}); "
        f"served {d.served_before} → {d.served_after}"
    )
    lines.extend(f"note: {n}" for n in plan.notices)
    return "\n".join(lines) + "\n"


def _cmd_what_if(args: argparse.Namespace) -> ExitCode:
    server = server_url(args.server)
    if server is None:
        raise invalid([FieldIssue("--server", "a what-if needs the service that holds the plan")])
    answer = _post(server, args.plan_id, _body(args))
    if args.output is not None:
        try:
            args.output.parent.mkdir(parents=True, exist_ok=True)
            args.output.write_text(answer.plan.model_dump_json(indent=2) + "\n", encoding="utf-8")
        except OSError as exc:
            raise CliError(ExitCode.FAILED, f"cannot write: {exc}") from exc
    if args.json:
        sys.stdout.write(answer.model_dump_json(indent=2) + "\n")
    else:
        sys.stdout.write(difference_text(answer))
    return exit_code_for(answer.plan)


def add_what_if_command(sub: Any) -> None:
    """Register ``what-if`` on the ``bandwright`` parser's sub-commands."""
    cmd = sub.add_parser(
        "what-if", help="try changes on a stored plan's request; show the difference"
    )
    cmd.add_argument("plan_id", metavar="PLAN_ID", help="the stored plan's id")
    cmd.add_argument("changes", metavar="CHANGES.json", help='the what-if body: {"changes": {...}}')
    cmd.add_argument(
        "--server",
        default=os.environ.get(SERVER_ENV) or None,
        metavar="URL",
        help=f"service URL (default {SERVER_ENV})",
    )
    cmd.add_argument("--store", action="store_true", help="store the changed plan")
    cmd.add_argument("--time-limit", type=float, metavar="S", help="solver time limit (s)")
    cmd.add_argument("-o", "--output", type=Path, metavar="PLAN.json", help="write the plan")
    cmd.add_argument("--json", action="store_true", help="write the whole answer as JSON")
    cmd.set_defaults(run=_cmd_what_if)
