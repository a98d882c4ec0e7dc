"""The Celery side of background jobs: the app, its one task, and ``bandwright worker``.

The API (:class:`service.queue.BrokerJobQueue`) sends a job's id; a worker process claims the
job in the store, solves it and stores its plan (:func:`service.queue.run_job`).  Delivery is
at least once — late acknowledgement, a prefetch of one, redelivery when a worker process is
lost — and the store makes running it more than once harmless.  Each task carries hard and soft
time limits from the request's ``time_limit_s``.
"""

from __future__ import annotations

import logging
import os
import threading
import time
from collections.abc import Callable
from pathlib import Path

from celery import Celery

from service.metrics import Metrics
from service.queue import LeaseKeeper, run_job
from service.runtime import Runtime, SolveGate
from service.settings import Settings, get_settings
from service.store import Store

__all__ = [
    "JOB_QUEUE",
    "TASK_NAME",
    "celery_app",
    "heartbeat_age_s",
    "make_sender",
    "run_worker",
]

logger = logging.getLogger(__name__)

TASK_NAME = "bandwright.run_job"
JOB_QUEUE = "bandwright.jobs"
SOFT_GRACE_S = 60.0
"""Beyond ``time_limit_s`` before a task is asked to stop (the solver keeps the limit itself;
this is the safety net), and as much again before its process is killed."""
HEARTBEAT_INTERVAL_S = 10.0

celery_app = Celery("bandwright")


def configure(settings: Settings) -> Celery:
    """Point the Celery app at the configured broker, with at-least-once delivery."""
    celery_app.conf.update(
        broker_url=settings.broker_url,
        task_acks_late=True,
        task_reject_on_worker_lost=True,
        worker_prefetch_multiplier=1,
        task_ignore_result=True,
        task_default_queue=JOB_QUEUE,
        broker_connection_retry_on_startup=True,
        task_publish_retry_policy={"max_retries": 2, "interval_start": 0.1, "interval_step": 0.2},
        worker_hijack_root_logger=False,
    )
    return celery_app


def make_sender(settings: Settings) -> Callable[[str, float], None]:
    """A function that sends one job id to the workers, with its time limits."""
    app = configure(settings)

    def send(job_id: str, time_limit_s: float) -> None:
        soft = time_limit_s + SOFT_GRACE_S
        app.send_task(
            TASK_NAME, args=[job_id], soft_time_limit=soft, time_limit=soft + SOFT_GRACE_S
        )

    return send


_WORKER: tuple[int, Runtime, LeaseKeeper] | None = None
_WORKER_LOCK = threading.Lock()


def _worker_runtime() -> tuple[Runtime, LeaseKeeper]:
    """This worker process's runtime and lease keeper (built after the fork, once per pid)."""
    global _WORKER
    with _WORKER_LOCK:
        if _WORKER is None or _WORKER[0] != os.getpid():
            from solver import solve

            settings = get_settings()
            metrics = Metrics()
            runtime = Runtime(
                settings, Store(settings.database_url), metrics, solve, SolveGate(settings, metrics)
            )
            keeper = LeaseKeeper(runtime, name="worker-leases")
            keeper.start()
            _WORKER = (os.getpid(), runtime, keeper)
        return _WORKER[1], _WORKER[2]


@celery_app.task(name=TASK_NAME, acks_late=True, reject_on_worker_lost=True)
def run_job_task(job_id: str) -> str:
    """Run one stored job (idempotent: a job already claimed, ended or cancelled is skipped)."""
    runtime, keeper = _worker_runtime()
    outcome = run_job(runtime, keeper, job_id)
    logger.info("job %s: %s", job_id, outcome)
    return outcome


def _beat(path: Path, stop: threading.Event) -> None:
    while True:
        try:
            path.touch()
        except OSError as exc:
            logger.warning("cannot touch the heartbeat file %s: %s", path, exc)
        if stop.wait(HEARTBEAT_INTERVAL_S):
            return


def heartbeat_age_s(settings: Settings) -> float | None:
    """Seconds since the worker last touched its heartbeat file (None: no file)."""
    try:
        return time.time() - Path(settings.worker_heartbeat_file).stat().st_mtime
    except OSError:
        return None


def run_worker(settings: Settings, concurrency: int, loglevel: str = "INFO") -> None:
    """Run a Celery worker for the job queue (blocks until it is stopped)."""
    configure(settings)
    stop = threading.Event()
    beat = threading.Thread(
        target=_beat, args=(Path(settings.worker_heartbeat_file), stop), daemon=True
    )
    beat.start()
    try:
        celery_app.worker_main(
            [
                "worker",
                f"--loglevel={loglevel}",
                f"--concurrency={concurrency}",
                "--pool=prefork",
                f"--queues={JOB_QUEUE}",
                f"--hostname=bandwright-{os.getpid()}@%h",
                "--without-gossip",
                "--without-mingle",
            ]
        )
    finally:
        stop.set()
