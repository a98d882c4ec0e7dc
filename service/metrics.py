"""Prometheus metrics: requests and latency by route, solve times and solver outcomes.

Each application gets its own :class:`prometheus_client.CollectorRegistry`, so several apps in one
process (tests) never share counters.  Served as text by ``GET /metrics``.
"""

from __future__ import annotations

import time

from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram, generate_latest
from starlette.types import ASGIApp, Message, Receive, Scope, Send

__all__ = ["CONTENT_TYPE", "Metrics", "MetricsMiddleware"]

CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"
HTTP_BUCKETS_S = (0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60)
SOLVE_BUCKETS_S = (0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 120, 300)
UNMATCHED_ROUTE = "unmatched"
SERVER_ERROR = 500


class Metrics:
    """The service's collectors, in a registry of their own."""

    def __init__(self) -> None:
        self.registry = CollectorRegistry()
        self.requests = Counter(
            "bandwright_http_requests",
            "HTTP requests answered, by method, route template and status",
            ["method", "route", "status"],
            registry=self.registry,
        )
        self.latency = Histogram(
            "bandwright_http_request_duration_seconds",
            "time to answer an HTTP request (s), by method and route template",
            ["method", "route"],
            buckets=HTTP_BUCKETS_S,
            registry=self.registry,
        )
        self.solve_time = Histogram(
            "bandwright_solve_duration_seconds",
            "wall time of one solve, model build to verified plan (s)",
            ["mode"],
            buckets=SOLVE_BUCKETS_S,
            registry=self.registry,
        )
        self.solves = Counter(
            "bandwright_solves",
            "finished solves by outcome (optimal, feasible, infeasible, invalid, error)",
            ["status"],
            registry=self.registry,
        )
        self.solves_running = Gauge(
            "bandwright_solves_running", "solves running now", registry=self.registry
        )
        self.solves_rejected = Counter(
            "bandwright_solves_rejected",
            "synchronous solves refused with 503 because every slot was taken",
            registry=self.registry,
        )

        self.rate_limit_failures = Counter(
            "bandwright_rate_limit_storage_failures",
            "requests let through uncounted because the rate-limit storage failed",
            registry=self.registry,
        )
        self.pictures_drawn = Counter(
            "bandwright_pictures_drawn",
            "spectrum pictures drawn, by format (a picture served from memory is not counted)",
            ["format"],
            registry=self.registry,
        )
        self.picture_hits = Counter(
            "bandwright_picture_cache_hits",
            "spectrum pictures served from memory without drawing",
            registry=self.registry,
        )

    def render(self) -> bytes:
        """The Prometheus text exposition of every collector."""
        return bytes(generate_latest(self.registry))


class MetricsMiddleware:
    """Pure ASGI middleware (keeps disconnect detection working) that times every request."""

    def __init__(self, app: ASGIApp, metrics: Metrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        status = SERVER_ERROR

        async def send_and_note(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = int(message["status"])
            await send(message)

        try:
            await self.app(scope, receive, send_and_note)
        finally:
            route = getattr(scope.get("route"), "path", UNMATCHED_ROUTE)
            method = str(scope.get("method", ""))
            self.metrics.requests.labels(method, route, str(status)).inc()
            self.metrics.latency.labels(method, route).observe(time.perf_counter() - started)
