"""The ``bandwright`` command.

::

    bandwright serve [--host H] [--port P]
    bandwright plan REQUEST.json [--server URL] [-o PLAN.json] [--svg F] [--png F] [--csv F]
    bandwright replan REQUEST.json --previous PLAN.json [--server URL] [-o ...] [--csv F] ...
    bandwright demo [--request FILE] [-o PLAN.json] [--svg FILE] [--png FILE] [--csv FILE]
    bandwright --version
    bandwright keys create|list|revoke ...
    bandwright db upgrade|current [--url URL]
    bandwright check REQUEST.json|- [--json]
    bandwright what-if PLAN_ID CHANGES.json --server URL [--store] [-o PLAN.json] [--json]

Without ``--server`` a plan is computed in this process and **nothing is stored**: the plan goes
to ``-o`` (its ``id`` is null) and the summary to stdout.  With ``--server`` the request is sent
as a job to that service, which stores the plan; progress is polled.  ``BANDWRIGHT_SERVER`` is
the default of ``--server``; a URL without ``http://`` or ``https://`` is invalid input.
``replan`` marks retuned carriers with ``*`` in its table and ends with one line for a
notification, ``retuned K of N carriers: a, b``.  A progress line for long
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
import importlib.metadata
import json
import logging
import os
import socket
import sys
import threading
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import httpx
import pydantic
import sqlalchemy as sa

from service.cli_check import add_check_command
from service.cli_remote import (
    SERVER_ENV,
    follow_batch,
    open_client,
    post_batch,
    problem_exit,
    server_url,
    solve_remote,
)
from service.cli_report import (
    EXIT_MEANINGS,
    CliError,
    ExitCode,
    ImageFormat,
    Outputs,
    Pictures,
    ProgressLine,
    err,
    exit_code_for,
    invalid,
    retune_line,
    summary_table,
    write_outputs,
)
from service.cli_whatif import add_what_if_command
from service.convert import plan_from_wire, plan_to_wire, to_problem
from service.errors import (
    FieldIssue,
    InvalidInputError,
    SchemaNotReadyError,
    StoreUnavailableError,
    field_path,
)
from service.legacy import LegacyPlanError, upgrade_plan_document
from service.schemas import PlanOut, PlanRequest
from service.settings import Settings
from service.store import Store, utc_now
from solver import ProblemError

__all__ = ["ExitCode", "main", "summary_table"]

logger = logging.getLogger(__name__)

DEMO_REQUEST = Path("examples/demo-request.json")
DEMO_OUTPUTS = Outputs(
    plan_path=Path("out/demo-plan.json"),
    svg_path=Path("out/demo-spectrum.svg"),
    png_path=Path("out/demo-spectrum.png"),
    csv_path=Path("out/demo-carriers.csv"),
)
LOOPBACK = "127.0.0.1"
SERVER_START_TIMEOUT_S = 20.0
STARTED_POLL_S = 0.05


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
        raise invalid(issues) from exc


def _load_plan(path: Path) -> PlanOut:
    try:
        return PlanOut.model_validate(upgrade_plan_document(_read_json(path, "--previous")))
    except (pydantic.ValidationError, LegacyPlanError) as exc:
        raise CliError(ExitCode.INVALID, f"invalid input: --previous: {path}: {exc}") from exc


# ----------------------------------------------------------------------------- in process


def _solve_here(
    request: PlanRequest, previous: PlanOut | None, formats: Sequence[ImageFormat]
) -> tuple[PlanOut, Pictures]:
    from solver import explain_shortfalls, solve

    if request.previous_plan_id is not None and previous is None:
        raise invalid([FieldIssue("previous_plan_id", "needs --server, or use --previous")])
    try:
        problem = to_problem(request, previous=previous)
        plan = solve(problem, progress=ProgressLine())
    except InvalidInputError as exc:
        raise invalid(exc.issues) from exc
    except ProblemError as exc:
        raise invalid([FieldIssue(exc.field, exc.message)]) from exc
    parent = None if previous is None else previous.id
    out = plan_to_wire(
        plan,
        plan_id=None,
        created_at=utc_now(),
        parent_id=parent,
        request=request,
        shortfalls=explain_shortfalls(problem, plan.carriers),
    )
    return out, _render_here(plan, problem, formats, previous)


def _render_here(
    plan: Any, problem: Any, formats: Sequence[ImageFormat], previous: PlanOut | None = None
) -> Pictures:
    """The pictures asked for (none: no drawing at all); a replan's mark what changed since
    ``previous``."""
    from service.render import render_spectrum

    parent = None if previous is None or not formats else plan_from_wire(previous)
    return {fmt: render_spectrum(plan, problem, fmt, parent=parent) for fmt in formats}


# ----------------------------------------------------------------------------- commands


def _finish(plan: PlanOut, pictures: Pictures, outputs: Outputs, *, replan: bool) -> ExitCode:
    """Write the files asked for, then the table to stdout (and, for a replan, its retune
    line after it); the exit code the plan calls for."""
    try:
        write_outputs(plan, pictures, outputs)
    except ValueError as exc:
        raise CliError(ExitCode.FAILED, str(exc)) from exc
    except OSError as exc:
        raise CliError(ExitCode.FAILED, f"cannot write: {exc}") from exc
    sys.stdout.write(summary_table(plan))
    if replan:
        sys.stdout.write(retune_line(plan))
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
        raise invalid([FieldIssue("--batch", f"{directory} is not a directory")])
    files = sorted(directory.glob("*.json"))
    if not files:
        raise invalid([FieldIssue("--batch", f"no *.json request in {directory}")])
    loaded, issues = [], []
    for path in files:
        try:
            loaded.append((path, _load_request(path)))
        except CliError as exc:
            issues.append(FieldIssue(path.name, str(exc).removeprefix("invalid input: ")))
    if issues:
        raise invalid(issues)
    return loaded


def _cmd_batch(args: argparse.Namespace) -> ExitCode:
    """``replan --batch DIR --server URL``: every request in DIR as one batch of jobs."""
    server = server_url(args.server)
    if server is None:
        raise invalid([FieldIssue("--server", "a batch runs on the service's workers")])
    loaded = _load_batch(args.batch)
    payload = {
        "name": args.batch.resolve().name or "batch",
        "items": [r.model_dump(mode="json") for _, r in loaded],
    }
    out_dir = args.batch / "plans" if args.output_dir is None else args.output_dir
    try:
        with open_client(server) as client:
            batch = follow_batch(client, post_batch(client, payload), len(loaded))
            out_dir.mkdir(parents=True, exist_ok=True)
            for (path, _), item in zip(loaded, batch["items"], strict=True):
                line = f"{path.name}: {item['outcome']}"
                if item["plan_url"]:
                    plan = client.get(item["plan_url"])
                    if plan.status_code != httpx.codes.OK:
                        raise problem_exit(plan)
                    (out_dir / f"{path.stem}.plan.json").write_text(plan.text, encoding="utf-8")
                    line += f" ({item['unserved_count']} unserved) → {item['plan_url']}"
                elif item["error"]:
                    line += f": {item['error'].get('detail', '')}"
                print(line)
    except httpx.TransportError as exc:
        raise CliError(ExitCode.UNREACHABLE, f"server unreachable: {args.server}: {exc}") from exc
    worst = batch["summary"]["worst"]
    err(f"batch {batch['id']}: {len(loaded)} item(s), worst outcome {worst}; plans in {out_dir}")
    return OUTCOME_EXIT[worst]


def _cmd_plan(args: argparse.Namespace) -> ExitCode:
    if getattr(args, "batch", None) is not None:
        if args.request is not None or args.previous is not None:
            raise invalid([FieldIssue("--batch", "give either --batch DIR or REQUEST.json")])
        return _cmd_batch(args)
    if args.request is None:
        raise invalid([FieldIssue("REQUEST.json", "required (or --batch DIR for replan)")])
    if args.command == "replan" and args.previous is None:
        raise invalid([FieldIssue("--previous", "required with REQUEST.json")])
    server = server_url(args.server)
    request = _load_request(args.request)
    previous = _load_plan(args.previous) if getattr(args, "previous", None) else None
    outputs = Outputs(args.output, args.svg, args.png, args.csv)
    if server:
        plan, pictures = solve_remote(server, request, previous, outputs.formats())
    else:
        plan, pictures = _solve_here(request, previous, outputs.formats())
    return _finish(plan, pictures, outputs, replan=args.command == "replan")


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
            err(f"key {record.id} ({record.scope}, {record.name!r}); it is shown only once:")
            print(key)
        elif args.action == "list":
            for item in store.list_keys():
                state = "revoked" if item.revoked_at is not None else "live"
                print(f"{item.id}\t{item.scope}\t{state}\t{item.created_at:%Y-%m-%d}\t{item.name}")
        elif not store.revoke_key(args.id):
            raise CliError(ExitCode.INVALID, f"no live key {args.id!r}")
        else:
            err(f"key {args.id} revoked")
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
        err(f"worker alive: last heartbeat {age:.0f} s ago")
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
        err(f"database: {sa.make_url(store.url).render_as_string(hide_password=True)}")
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
        err(f"{args.request} not found; planning the built-in invented demo request")
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
            time.sleep(STARTED_POLL_S)
        if not server.started:
            raise CliError(ExitCode.FAILED, "the demo service did not start")
        err(f"demo service on http://{LOOPBACK}:{port} (store: {Settings().database_url})")
        outputs = Outputs(args.output, args.svg, args.png, args.csv)
        url = f"http://{LOOPBACK}:{port}"
        plan, pictures = solve_remote(url, request, None, outputs.formats())
        code = _finish(plan, pictures, outputs, replan=False)
        sys.stdout.writelines(f"wrote {path}\n" for path in outputs.paths())
        return code
    finally:
        server.should_exit = True
        thread.join(timeout=SERVER_START_TIMEOUT_S)
        sock.close()


def _version() -> str:
    try:
        return importlib.metadata.version("bandwright")
    except importlib.metadata.PackageNotFoundError:  # run from a checkout, not installed
        return "unknown (not installed)"


def _exit_codes_epilog() -> str:
    lines = [f"  {int(code)}  {EXIT_MEANINGS[code]}" for code in sorted(EXIT_MEANINGS)]
    return "exit codes:\n" + "\n".join(lines)


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="bandwright",
        description="Plan carriers in a licensed spectrum block.",
        epilog=_exit_codes_epilog(),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "--version", action="version", version=f"%(prog)s {_version()}", help="print the version"
    )
    sub = parser.add_subparsers(dest="command", required=True, help="what to do")
    serve = sub.add_parser("serve", help="run the HTTP service")
    serve.add_argument("--host", help="address to bind (default BANDWRIGHT_HOST or 127.0.0.1)")
    serve.add_argument("--port", type=int, help="port (default BANDWRIGHT_PORT or 8000)")
    serve.set_defaults(run=_cmd_serve)
    for name, text in (("plan", "plan a request"), ("replan", "replan from a previous plan")):
        _add_plan_command(sub, name, text)
    _add_keys_command(sub)
    _add_worker_command(sub)
    _add_db_command(sub)
    _add_demo_command(sub)
    add_check_command(sub)
    add_what_if_command(sub)
    return parser


Commands = Any
"""argparse's sub-parser action (its class is private to argparse)."""


