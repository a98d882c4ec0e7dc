"""Limits per API key: request rates, counted by ``limits``, and the cap on a key's jobs; past
either, 429 Too Many Requests with Retry-After.

Every request but the probes counts against ``BANDWRIGHT_RATE_LIMIT`` for its API key (served
open: for its client address); the solving POSTs (``/v1/plans``, ``/v1/jobs``) also count
against the stricter ``BANDWRIGHT_SOLVE_RATE_LIMIT``.  Past a rate the answer is a 429 problem
document (``rate-limited``) with ``Retry-After`` in seconds until the oldest counted request
leaves the window.

Counts live in the ``limits`` library's moving window: in this process's memory, or in Redis
when ``BANDWRIGHT_BROKER_URL`` is a ``redis://`` (or ``rediss://``) URL, so that replicas share
them.  A storage that fails or does not answer within :data:`STORAGE_TIMEOUT_S` lets the request
through (fail open) and is logged, at most once per :data:`LOG_EVERY_S`: a rate limit is worth
less than the service.

A key may hold at most ``BANDWRIGHT_MAX_JOBS_PER_KEY`` queued or running jobs
(counted by the store as each job is inserted, and by :func:`check_job_cap` for a whole
batch before any of it is queued); past it, 429 ``too-many-jobs``.  Served open (no key)
only the queue's own bound applies.

Behind a reverse proxy the client address is the proxy's unless the server is told to trust
its forwarding headers (``uvicorn --proxy-headers --forwarded-allow-ips``).

References
----------
RFC 6585, "Additional HTTP Status Codes", §4 (429 Too Many Requests), IETF, April 2012.
RFC 9110, "HTTP Semantics", §10.2.3 (Retry-After), IETF, June 2022.
"""

from __future__ import annotations

import logging
import math
import time
from enum import StrEnum
from urllib.parse import urlsplit

import anyio
from fastapi import Request
from limits import RateLimitItem, parse_many
from limits.aio.strategies import MovingWindowRateLimiter
from limits.storage import storage_from_string

from service.errors import TooManyRequestsError
from service.keys import key_id_of
from service.metrics import Metrics
from service.runtime import Runtime
from service.schemas import JobState
from service.settings import Settings

__all__ = [
    "RateKind",
    "RateLimits",
    "check_job_cap",
    "client_identity",
    "job_cap_refusal",
    "limit_requests",
    "limit_solves",
    "storage_uri",
]

logger = logging.getLogger(__name__)

STORAGE_TIMEOUT_S = 0.5
"""Longest wait for the counts' storage before the request goes through uncounted (s)."""
LOG_EVERY_S = 60.0
"""Least time between two warnings about a failing storage (s)."""
REDIS_SCHEMES = frozenset({"redis", "rediss"})


class RateKind(StrEnum):
    """Which rate a request counts against."""

    REQUEST = "request"
    SOLVE = "solve"


SETTING = {RateKind.REQUEST: "BANDWRIGHT_RATE_LIMIT", RateKind.SOLVE: "BANDWRIGHT_SOLVE_RATE_LIMIT"}


def storage_uri(broker_url: str | None) -> str:
    """Where the counts live: the broker's Redis when it is one, else this process's memory.

    >>> storage_uri(None), storage_uri("redis://cache:6379/0"), storage_uri("amqp://mq//")
    ('async+memory://', 'async+redis://cache:6379/0', 'async+memory://')
    """
    if broker_url is not None and urlsplit(broker_url).scheme in REDIS_SCHEMES:
        return f"async+{broker_url}"
    return "async+memory://"


def client_identity(request: Request) -> str:
    """Whose counts a request adds to: its API key's id, or served open, its client address."""
    key_id = key_id_of(request)
    if key_id is not None:
        return f"key:{key_id}"
    host = request.client.host if request.client is not None else "unknown"
    return f"address:{host}"


