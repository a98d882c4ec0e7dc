"""Service benchmark on loopback (127.0.0.1 only), bounded: fixed request counts.

Starts ``bandwright serve`` in a child process on a free loopback port with a temporary SQLite
store, then measures

* ``POST /v1/carriers/evaluate``: requests per second and p50/p99 latency with N concurrent
  clients (httpx.AsyncClient), after a warm-up;
* ``POST /v1/plans`` latency for the demo request, against the same solve run in this process
  (``to_problem`` + ``solver.solve``), both warm; the ratio is the service's overhead.

Targets on 2 cores: ≥ 500 evaluate req/s with p99 < 50 ms; overhead < 10 % of the solve time.
Run: ``.venv/bin/python bench/service.py``.

With ``--queue POSTGRES_URL`` (needs ``redis-server``, Debian's package) it also runs the job
queue as deployed: an API process with a Redis broker and PostgreSQL, and 1 then 2
``bandwright worker`` processes, and reports

* plans per minute with 1 and 2 workers (the demo request, ``--queue-jobs`` jobs each);
* the queue's overhead: a demo job's time from POST to ``done`` seen by polling, against the
  same solve in this process, interleaved (target < 5 % of the solve);
* evaluate throughput on the API with the broker configured, against the embedded default
  measured in the same run (unchanged within noise).
"""

from __future__ import annotations

import argparse
import asyncio
import json
import logging
import os
import re
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import httpx

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from service.cli import FALLBACK_DEMO_REQUEST  # noqa: E402
from service.convert import to_problem  # noqa: E402
from service.schemas import PlanRequest  # noqa: E402

logger = logging.getLogger("bench.service")

LOOPBACK = "127.0.0.1"
START_TIMEOUT_S = 60.0
MS = 1e3
PERCENT = 100.0
EVALUATE_BODY: dict[str, Any] = {
    "symbol_rate_baud": 2e6,
    "rolloff": 0.2,
    "modulation": "16APSK",
    "code_rate": "3/4",
    "filter_span_symbols": 16,
    "cn0_dbhz": 82.0,
    "gaps_hz": [0.0, 5e4, 2e5],
    "leakage_limit_db": 40.0,
}


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind((LOOPBACK, 0))
        return int(sock.getsockname()[1])


def _start_server(
    db_dir: Path, extra_env: dict[str, str] | None = None
) -> tuple[subprocess.Popen[bytes], str]:
    port = _free_port()
    env = dict(os.environ, BANDWRIGHT_DATABASE_URL=f"sqlite:///{db_dir / 'bench.db'}")
    env["PYTHONPATH"] = str(ROOT)
    # every request comes from one address: the per-client rates would refuse most of them,
    # and what is measured is the service's own speed
    env.update(BANDWRIGHT_RATE_LIMIT="", BANDWRIGHT_SOLVE_RATE_LIMIT="")
    env.update(extra_env or {})
    command = [
        sys.executable,
        "-m",
        "service.cli",
        "serve",
        "--host",
        LOOPBACK,
        "--port",
        str(port),
    ]
    server = subprocess.Popen(
        command, env=env, cwd=db_dir, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    base = f"http://{LOOPBACK}:{port}"
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"{base}/healthz", timeout=1.0).status_code == httpx.codes.OK:
                return server, base
        except httpx.TransportError:
            time.sleep(0.1)
    server.kill()
    raise RuntimeError("the service did not start")


def _percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    index = min(len(ordered) - 1, round(q / PERCENT * (len(ordered) - 1)))
    return ordered[index]


async def _evaluate_load(base: str, total: int, concurrency: int) -> dict[str, float]:
    latencies: list[float] = []
    queue: asyncio.Queue[int] = asyncio.Queue()
    for k in range(total):
        queue.put_nowait(k)
    limits = httpx.Limits(max_connections=concurrency, max_keepalive_connections=concurrency)
    async with httpx.AsyncClient(base_url=base, limits=limits, timeout=30.0) as client:
        for _ in range(50):  # warm-up: profile and catalogue caches, connections
            (await client.post("/v1/carriers/evaluate", json=EVALUATE_BODY)).raise_for_status()

        async def worker() -> None:
            while not queue.empty():
                queue.get_nowait()
                started = time.perf_counter()
                response = await client.post("/v1/carriers/evaluate", json=EVALUATE_BODY)
                latencies.append(time.perf_counter() - started)
                response.raise_for_status()

        started = time.perf_counter()
        await asyncio.gather(*(worker() for _ in range(concurrency)))
        wall_s = time.perf_counter() - started
    return {
        "requests": float(total),
        "per_second": total / wall_s,
        "p50_ms": _percentile(latencies, 50) * MS,
        "p99_ms": _percentile(latencies, 99) * MS,
    }


