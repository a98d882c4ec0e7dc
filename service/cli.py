"""The ``bandwright`` command.

::

    bandwright serve [--host H] [--port P]
    bandwright plan REQUEST.json [--server URL] [-o PLAN.json] [--svg FILE]
    bandwright replan REQUEST.json --previous PLAN.json [--server URL] [-o PLAN.json] [--svg FILE]
    bandwright demo [--request FILE] [--svg FILE]
    bandwright keys create|list|revoke ...
    bandwright db upgrade|current [--url URL]

Without ``--server`` a plan is computed in this process and **nothing is stored**: the plan goes
to ``-o`` (its ``id`` is null) and the summary to stdout.  With ``--server`` the request is sent
as a job to that service, which stores the plan; progress is polled.  A progress line for long
solves goes to stderr.  Exit codes a nightly script can branch on: 0 every demand served,
3 some unserved, 4 infeasible, 2 invalid input (field and message on stderr), 5 server (or
database) unreachable, 6 the database's schema is behind this version (run ``bandwright db
upgrade``), 1 any other failure.

``db upgrade`` migrates the store (``BANDWRIGHT_DATABASE_URL``, or ``--url``) to this version's
newest schema revision and prints the revisions from → to; run it once per release, before the
replicas start.  ``db current`` prints the database's revision (exit 6 when behind).
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import socket
import sys
import threading
import time
from collections.abc import Sequence
from dataclasses import dataclass
from enum import IntEnum
from pathlib import Path
from typing import Any

import httpx
import pydantic
import sqlalchemy as sa

from service.convert import finite_or_none, plan_to_wire, to_problem
from service.errors import (
    FieldIssue,
    InvalidInputError,
    SchemaNotReadyError,
    StoreUnavailableError,
    field_path,
)
from service.schemas import DemandIn, PlanOut, PlanRequest
from service.settings import Settings
from service.store import Store, utc_now
from solver import ProblemError, ProgressEvent, SolveStatus

__all__ = ["ExitCode", "main", "summary_table"]

logger = logging.getLogger(__name__)

DEMO_REQUEST = Path("examples/demo-request.json")
DEMO_SVG = Path("out/demo-spectrum.svg")
LOOPBACK = "127.0.0.1"
PROGRESS_AFTER_S = 1.0
POLL_INTERVAL_S = 0.25
HTTP_TIMEOUT_S = 30.0
BUSY_RETRIES = 10
WAIT_AND_RETRY = frozenset({httpx.codes.SERVICE_UNAVAILABLE, httpx.codes.TOO_MANY_REQUESTS})
"""Answers after which a POST is sent again once its Retry-After has passed."""
SERVER_START_TIMEOUT_S = 20.0
MHZ = 1e6
KHZ = 1e3
PERCENT = 100.0


FALLBACK_DEMO_REQUEST: dict[str, Any] = {
    "name": "demo: invented hill-site backhaul block",
    "block": {"start_hz": 7.0e9, "stop_hz": 7.014e9, "raster_hz": 10e3},
    "leakage_limit_db": 30.0,
    "demands": [
        {"id": "ridge-a", "min_rate_bps": 4e6, "target_rate_bps": 8e6, "esn0_db": 14.0},
        {"id": "ridge-b", "min_rate_bps": 2e6, "target_rate_bps": 6e6, "cn0_dbhz": 78.0},
        {"id": "valley", "min_rate_bps": 1e6, "target_rate_bps": 3e6, "esn0_db": 9.0},
    ],
    "time_limit_s": 5.0,
}
"""Used by ``bandwright demo`` when examples/demo-request.json is absent (invented scenario)."""


class ExitCode(IntEnum):
    """Process exit codes."""

    SERVED = 0
    FAILED = 1
    INVALID = 2
    UNSERVED = 3
    INFEASIBLE = 4
    UNREACHABLE = 5
    OUTDATED = 6


class CliError(Exception):
    """Ends the command with ``code`` after writing ``message`` to stderr."""

    def __init__(self, code: ExitCode, message: str) -> None:
        super().__init__(message)
        self.code = code


def _err(text: str) -> None:
    sys.stderr.write(text + "\n")
    sys.stderr.flush()


def _invalid(issues: Sequence[FieldIssue]) -> CliError:
    lines = [f"invalid input: {i.field}: {i.message}" for i in issues]
    return CliError(ExitCode.INVALID, "\n".join(lines))


def _read_json(path: Path, what: str) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise CliError(ExitCode.INVALID, f"invalid input: {what}: {path}: {exc}") from exc


def _load_request(path: Path) -> PlanRequest:
    try:
        return PlanRequest.model_validate(_read_json(path, "REQUEST"))
    except pydantic.ValidationError as exc:
        issues = [FieldIssue(field_path(e["loc"]), e["msg"]) for e in exc.errors()]
        raise _invalid(issues) from exc


def _load_plan(path: Path) -> PlanOut:
    try:
        return PlanOut.model_validate(_read_json(path, "--previous"))
    except pydantic.ValidationError as exc:
        raise CliError(ExitCode.INVALID, f"invalid input: --previous: {path}: {exc}") from exc


class ProgressLine:
    """Writes to stderr what the solve is computing, at once whenever that changes and at
    most once a second otherwise; with each verified plan, its objective and gap (the
    figures the plan reports)."""

    def __init__(self) -> None:
        self._started = time.monotonic()
        self._last = -PROGRESS_AFTER_S
        self._stage: str | None = None

    def __call__(self, event: ProgressEvent) -> None:
        self.show(
            finite_or_none(event.objective_value), finite_or_none(event.optimality_gap), event.stage
        )

    def show(self, objective: float | None, gap: float | None, stage: str | None = None) -> None:
        now = time.monotonic() - self._started
        changed = stage != self._stage
        if not changed and now - self._last < PROGRESS_AFTER_S:
            return
        self._last, self._stage = now, stage
        best = "—" if objective is None else f"{objective:.6g}"
        gap_text = "—" if gap is None else f"{gap * PERCENT:.2f} %"
        # Wall time since the command started waiting (one clock for every stage).
        what = f"{stage}: " if stage else ""
        _err(f"solving: elapsed {now:6.1f} s  {what}best objective {best}  gap {gap_text}")


# ----------------------------------------------------------------------------- summary


def summary_table(plan: PlanOut) -> str:
    """A readable table of the plan: one line per carrier, then unserved demands and totals."""
    width = max([len("demand"), *(len(c.demand_id) for c in plan.carriers)]) + 2
    head = (
        f"{'demand':<{width}}{'centre MHz':>14}{'Rs Mbaud':>10}{'α':>6}  {'MODCOD':<16}"
        f"{'Mbit/s':>9}{'margin dB':>10}{'guard kHz':>16}{'OBO dB':>8}{'EVM %':>7}"
    )
    lines = [f"plan {plan.id or '(not stored)'}  {plan.name!r}  status {plan.status.value}", head]
    lines.append("-" * len(head))
    for c in sorted(plan.carriers, key=lambda c: c.center_hz):
        modcod = f"{c.modulation.value} {c.code_rate}"
        guards = f"{c.guard_below_hz / KHZ:.1f}/{c.guard_above_hz / KHZ:.1f}"
        backoff = "—" if c.output_backoff_db is None else f"{c.output_backoff_db:.1f}"
        lines.append(
            f"{c.demand_id:<{width}}{c.center_hz / MHZ:>14.4f}{c.symbol_rate_baud / MHZ:>10.4f}"
            f"{c.rolloff:>6.2f}  {modcod:<16}{c.throughput_bps / MHZ:>9.3f}{c.margin_db:>10.2f}"
            f"{guards:>16}{backoff:>8}{c.evm_pct:>7.2f}"
        )
    lines.extend(f"unserved {u.demand_id}: {u.reason.value} ({u.detail})" for u in plan.unserved)
    s = plan.summary
    gap = "—" if s.optimality_gap is None else f"{s.optimality_gap * PERCENT:.2f} %"
    lines.append(
        f"used {s.used_bandwidth_hz / MHZ:.4f} MHz, free {s.free_bandwidth_hz / MHZ:.4f} MHz "
        f"(largest segment {s.largest_free_segment_hz / MHZ:.4f} MHz); throughput "
        f"{s.total_throughput_bps / MHZ:.3f} Mbit/s, {s.spectral_efficiency_bps_per_hz:.3f} "
        f"bit/s/Hz, {s.efficiency_vs_bound * PERCENT:.1f} % of the bound; gap {gap}; "
        f"solved in {s.solve_time_s:.2f} s"
    )
    lines.extend(f"note: {n}" for n in plan.notices)
    return "\n".join(lines) + "\n"


def exit_code_for(plan: PlanOut) -> ExitCode:
    """0 every demand served, 3 some unserved, 4 infeasible."""
    if plan.status is SolveStatus.INFEASIBLE:
        return ExitCode.INFEASIBLE
    return ExitCode.UNSERVED if plan.unserved else ExitCode.SERVED


# ----------------------------------------------------------------------------- in process


def _solve_here(request: PlanRequest, previous: PlanOut | None) -> tuple[PlanOut, bytes | None]:
    from solver import solve

    if request.previous_plan_id is not None and previous is None:
        raise _invalid([FieldIssue("previous_plan_id", "needs --server, or use --previous")])
    try:
        problem = to_problem(request, previous=previous)
        plan = solve(problem, progress=ProgressLine())
    except InvalidInputError as exc:
        raise _invalid(exc.issues) from exc
    except ProblemError as exc:
        raise _invalid([FieldIssue(exc.field, exc.message)]) from exc
    parent = None if previous is None else previous.id
    out = plan_to_wire(plan, plan_id=None, created_at=utc_now(), parent_id=parent)
    return out, _render_here(plan, problem)


def _render_here(plan: Any, problem: Any) -> bytes:
    from service.render import render_spectrum

    picture: bytes = render_spectrum(plan, problem, "svg")
    return picture


# ----------------------------------------------------------------------------- over HTTP


def _problem_exit(response: httpx.Response) -> CliError:
    try:
        doc = response.json()
    except ValueError:
        doc = {}
    if response.status_code == httpx.codes.UNPROCESSABLE_ENTITY:
        issues = [FieldIssue(e["field"], e["message"]) for e in doc.get("errors", [])]
        return _invalid(issues or [FieldIssue("body", str(doc.get("detail", "invalid")))])
    detail = doc.get("detail", response.text[:200])
    return CliError(ExitCode.FAILED, f"server answered {response.status_code}: {detail}")


def _client(server: str) -> httpx.Client:
    """An HTTP client for the service, sending ``BANDWRIGHT_API_KEY`` as a bearer key if set."""
    key = os.environ.get("BANDWRIGHT_API_KEY", "")
    headers = {"Authorization": f"Bearer {key}"} if key else {}
    return httpx.Client(base_url=server, timeout=HTTP_TIMEOUT_S, headers=headers)


def _post_job(client: httpx.Client, payload: dict[str, Any]) -> str:
    return _post_accepted(client, "/v1/jobs", payload)


def _post_batch(client: httpx.Client, payload: dict[str, Any]) -> str:
    return _post_accepted(client, "/v1/batches", payload)


def _post_accepted(client: httpx.Client, path: str, payload: dict[str, Any]) -> str:
    """POST for a 202, waiting out 503 and 429 answers; the Location of what was accepted."""
    for _ in range(BUSY_RETRIES):
        response = client.post(path, json=payload)
        if response.status_code in WAIT_AND_RETRY:
            time.sleep(float(response.headers.get("Retry-After", "1")))
            continue
        if response.status_code != httpx.codes.ACCEPTED:
            raise _problem_exit(response)
        return str(response.headers["Location"])
    raise CliError(ExitCode.FAILED, "the server stayed busy; try again later")


def _wait_for_job(client: httpx.Client, location: str) -> str:
    progress = ProgressLine()
    while True:
        response = client.get(location)
        if response.status_code != httpx.codes.OK:
            raise _problem_exit(response)
        job = response.json()
        if job["state"] == "done":
            return str(job["plan_url"])
        if job["state"] == "failed":
            error = job.get("error") or {}
            if error.get("status") == httpx.codes.UNPROCESSABLE_ENTITY:
                issues = [FieldIssue(e["field"], e["message"]) for e in error.get("errors", [])]
                raise _invalid(issues)
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


def _solve_remote(
    server: str, request: PlanRequest, previous: PlanOut | None
) -> tuple[PlanOut, bytes | None]:
    payload = _request_for_server(request, previous)
    try:
        with _client(server) as client:
            plan_url = _wait_for_job(client, _post_job(client, payload))
            response = client.get(plan_url)
            if response.status_code != httpx.codes.OK:
                raise _problem_exit(response)
            plan = PlanOut.model_validate(response.json())
            picture = client.get(f"{plan_url}/spectrum.svg")
            svg = picture.content if picture.status_code == httpx.codes.OK else None
    except httpx.TransportError as exc:
        raise CliError(ExitCode.UNREACHABLE, f"server unreachable: {server}: {exc}") from exc
    return plan, svg


# ----------------------------------------------------------------------------- commands


@dataclass(frozen=True)
class _Outputs:
    plan_path: Path | None
    svg_path: Path | None


def _finish(plan: PlanOut, svg: bytes | None, outputs: _Outputs) -> ExitCode:
    if outputs.plan_path is not None:
        outputs.plan_path.parent.mkdir(parents=True, exist_ok=True)
        outputs.plan_path.write_text(plan.model_dump_json(indent=2) + "\n", encoding="utf-8")
    if outputs.svg_path is not None:
        if svg is None:
            raise CliError(ExitCode.FAILED, "no spectrum picture was produced")
        outputs.svg_path.parent.mkdir(parents=True, exist_ok=True)
        outputs.svg_path.write_bytes(svg)
    sys.stdout.write(summary_table(plan))
    return exit_code_for(plan)


OUTCOME_EXIT = {
    "served": ExitCode.SERVED,
    "unserved": ExitCode.UNSERVED,
    "infeasible": ExitCode.INFEASIBLE,
    "cancelled": ExitCode.FAILED,
    "failed": ExitCode.FAILED,
}
"""Exit code of a batch by its worst outcome (that of a single plan for the same outcome)."""


def _load_batch(directory: Path) -> list[tuple[Path, PlanRequest]]:
    if not directory.is_dir():
        raise _invalid([FieldIssue("--batch", f"{directory} is not a directory")])
    files = sorted(directory.glob("*.json"))
    if not files:
        raise _invalid([FieldIssue("--batch", f"no *.json request in {directory}")])
    loaded, issues = [], []
    for path in files:
        try:
            loaded.append((path, _load_request(path)))
        except CliError as exc:
            issues.append(FieldIssue(path.name, str(exc).removeprefix("invalid input: ")))
    if issues:
        raise _invalid(issues)
    return loaded


def _follow_batch(client: httpx.Client, location: str, total: int) -> dict[str, Any]:
    from tqdm import tqdm

    with tqdm(total=total, unit="plan", file=sys.stderr, dynamic_ncols=True) as bar:
        while True:
            response = client.get(location)
            if response.status_code != httpx.codes.OK:
                raise _problem_exit(response)
            batch: dict[str, Any] = response.json()
            s = batch["summary"]
            bar.update(s["done"] + s["failed"] + s["cancelled"] - bar.n)
            bar.set_postfix(running=s["running"], queued=s["queued"], worst=s["worst"])
            if s["finished"]:
                return batch
            time.sleep(POLL_INTERVAL_S * 4)


def _cmd_batch(args: argparse.Namespace) -> ExitCode:
    """``replan --batch DIR --server URL``: every request in DIR as one batch of jobs."""
    if args.server is None:
        raise _invalid([FieldIssue("--server", "a batch runs on the service's workers")])
    loaded = _load_batch(args.batch)
    payload = {
        "name": args.batch.resolve().name or "batch",
        "items": [r.model_dump(mode="json") for _, r in loaded],
    }
    out_dir = args.batch / "plans" if args.output_dir is None else args.output_dir
    try:
        with _client(args.server) as client:
            batch = _follow_batch(client, _post_batch(client, payload), len(loaded))
            out_dir.mkdir(parents=True, exist_ok=True)
            for (path, _), item in zip(loaded, batch["items"], strict=True):
                line = f"{path.name}: {item['outcome']}"
                if item["plan_url"]:
                    plan = client.get(item["plan_url"])
                    if plan.status_code != httpx.codes.OK:
                        raise _problem_exit(plan)
                    (out_dir / f"{path.stem}.plan.json").write_text(plan.text, encoding="utf-8")
                    line += f" ({item['unserved_count']} unserved) → {item['plan_url']}"
                elif item["error"]:
                    line += f": {item['error'].get('detail', '')}"
                print(line)
    except httpx.TransportError as exc:
        raise CliError(ExitCode.UNREACHABLE, f"server unreachable: {args.server}: {exc}") from exc
    worst = batch["summary"]["worst"]
    _err(f"batch {batch['id']}: {len(loaded)} item(s), worst outcome {worst}; plans in {out_dir}")
    return OUTCOME_EXIT[worst]


def _cmd_plan(args: argparse.Namespace) -> ExitCode:
    if getattr(args, "batch", None) is not None:
        if args.request is not None or args.previous is not None:
            raise _invalid([FieldIssue("--batch", "give either --batch DIR or REQUEST.json")])
        return _cmd_batch(args)
    if args.request is None:
        raise _invalid([FieldIssue("REQUEST.json", "required (or --batch DIR for replan)")])
    if args.command == "replan" and args.previous is None:
        raise _invalid([FieldIssue("--previous", "required with REQUEST.json")])
    request = _load_request(args.request)
    previous = _load_plan(args.previous) if getattr(args, "previous", None) else None
    outputs = _Outputs(args.output, args.svg)
    if args.server:
        plan, svg = _solve_remote(args.server, request, previous)
    else:
        plan, svg = _solve_here(request, previous)
    return _finish(plan, svg, outputs)


def _cmd_serve(args: argparse.Namespace) -> ExitCode:
    import uvicorn

    from service.app import create_app
    from service.keys import open_serving_refused

    settings = Settings()
    host = args.host or settings.host
    port = settings.port if args.port is None else args.port
    store = Store(settings.database_url)
    try:
        _check_schema_for_serving(store)
        refused = open_serving_refused(host, store, settings.allow_open)
        keyed = store.has_keys()
    except sa.exc.SQLAlchemyError as exc:  # no key table: the database was never migrated
        raise CliError(
            ExitCode.OUTDATED,
            f"the store has no tables yet: run `bandwright db upgrade` ({exc.__class__.__name__})",
        ) from exc
    finally:
        store.close()
    if refused is not None:
        raise CliError(ExitCode.INVALID, refused)
    if not keyed:
        logger.warning("no API key exists: serving open on %s (loopback only)", host)
    uvicorn.run(
        create_app(settings),
        host=host,
        port=port,
        log_level="info",
        access_log=settings.access_log,
    )
    return ExitCode.SERVED


def _check_schema_for_serving(store: Store) -> None:
    """The embedded SQLite store migrates itself; another database behind this version is
    served anyway (``/readyz`` answers 503 until someone runs ``bandwright db upgrade``)."""
    try:
        store.ensure_schema()
    except SchemaNotReadyError as exc:
        logger.error("%s; serving, and /readyz answers 503 until then", exc)


def _cmd_keys(args: argparse.Namespace) -> ExitCode:
    """``keys create|list|revoke``: manage the service's API keys in its store."""
    from service.keys import Scope, create_key

    settings = Settings()
    store = Store(settings.database_url)
    try:
        store.ensure_schema()
        if args.action == "create":
            key, record = create_key(store, Scope(args.scope), args.name, settings.keys_pepper)
            _err(f"key {record.id} ({record.scope}, {record.name!r}); it is shown only once:")
            print(key)
        elif args.action == "list":
            for item in store.list_keys():
                state = "revoked" if item.revoked_at is not None else "live"
                print(f"{item.id}\t{item.scope}\t{state}\t{item.created_at:%Y-%m-%d}\t{item.name}")
        elif not store.revoke_key(args.id):
            raise CliError(ExitCode.INVALID, f"no live key {args.id!r}")
        else:
            _err(f"key {args.id} revoked")
    finally:
        store.close()
    return ExitCode.SERVED