class RateLimits:
    """The service's rates and the storage counting them (one per application)."""

    def __init__(self, settings: Settings, metrics: Metrics) -> None:
        self._rates: dict[RateKind, list[RateLimitItem]] = {
            RateKind.REQUEST: parse_many(settings.rate_limit) if settings.rate_limit else [],
            RateKind.SOLVE: parse_many(settings.solve_rate_limit)
            if settings.solve_rate_limit
            else [],
        }
        uri = storage_uri(settings.broker_url)
        options: dict[str, float | str | bool] = {}
        if uri.startswith("async+redis"):
            options = {
                "implementation": "redispy",
                "socket_connect_timeout": STORAGE_TIMEOUT_S,
                "socket_timeout": STORAGE_TIMEOUT_S,
            }
        self._storage_kind = "redis" if options else "memory"
        self._limiter = MovingWindowRateLimiter(
            storage_from_string(uri, wrap_exceptions=True, **options)
        )
        self._metrics = metrics
        self._logged_at = -math.inf

    async def check(self, kind: RateKind, who: str) -> None:
        """Count one request of ``who`` against the rates of ``kind``; raise
        :class:`~service.errors.TooManyRequestsError` past one of them."""
        for rate in self._rates[kind]:
            try:
                with anyio.fail_after(STORAGE_TIMEOUT_S):
                    if await self._limiter.hit(rate, kind.value, who):
                        continue
                    stats = await self._limiter.get_window_stats(rate, kind.value, who)
            except Exception as exc:  # any storage failure: let the request through
                self._storage_failed(exc)
                return
            retry_after_s = max(1, math.ceil(stats.reset_time - time.time()))
            whose = "API key" if who.startswith("key:") else "client address"
            detail = (
                f"over the {kind.value} rate of {rate} for this {whose} "
                f"({SETTING[kind]}); retry after {retry_after_s} s"
            )
            raise TooManyRequestsError("rate-limited", detail, retry_after_s)

    def _storage_failed(self, exc: Exception) -> None:
        self._metrics.rate_limit_failures.inc()
        now = time.monotonic()
        if now - self._logged_at >= LOG_EVERY_S:
            self._logged_at = now
            logger.warning(
                "rate-limit storage (%s) failed; requests go through uncounted: %r",
                self._storage_kind,
                exc,
            )


def _limits(request: Request) -> RateLimits:
    limits: RateLimits = request.app.state.rate_limits
    return limits


async def limit_requests(request: Request) -> None:
    """FastAPI dependency, after the key check: count the request against the request rate."""
    await _limits(request).check(RateKind.REQUEST, client_identity(request))


async def limit_solves(request: Request) -> None:
    """FastAPI dependency of the solving POSTs: count against the solve rate as well."""
    await _limits(request).check(RateKind.SOLVE, client_identity(request))


def check_job_cap(runtime: Runtime, owner_key: str | None, adding: int = 1) -> None:
    """Refuse (429 ``too-many-jobs``) ``adding`` more jobs for ``owner_key`` when its queued
    and running jobs would then exceed ``BANDWRIGHT_MAX_JOBS_PER_KEY``; no cap served open.

    This refuses a whole batch before any of it is queued; the store counts again as it
    inserts each job, with the key's row locked (:meth:`service.store.Store.add_job`), so that
    submissions racing on one key never pass the cap.
    """
    if owner_key is None:
        return
    settings = runtime.settings
    cap = settings.max_jobs_per_key
    held = sum(
        runtime.store.count_jobs(state, key_id=owner_key)
        for state in (JobState.QUEUED, JobState.RUNNING)
    )
    if held + adding > cap:
        raise job_cap_refusal(held, cap, adding, settings.retry_after_s)


def job_cap_refusal(held: int, cap: int, adding: int, retry_after_s: int) -> TooManyRequestsError:
    """The 429 for a key whose queued and running jobs would pass its cap."""
    asked = "one more" if adding == 1 else f"{adding} more"
    detail = (
        f"this API key holds {held} queued or running jobs and its cap is {cap} "
        f"(BANDWRIGHT_MAX_JOBS_PER_KEY), so {asked} cannot be queued: wait for some to end, "
        "or cancel some"
    )
    return TooManyRequestsError("too-many-jobs", detail, retry_after_s)