def _wrk_load(base: str, seconds: int, concurrency: int) -> dict[str, float] | None:
    """The same evaluate load from ``wrk`` (Debian package), whose C client costs the shared
    cores far less than the Python client; None when wrk is not installed."""
    wrk = shutil.which("wrk")
    if wrk is None:
        return None
    with tempfile.NamedTemporaryFile("w", suffix=".lua", delete=False) as script:
        script.write('wrk.method = "POST"\nwrk.headers["Content-Type"] = "application/json"\n')
        script.write(f"wrk.body = [[{json.dumps(EVALUATE_BODY)}]]\n")
    command = [wrk, "-t1", f"-c{concurrency}", f"-d{seconds}s", "--latency", "-s", script.name]
    output = subprocess.run(
        [*command, f"{base}/v1/carriers/evaluate"], capture_output=True, text=True, check=True
    ).stdout
    os.unlink(script.name)

    def ms(label: str) -> float:
        value = re.search(rf"^\s*{label}\s+([\d.]+)(us|ms|s)\s*$", output, re.M)
        if value is None:
            raise RuntimeError(f"wrk printed no {label} latency:\n{output}")
        scale = {"us": 1e-3, "ms": 1.0, "s": 1e3}[value.group(2)]
        return float(value.group(1)) * scale

    rate = re.search(r"Requests/sec:\s+([\d.]+)", output)
    errors = re.search(r"Non-2xx or 3xx responses: (\d+)", output)
    if rate is None or errors is not None:
        raise RuntimeError(f"wrk run failed:\n{output}")
    return {"per_second": float(rate.group(1)), "p50_ms": ms("50%"), "p99_ms": ms("99%")}


def _plan_rounds(base: str, request: dict[str, Any], repeats: int) -> dict[str, list[float]]:
    """Interleave HTTP plans and in-process solves so machine load hits both alike."""
    from solver import solve

    rounds: dict[str, list[float]] = {"http_s": [], "server_solve_s": [], "local_s": []}
    with httpx.Client(base_url=base, timeout=600.0) as client:
        client.post("/v1/plans", json=request).raise_for_status()  # warm-up, both sides
        solve(to_problem(PlanRequest.model_validate(request)))
        for _ in range(repeats):
            started = time.perf_counter()
            response = client.post("/v1/plans", json=request)
            rounds["http_s"].append(time.perf_counter() - started)
            response.raise_for_status()
            rounds["server_solve_s"].append(float(response.json()["summary"]["solve_time_s"]))
            started = time.perf_counter()
            solve(to_problem(PlanRequest.model_validate(request)))
            rounds["local_s"].append(time.perf_counter() - started)
    return rounds


def _demo_request() -> dict[str, Any]:
    path = ROOT / "examples" / "demo-request.json"
    if path.exists():
        request: dict[str, Any] = json.loads(path.read_text(encoding="utf-8"))
        return request
    return dict(FALLBACK_DEMO_REQUEST)


def _wrk_rows(light: dict[str, float] | None, seconds: int) -> list[tuple[str, str]]:
    if light is None:
        return [("evaluate (wrk)", "wrk not installed (apt-get install wrk)")]
    return [
        ("evaluate throughput (wrk)", f"{light['per_second']:.0f} req/s over {seconds} s"),
        ("evaluate p50 / p99 (wrk)", f"{light['p50_ms']:.1f} / {light['p99_ms']:.1f} ms"),
    ]


# ----------------------------------------------------------------------------- the job queue


def _fresh_schema(postgres_url: str) -> str:
    """A new schema in the PostgreSQL database, migrated to head; the URL that uses it."""
    import uuid

    import sqlalchemy as sa

    schema = f"bench{uuid.uuid4().hex[:10]}"
    engine = sa.create_engine(postgres_url)
    with engine.begin() as conn:
        conn.execute(sa.text(f"CREATE SCHEMA {schema}"))
    engine.dispose()
    separator = "&" if "?" in postgres_url else "?"
    url = f"{postgres_url}{separator}options=-csearch_path%3D{schema}"
    from service.store import Store

    store = Store(url)
    store.upgrade_schema()  # as `bandwright db upgrade` does once per release
    store.close()
    return url