def _add_outputs(cmd: argparse.ArgumentParser, defaults: Outputs) -> None:
    """``-o``, ``--svg``, ``--png``, ``--csv``: the files a plan is written to."""
    cmd.add_argument(
        "-o",
        "--output",
        type=Path,
        metavar="PLAN.json",
        default=defaults.plan_path,
        help="write the plan (JSON, with its notices)",
    )
    cmd.add_argument(
        "--svg",
        type=Path,
        metavar="FILE",
        default=defaults.svg_path,
        help="write the spectrum picture (SVG)",
    )
    cmd.add_argument(
        "--png",
        type=Path,
        metavar="FILE",
        default=defaults.png_path,
        help="write the spectrum picture (PNG)",
    )
    cmd.add_argument(
        "--csv",
        type=Path,
        metavar="FILE",
        default=defaults.csv_path,
        help="write the carriers as CSV (RFC 4180, units in the column names); the plan's "
        "notices apply to it",
    )


def _add_plan_command(sub: Commands, name: str, text: str) -> None:
    cmd = sub.add_parser(name, help=text)
    cmd.add_argument(
        "request", type=Path, metavar="REQUEST.json", nargs="?", help="the plan request (JSON)"
    )
    if name == "replan":
        cmd.add_argument(
            "--previous", type=Path, metavar="PLAN.json", help="the plan in force (JSON, from -o)"
        )
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
    cmd.add_argument(
        "--server",
        default=os.environ.get(SERVER_ENV) or None,
        metavar="URL",
        help=f"service URL, e.g. http://127.0.0.1:8000 (default {SERVER_ENV}); without it the "
        "plan is computed here and not stored",
    )
    _add_outputs(cmd, Outputs())
    cmd.set_defaults(run=_cmd_plan)


