"""The ``bandwright`` command's side of the HTTP service: jobs, batches, plans and pictures.

A 503 or 429 answer to a POST is waited out (its Retry-After) and the POST sent again; a
transport failure ends the command with exit 5 (unreachable); a 422 with exit 2.
"""

from __future__ import annotations

import os
import sys
import time
from collections.abc import Sequence
from typing import Any

import httpx

from service.cli_report import (
    CliError,
    ExitCode,
    ImageFormat,
    Pictures,
    ProgressLine,
    invalid,
)
from service.errors import FieldIssue
from service.schemas import DemandIn, PlanOut, PlanRequest

__all__ = [
    "SERVER_ENV",
    "follow_batch",
    "open_client",
    "post_batch",
    "post_job",
    "problem_exit",
    "server_url",
    "solve_remote",
]

SERVER_ENV = "BANDWRIGHT_SERVER"
URL_SCHEMES = frozenset({"http", "https"})
POLL_INTERVAL_S = 0.25
HTTP_TIMEOUT_S = 30.0
BUSY_RETRIES = 10
WAIT_AND_RETRY = frozenset({httpx.codes.SERVICE_UNAVAILABLE, httpx.codes.TOO_MANY_REQUESTS})
"""Answers after which a POST is sent again once its Retry-After has passed."""


def problem_exit(response: httpx.Response) -> CliError:
    """The error a non-success answer ends the command with: exit 2 for a 422 naming each
    field, else exit 1 with the problem's detail."""
    try:
        doc = response.json()
    except ValueError:
        doc = {}
    if response.status_code == httpx.codes.UNPROCESSABLE_ENTITY:
        issues = [FieldIssue(e["field"], e["message"]) for e in doc.get("errors", [])]
        return invalid(issues or [FieldIssue("body", str(doc.get("detail", "invalid")))])
    detail = doc.get("detail", response.text[:200])
    return CliError(ExitCode.FAILED, f"server answered {response.status_code}: {detail}")


def open_client(server: str) -> httpx.Client:
    """An HTTP client for the service, sending ``BANDWRIGHT_API_KEY`` as a bearer key if set."""
    key = os.environ.get("BANDWRIGHT_API_KEY", "")
    headers = {"Authorization": f"Bearer {key}"} if key else {}
    return httpx.Client(base_url=server, timeout=HTTP_TIMEOUT_S, headers=headers)


def post_job(client: httpx.Client, payload: dict[str, Any]) -> str:
    """Submit a plan request as a job; the job's Location."""
    return _post_accepted(client, "/v1/jobs", payload)


def post_batch(client: httpx.Client, payload: dict[str, Any]) -> str:
    """Submit a batch of plan requests; the batch's Location."""
    return _post_accepted(client, "/v1/batches", payload)


def _post_accepted(client: httpx.Client, path: str, payload: dict[str, Any]) -> str:
    """POST for a 202, waiting out 503 and 429 answers; the Location of what was accepted."""
    for _ in range(BUSY_RETRIES):
        response = client.post(path, json=payload)
        if response.status_code in WAIT_AND_RETRY:
            time.sleep(float(response.headers.get("Retry-After", "1")))
            continue
        if response.status_code != httpx.codes.ACCEPTED:
            raise problem_exit(response)
        return str(response.headers["Location"])
    raise CliError(ExitCode.FAILED, "the server stayed busy; try again later")


def _wait_for_job(client: httpx.Client, location: str) -> str:
    progress = ProgressLine()
    while True:
        response = client.get(location)
        if response.status_code != httpx.codes.OK:
            raise problem_exit(response)
        job = response.json()
        if job["state"] == "done":
            return str(job["plan_url"])
        if job["state"] == "failed":
            error = job.get("error") or {}
            if error.get("status") == httpx.codes.UNPROCESSABLE_ENTITY:
                issues = [FieldIssue(e["field"], e["message"]) for e in error.get("errors", [])]
                raise invalid(issues)
            raise CliError(ExitCode.FAILED, f"job failed: {error.get('detail', 'unknown')}")
        if job.get("progress"):
            p = job["progress"]
            progress.show(p["objective_value"], p["optimality_gap"], p.get("stage"))
        time.sleep(POLL_INTERVAL_S)