def _start_worker(env: dict[str, str], log: Path) -> subprocess.Popen[bytes]:
    command = [sys.executable, "-m", "service.cli", "worker"]
    worker = subprocess.Popen(
        command, env=env, stdout=log.open("wb"), stderr=subprocess.STDOUT, start_new_session=True
    )
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline:
        if " ready." in log.read_text(errors="replace"):
            return worker
        if worker.poll() is not None:
            break
        time.sleep(0.1)
    worker.kill()
    raise RuntimeError(f"the worker did not start:\n{log.read_text(errors='replace')}")


def _job_seconds(client: httpx.Client, request: dict[str, Any]) -> float:
    """POST one job and poll it every 10 ms until done: seconds from POST to done."""
    started = time.perf_counter()
    answer = client.post("/v1/jobs", json=request)
    answer.raise_for_status()
    location = answer.headers["Location"]
    while True:
        state = client.get(location).json()["state"]
        if state == "done":
            return time.perf_counter() - started
        if state in ("failed", "cancelled"):
            raise RuntimeError(f"job {location} ended {state}")
        time.sleep(0.01)


def _throughput(client: httpx.Client, request: dict[str, Any], jobs: int) -> float:
    """Plans per minute: ``jobs`` jobs posted at once, until the last is done."""
    started = time.perf_counter()
    locations = []
    for _ in range(jobs):
        answer = client.post("/v1/jobs", json=request)
        answer.raise_for_status()
        locations.append(answer.headers["Location"])
    pending = set(locations)
    while pending:
        for location in list(pending):
            if client.get(location).json()["state"] == "done":
                pending.discard(location)
        time.sleep(0.05)
    return jobs / (time.perf_counter() - started) * 60.0


SMALL_LOAD_REQUEST: dict[str, Any] = {
    "name": "load: invented two-link block",
    "block": {"start_hz": 2.40e9, "stop_hz": 2.41e9, "raster_hz": 10e3},
    "demands": [
        {"id": "north", "min_rate_bps": 1e6, "target_rate_bps": 2e6, "esn0_db": 12.0},
        {"id": "south", "min_rate_bps": 1e6, "target_rate_bps": 3e6, "cn0_dbhz": 78.0},
    ],
    "time_limit_s": 2.0,
}


async def _write_load(base: str, plans: int, jobs: int, concurrency: int) -> dict[str, int]:
    """``plans`` synchronous plans and ``jobs`` jobs posted by ``concurrency`` clients, retried
    on 503 as a client would; then every plan answered 201 and every job's plan read back."""
    counts: dict[str, int] = {}
    created: list[str] = []
    queued: list[str] = []
    work = asyncio.Queue[str]()
    for kind in ["plan"] * plans + ["job"] * jobs:
        work.put_nowait(kind)
    async with httpx.AsyncClient(base_url=base, timeout=120.0) as client:

        async def poster() -> None:
            while not work.empty():
                kind = work.get_nowait()
                path = "/v1/plans" if kind == "plan" else "/v1/jobs"
                while True:
                    answer = await client.post(path, json=SMALL_LOAD_REQUEST)
                    key = f"{kind} {answer.status_code}"
                    counts[key] = counts.get(key, 0) + 1
                    if answer.status_code != 503:
                        break
                    await asyncio.sleep(float(answer.headers.get("Retry-After", "1")))
                if answer.status_code == 201:
                    created.append(answer.headers["Location"])
                elif answer.status_code == 202:
                    queued.append(answer.headers["Location"])

        await asyncio.gather(*(poster() for _ in range(concurrency)))
        for location in queued:  # jobs: wait for each, then read its plan like the others
            while (job := (await client.get(location)).json())["state"] not in ("done", "failed"):
                await asyncio.sleep(0.1)
            if job["plan_url"]:
                created.append(job["plan_url"])
        read_back = 0
        for location in created:
            read_back += (await client.get(location)).status_code == 200
    counts["created"] = len(created)
    counts["read back"] = read_back
    counts["lost"] = plans + jobs - read_back
    return counts