def _add_keys_command(sub: Commands) -> None:
    keys = sub.add_parser("keys", help="create, list and revoke API keys")
    actions = keys.add_subparsers(dest="action", required=True, help="what to do with keys")
    create = actions.add_parser("create", help="print a new key (shown only once)")
    create.add_argument(
        "--scope", choices=["read", "plan", "admin"], required=True, help="what the key may do"
    )
    create.add_argument("--name", default="", help="who or what the key is for")
    actions.add_parser("list", help="every key: id, scope, state, created, name")
    revoke = actions.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("id", help="the key's id (from `keys list`)")
    keys.set_defaults(run=_cmd_keys)


def _add_worker_command(sub: Commands) -> None:
    worker = sub.add_parser("worker", help="run a worker for background jobs (needs a broker)")
    worker.add_argument(
        "--concurrency", type=int, default=1, help="jobs solved at once (processes; default 1)"
    )
    worker.add_argument(
        "--check", action="store_true", help="exit 0 when a worker here beat in the last minute"
    )
    worker.set_defaults(run=_cmd_worker)


def _add_db_command(sub: Commands) -> None:
    db = sub.add_parser("db", help="the store's schema: migrate it, or show its revision")
    db_actions = db.add_subparsers(dest="action", required=True, help="what to do")
    for action, text in (
        ("upgrade", "migrate the database to this version's newest revision (once per release)"),
        ("current", "print the database's revision; exit 6 when it is behind this version"),
    ):
        command = db_actions.add_parser(action, help=text)
        command.add_argument("--url", help="SQLAlchemy URL (default BANDWRIGHT_DATABASE_URL)")
    db.set_defaults(run=_cmd_db)


def _add_demo_command(sub: Commands) -> None:
    demo = sub.add_parser(
        "demo", help="start a local service, plan the demo request, write plan, pictures, CSV"
    )
    demo.add_argument("--request", type=Path, default=DEMO_REQUEST, help="request to plan")
    _add_outputs(demo, DEMO_OUTPUTS)
    demo.set_defaults(run=_cmd_demo)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``bandwright`` console script; returns the exit code."""
    logging.basicConfig(level=logging.WARNING, format="%(levelname)s %(name)s: %(message)s")
    try:
        args = _parser().parse_args(argv)
    except SystemExit as exc:  # --help, --version (0) or a refused argument (2: invalid input)
        return ExitCode.SERVED if exc.code is None else int(exc.code)
    try:
        return int(args.run(args))
    except CliError as exc:
        err(str(exc))
        return int(exc.code)
    except SchemaNotReadyError as exc:
        err(str(exc))
        return int(ExitCode.OUTDATED)
    except StoreUnavailableError as exc:
        err(str(exc))
        return int(ExitCode.UNREACHABLE)
    except KeyboardInterrupt:
        err("interrupted")
        return int(ExitCode.FAILED)


if __name__ == "__main__":
    raise SystemExit(main())