WORKER_STALE_AFTER_S = 60.0
"""`worker --check` fails when the heartbeat file is older than this (six missed beats)."""


def _cmd_worker(args: argparse.Namespace) -> ExitCode:
    """``worker``: run a Celery worker for background jobs; ``--check``: is one alive here?"""
    settings = Settings()
    if args.check:
        from service.worker import heartbeat_age_s

        age = heartbeat_age_s(settings)
        if age is None or age > WORKER_STALE_AFTER_S:
            seen = "no heartbeat file" if age is None else f"last heartbeat {age:.0f} s ago"
            raise CliError(ExitCode.FAILED, f"worker not alive: {seen}")
        _err(f"worker alive: last heartbeat {age:.0f} s ago")
        return ExitCode.SERVED
    if not settings.broker_url:
        raise CliError(ExitCode.INVALID, "BANDWRIGHT_BROKER_URL is not set: no queue to work for")
    from service.store import Store
    from service.worker import run_worker

    store = Store(settings.database_url)
    try:
        store.ensure_schema()
    finally:
        store.close()
    logging.getLogger().setLevel(logging.INFO)
    run_worker(settings, args.concurrency)
    return ExitCode.SERVED


def _open_store(args: argparse.Namespace) -> Store:
    """The store named by ``--url``, or by BANDWRIGHT_DATABASE_URL; a URL SQLAlchemy cannot use
    is invalid input naming where it came from."""
    url, source = (
        (args.url, "--url") if args.url else (Settings().database_url, "BANDWRIGHT_DATABASE_URL")
    )
    try:
        return Store(url)
    except (sa.exc.ArgumentError, ImportError) as exc:  # unparsable, or no such dialect/driver
        raise CliError(ExitCode.INVALID, f"invalid input: {source}: {exc}") from exc