def _job_timings(
    client: httpx.Client, request: dict[str, Any], repeats: int
) -> tuple[list[float], list[float]]:
    """A demo job from POST to done, and the same solve here, interleaved, both warm."""
    from solver import solve

    _job_seconds(client, request)  # warm-up: the worker's spectra and catalogue
    solve(to_problem(PlanRequest.model_validate(request)))
    job_s, local_s = [], []
    for _ in range(repeats):  # one job at a time
        job_s.append(_job_seconds(client, request))
        started = time.perf_counter()
        solve(to_problem(PlanRequest.model_validate(request)))
        local_s.append(time.perf_counter() - started)
    return job_s, local_s


def _alternated_evaluate(urls: list[str], args: argparse.Namespace) -> list[list[float]]:
    """Evaluate throughput on each URL, three runs each, alternated so load falls alike."""
    rates: list[list[float]] = [[] for _ in urls]
    for _ in range(3):
        for got, url in zip(rates, urls, strict=True):
            got.append(
                asyncio.run(_evaluate_load(url, args.requests, args.concurrency))["per_second"]
            )
    return rates


def _measure_queue(
    root: Path, env: dict[str, str], request: dict[str, Any], args: argparse.Namespace
) -> dict[str, Any]:
    """Every queue figure, on the processes started here (stopped before returning)."""
    settings = {k: v for k, v in env.items() if k.startswith("BANDWRIGHT_")}
    processes: list[subprocess.Popen[bytes]] = []
    workers: list[subprocess.Popen[bytes]] = []
    try:
        api, base = _start_server(root, settings)
        processes.append(api)
        workers.append(_start_worker(env, root / "worker1.log"))
        with httpx.Client(base_url=base, timeout=600.0) as client:
            job_s, local_s = _job_timings(client, request, args.plan_repeats)
            one = _throughput(client, request, args.queue_jobs)
            workers.append(_start_worker(env, root / "worker2.log"))
            _job_seconds(client, request)  # warm the second worker too (either may take it)
            two = _throughput(client, request, args.queue_jobs)
        written = asyncio.run(_write_load(base, args.load_plans, args.load_jobs, args.concurrency))
        for worker in workers:  # stopped: evaluate sees the API alone
            worker.terminate()
            worker.wait(timeout=60)
        settings.pop("BANDWRIGHT_BROKER_URL")
        plain, plain_base = _start_server(root, settings)
        processes.append(plain)
        brokered, unbrokered = _alternated_evaluate([base, plain_base], args)
    finally:
        _stop(processes + workers)
    return {
        "job_s": job_s,
        "local_s": local_s,
        "one": one,
        "two": two,
        "written": written,
        "brokered": brokered,
        "plain": unbrokered,
    }


def _stop(processes: list[subprocess.Popen[bytes]]) -> None:
    for process in reversed(processes):
        if process.poll() is None:
            process.terminate()
            try:
                process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                process.kill()