def _request_for_server(request: PlanRequest, previous: PlanOut | None) -> dict[str, Any]:
    if previous is None:
        return request.model_dump(mode="json")
    if previous.id is not None:
        return request.model_copy(update={"previous_plan_id": previous.id}).model_dump(mode="json")
    # An offline plan has no id on the server: send its settings as each demand's `current`.
    carriers = {c.demand_id: c for c in previous.carriers}
    demands = [_with_current(d, carriers) for d in request.demands]
    return request.model_copy(update={"demands": demands}).model_dump(mode="json")


def _with_current(demand: DemandIn, carriers: dict[str, Any]) -> DemandIn:
    carrier = carriers.get(demand.id)
    if demand.current is not None or carrier is None:
        return demand
    current = {k: getattr(carrier, k) for k in ("center_hz", "symbol_rate_baud", "rolloff")}
    current |= {"modulation": carrier.modulation, "code_rate": carrier.code_rate}
    return DemandIn.model_validate({**demand.model_dump(), "current": current})


def solve_remote(
    server: str, request: PlanRequest, previous: PlanOut | None, formats: Sequence[ImageFormat]
) -> tuple[PlanOut, Pictures]:
    """Plan ``request`` as a job on ``server`` (replanning from ``previous``); the stored plan
    and its pictures in ``formats`` (a picture the server could not draw is left out)."""
    payload = _request_for_server(request, previous)
    try:
        with open_client(server) as client:
            plan_url = _wait_for_job(client, post_job(client, payload))
            response = client.get(plan_url)
            if response.status_code != httpx.codes.OK:
                raise problem_exit(response)
            plan = PlanOut.model_validate(response.json())
            pictures = {fmt: client.get(f"{plan_url}/spectrum.{fmt}") for fmt in formats}
    except httpx.TransportError as exc:
        raise CliError(ExitCode.UNREACHABLE, f"server unreachable: {server}: {exc}") from exc
    drawn = {f: p.content for f, p in pictures.items() if p.status_code == httpx.codes.OK}
    return plan, drawn


def server_url(value: str | None) -> str | None:
    """``--server`` (or ``BANDWRIGHT_SERVER``), checked: an http(s) URL with a host."""
    if not value:
        return None
    source = "--server" if value != os.environ.get(SERVER_ENV) else f"--server ({SERVER_ENV})"
    try:
        url = httpx.URL(value)
    except httpx.InvalidURL as exc:
        raise invalid([FieldIssue(source, f"{value!r} is not a URL: {exc}")]) from exc
    if url.scheme not in URL_SCHEMES or not url.host:
        reason = f"{value!r} needs http:// or https:// and a host, e.g. http://127.0.0.1:8000"
        raise invalid([FieldIssue(source, reason)])
    return value


def follow_batch(client: httpx.Client, location: str, total: int) -> dict[str, Any]:
    """Poll a batch until it finishes, with a progress bar on stderr; the batch document."""
    from tqdm import tqdm

    with tqdm(total=total, unit="plan", file=sys.stderr, dynamic_ncols=True) as bar:
        while True:
            response = client.get(location)
            if response.status_code != httpx.codes.OK:
                raise problem_exit(response)
            batch: dict[str, Any] = response.json()
            s = batch["summary"]
            bar.update(s["done"] + s["failed"] + s["cancelled"] - bar.n)
            bar.set_postfix(running=s["running"], queued=s["queued"], worst=s["worst"])
            if s["finished"]:
                return batch
            time.sleep(POLL_INTERVAL_S * 4)