def _cmd_db(args: argparse.Namespace) -> ExitCode:
    """``db upgrade|current``: the store's schema against this version's migrations."""
    store = _open_store(args)
    try:
        _err(f"database: {sa.make_url(store.url).render_as_string(hide_password=True)}")
        return _db_upgrade(store) if args.action == "upgrade" else _db_current(store)
    finally:
        store.close()


def _db_upgrade(store: Store) -> ExitCode:
    done = store.upgrade_schema()
    before = done.before or "none"
    if done.stamped is not None:
        before = f"{done.stamped} (tables made before migrations, stamped)"
    unchanged = " (already at head)" if done.before == done.after else ""
    print(f"{before} → {done.after}{unchanged}")
    return ExitCode.SERVED


def _db_current(store: Store) -> ExitCode:
    state = store.schema_state()
    if state.behind:
        print(f"{state.current or 'none'} (behind head {state.head}: run `bandwright db upgrade`)")
        return ExitCode.OUTDATED
    if not state.known:
        print(f"{state.current} (newer than this version's head {state.head})")
    else:
        print(f"{state.current} (head)")
    return ExitCode.SERVED


def _free_socket() -> socket.socket:
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind((LOOPBACK, 0))
    return sock


def _cmd_demo(args: argparse.Namespace) -> ExitCode:
    import uvicorn

    from service.app import create_app

    if args.request.exists():
        request = _load_request(args.request)
    else:
        _err(f"{args.request} not found; planning the built-in invented demo request")
        request = PlanRequest.model_validate(FALLBACK_DEMO_REQUEST)
    sock = _free_socket()
    port = sock.getsockname()[1]
    config = uvicorn.Config(create_app(Settings()), log_level="warning", lifespan="on")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    try:
        deadline = time.monotonic() + SERVER_START_TIMEOUT_S
        while not server.started and thread.is_alive() and time.monotonic() < deadline:
            time.sleep(POLL_INTERVAL_S / 5)
        if not server.started:
            raise CliError(ExitCode.FAILED, "the demo service did not start")
        _err(f"demo service on http://{LOOPBACK}:{port} (store: {Settings().database_url})")
        plan, svg = _solve_remote(f"http://{LOOPBACK}:{port}", request, None)
        code = _finish(plan, svg, _Outputs(None, args.svg))
        _err(f"spectrum picture written to {args.svg}")
        return code
    finally:
        server.should_exit = True
        thread.join(timeout=SERVER_START_TIMEOUT_S)
        sock.close()


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="bandwright", description="Plan carriers in a licensed spectrum block."
    )
    sub = parser.add_subparsers(dest="command", required=True)
    serve = sub.add_parser("serve", help="run the HTTP service")
    serve.add_argument("--host", help="address to bind (default BANDWRIGHT_HOST or 127.0.0.1)")
    serve.add_argument("--port", type=int, help="port (default BANDWRIGHT_PORT or 8000)")
    serve.set_defaults(run=_cmd_serve)
    for name, text in (("plan", "plan a request"), ("replan", "replan from a previous plan")):
        cmd = sub.add_parser(name, help=text)
        cmd.add_argument("request", type=Path, metavar="REQUEST.json", nargs="?")
        if name == "replan":
            cmd.add_argument("--previous", type=Path, metavar="PLAN.json")
            cmd.add_argument(
                "--batch",
                type=Path,
                metavar="DIR",
                help="every *.json request in DIR as one batch on --server (a replan names its "
                "previous_plan_id); exit code of the worst outcome",
            )
            cmd.add_argument(
                "--output-dir", type=Path, metavar="DIR", help="batch plans (default DIR/plans)"
            )
        cmd.add_argument("--server", help="service URL; without it the plan is computed here")
        cmd.add_argument("-o", "--output", type=Path, metavar="PLAN.json", help="write the plan")
        cmd.add_argument("--svg", type=Path, metavar="FILE", help="write the spectrum picture")
        cmd.set_defaults(run=_cmd_plan)
    keys = sub.add_parser("keys", help="create, list and revoke API keys")
    actions = keys.add_subparsers(dest="action", required=True)
    create = actions.add_parser("create", help="print a new key (shown only once)")
    create.add_argument("--scope", choices=["read", "plan", "admin"], required=True)
    create.add_argument("--name", default="", help="who or what the key is for")
    actions.add_parser("list", help="every key: id, scope, state, created, name")
    revoke = actions.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("id")
    keys.set_defaults(run=_cmd_keys)
    worker = sub.add_parser("worker", help="run a worker for background jobs (needs a broker)")
    worker.add_argument(
        "--concurrency", type=int, default=1, help="jobs solved at once (processes; default 1)"
    )
    worker.add_argument(
        "--check", action="store_true", help="exit 0 when a worker here beat in the last minute"
    )
    worker.set_defaults(run=_cmd_worker)
    db = sub.add_parser("db", help="the store's schema: migrate it, or show its revision")
    db_actions = db.add_subparsers(dest="action", required=True)
    for action, text in (
        ("upgrade", "migrate the database to this version's newest revision (once per release)"),
        ("current", "print the database's revision; exit 6 when it is behind this version"),
    ):
        command = db_actions.add_parser(action, help=text)
        command.add_argument("--url", help="SQLAlchemy URL (default BANDWRIGHT_DATABASE_URL)")
    db.set_defaults(run=_cmd_db)
    demo = sub.add_parser("demo", help="start a local service and plan the demo request")
    demo.add_argument("--request", type=Path, default=DEMO_REQUEST, help="request to plan")
    demo.add_argument("--svg", type=Path, default=DEMO_SVG, help="where to write the picture")
    demo.set_defaults(run=_cmd_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``bandwright`` console script; returns the exit code."""
    logging.basicConfig(level=logging.WARNING, format="%(levelname)s %(name)s: %(message)s")
    args = _parser().parse_args(argv)
    try:
        return int(args.run(args))
    except CliError as exc:
        _err(str(exc))
        return int(exc.code)
    except SchemaNotReadyError as exc:
        _err(str(exc))
        return int(ExitCode.OUTDATED)
    except StoreUnavailableError as exc:
        _err(str(exc))
        return int(ExitCode.UNREACHABLE)
    except KeyboardInterrupt:
        _err("interrupted")
        return int(ExitCode.FAILED)


if __name__ == "__main__":
    raise SystemExit(main())