def _queue_rows(
    postgres_url: str, request: dict[str, Any], args: argparse.Namespace
) -> list[tuple[str, str]]:
    redis_server = shutil.which("redis-server")
    if redis_server is None:
        return [("job queue", "redis-server not installed (apt-get install redis-server)")]
    with tempfile.TemporaryDirectory(prefix="bandwright-queue-") as tmp:
        root = Path(tmp)
        redis_port = _free_port()
        redis = subprocess.Popen(
            [redis_server, "--port", str(redis_port), "--bind", LOOPBACK, "--save", ""],
            stdout=subprocess.DEVNULL,
            start_new_session=True,
        )
        env = dict(
            os.environ,
            PYTHONPATH=str(ROOT),
            BANDWRIGHT_DATABASE_URL=_fresh_schema(postgres_url),
            BANDWRIGHT_BROKER_URL=f"redis://{LOOPBACK}:{redis_port}/0",
            BANDWRIGHT_WORKER_HEARTBEAT_FILE=str(root / "worker.alive"),
        )
        try:
            m = _measure_queue(root, env, request, args)
        finally:
            _stop([redis])
    job_median, local_median = statistics.median(m["job_s"]), statistics.median(m["local_s"])
    overhead = (job_median - local_median) / local_median
    brokered, plain = m["brokered"], m["plain"]
    one, two = m["one"], m["two"]
    return [
        (
            "write load (PostgreSQL)",
            ", ".join(f"{k}: {v}" for k, v in sorted(m["written"].items())),
        ),
        ("demo job via Redis + worker", f"median {job_median:.3f} s of {args.plan_repeats}"),
        ("demo solve in process", f"median {local_median:.3f} s (interleaved)"),
        ("  queue overhead", f"{overhead * PERCENT:+.1f} % of the solve   (target < 5 %)"),
        ("plans per minute, 1 worker", f"{one:.1f} ({args.queue_jobs} demo jobs)"),
        (
            "plans per minute, 2 workers",
            f"{two:.1f} ({args.queue_jobs} demo jobs)  ×{two / one:.2f}",
        ),
        (
            "evaluate, API with broker",
            f"median {statistics.median(brokered):.0f} req/s of 3 runs "
            f"({min(brokered):.0f}–{max(brokered):.0f})",
        ),
        (
            "evaluate, same store, no broker",
            f"median {statistics.median(plain):.0f} req/s ({min(plain):.0f}–{max(plain):.0f})  "
            f"(ratio {statistics.median(brokered) / statistics.median(plain):.2f})",
        ),
    ]


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--requests", type=int, default=3000, help="evaluate requests")
    parser.add_argument("--concurrency", type=int, default=16, help="concurrent clients")
    parser.add_argument("--plan-repeats", type=int, default=5, help="timed plan requests")
    parser.add_argument("--wrk-seconds", type=int, default=10, help="length of the wrk run")
    parser.add_argument(
        "--queue", metavar="POSTGRES_URL", help="also measure the job queue (Redis + workers)"
    )
    parser.add_argument("--queue-jobs", type=int, default=8, help="jobs per throughput run")
    parser.add_argument("--load-plans", type=int, default=200, help="plans in the write load")
    parser.add_argument("--load-jobs", type=int, default=100, help="jobs in the write load")
    parser.add_argument("--skip-plans", action="store_true", help="skip the synchronous plans")
    args = parser.parse_args()
    request = _demo_request()
    with tempfile.TemporaryDirectory(prefix="bandwright-bench-") as tmp:
        server, base = _start_server(Path(tmp))
        try:
            load = asyncio.run(_evaluate_load(base, args.requests, args.concurrency))
            light = _wrk_load(base, args.wrk_seconds, args.concurrency)
            rounds = None if args.skip_plans else _plan_rounds(base, request, args.plan_repeats)
        finally:
            server.terminate()
            server.wait(timeout=30)
    rows = [
        ("evaluate requests", f"{load['requests']:.0f} at {args.concurrency} clients"),
        ("evaluate throughput (httpx)", f"{load['per_second']:.0f} req/s   (target ≥ 500)"),
        ("evaluate p50 / p99 (httpx)", f"{load['p50_ms']:.1f} / {load['p99_ms']:.1f} ms"),
        *_wrk_rows(light, args.wrk_seconds),
    ]
    if rounds is not None:
        rows += _plan_rows(rounds, args.plan_repeats)
    if args.queue:
        rows += _queue_rows(args.queue, request, args)
    rows += [
        ("demo request", str(request.get("name"))),
        ("load average (1 min)", f"{os.getloadavg()[0]:.2f} on {os.cpu_count()} cores"),
    ]
    width = max(len(name) for name, _ in rows)
    sys.stdout.write("".join(f"{name:<{width}}  {value}\n" for name, value in rows))
    return 0


def _plan_rows(rounds: dict[str, list[float]], repeats: int) -> list[tuple[str, str]]:
    http_median = statistics.median(rounds["http_s"])
    local_median = statistics.median(rounds["local_s"])
    solve_median = statistics.median(rounds["server_solve_s"])
    overhead = (http_median - local_median) / local_median
    wrapping = (http_median - solve_median) / solve_median
    return [
        ("demo plan over HTTP", f"median {http_median:.3f} s of {repeats}"),
        ("demo solve in process", f"median {local_median:.3f} s of {repeats}"),
        ("  overhead vs in process", f"{overhead * PERCENT:+.1f} %   (target < 10 %)"),
        ("server-reported solve", f"median {solve_median:.3f} s"),
        ("  HTTP + store around it", f"{wrapping * PERCENT:+.1f} % of the solve"),
    ]


if __name__ == "__main__":
    raise SystemExit(main())
