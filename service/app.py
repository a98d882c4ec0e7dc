"""The FastAPI application factory.

``create_app(settings)`` builds an application around one :class:`~service.store.Store`, one
:class:`~service.runtime.SolveGate` and one job queue (:mod:`service.queue`: threads here, or
Celery workers when ``BANDWRIGHT_BROKER_URL`` is set), created at start-up (lifespan) and closed
at shutdown, with its request rates (:mod:`service.ratelimit`), its pictures and their drawing
processes (:mod:`service.pictures`) and, when origins are listed, CORS (:mod:`service.cors`).
Tests pass their own settings (and, to exercise the service machinery alone, their own solve
and drawing functions).

Middleware, outermost first: CORS, nosniff, metrics, body limit, unexpected errors.  On every
route but the probes the key check runs first, then the request rate; the solving POSTs then
count against the solve rate.
"""

from __future__ import annotations

import logging
from collections.abc import AsyncIterator, Callable
from contextlib import AbstractAsyncContextManager, asynccontextmanager
from importlib.metadata import PackageNotFoundError, version

from fastapi import Depends, FastAPI

from service.caching import NoSniffMiddleware
from service.cors import add_cors
from service.errors import (
    BodyLimitMiddleware,
    SchemaNotReadyError,
    UnexpectedErrorMiddleware,
    install_error_handlers,
)
from service.keys import authorise
from service.metrics import Metrics, MetricsMiddleware
from service.pictures import DrawFunction, Pictures, draw_picture
from service.queue import BrokerJobQueue, LocalJobQueue
from service.ratelimit import RateLimits, limit_requests
from service.routes import batches, carriers, health, jobs, modcods, plans, validate, whatif
from service.routes.plans import AUTH_RESPONSES, COMMON_RESPONSES, LIMIT_RESPONSES
from service.runtime import Runtime, SolveFunction, SolveGate
from service.settings import Settings, get_settings
from service.store import Store, StoreUnavailableError

__all__ = ["API_VERSION", "create_app"]

logger = logging.getLogger(__name__)

API_VERSION = "1"
DESCRIPTION = (
    "Plans carriers in a licensed spectrum block: symbol rate, modulation, code rate, roll-off "
    "and guard bands for every demand, packed by CP-SAT and verified from the power spectral "
    "densities. All quantities are SI and carry their unit in the field name. Errors are "
    "RFC 9457 problem details; their type is a URN, urn:bandwright:problem:<slug> (or "
    "about:blank), and a body that is not JSON is a 400 (malformed-json). A plan is an "
    "engineering estimate from models: measure real equipment before a carrier goes on air; "
    "licence conditions and the regulator decide."
)


def _package_version() -> str:
    try:
        return version("bandwright")
    except PackageNotFoundError:
        return "0+unknown"


def _default_solve() -> SolveFunction:
    from solver import solve

    solve_fn: SolveFunction = solve
    return solve_fn


def _job_queue(runtime: Runtime) -> LocalJobQueue | BrokerJobQueue:
    settings = runtime.settings
    if not settings.broker_url:  # unset or empty: threads here
        return LocalJobQueue(runtime)
    from service.worker import make_sender

    return BrokerJobQueue(runtime, make_sender(settings))


def _open_store(settings: Settings) -> tuple[Store, bool]:
    """The store, and whether it is ready now (if not, jobs wait for ``/readyz`` to pass)."""
    store = Store(settings.database_url)
    try:
        store.ensure_schema()
    except SchemaNotReadyError as exc:  # replicas never migrate; /readyz reports it
        logger.error("store not ready at start-up (jobs wait for /readyz to pass): %s", exc)
        return store, False
    except StoreUnavailableError as exc:  # /readyz reports it until the store answers
        logger.error("store not reachable at start-up (jobs wait for /readyz to pass): %s", exc)
        return store, False
    return store, True


def _lifespan(
    settings: Settings, metrics: Metrics, pictures: Pictures, solve: SolveFunction | None
) -> Callable[[FastAPI], AbstractAsyncContextManager[None]]:
    """Start-up and shutdown: the store, the runtime and its job queue, the picture pool."""

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        store, ready = _open_store(settings)
        solve_fn = _default_solve() if solve is None else solve
        runtime = Runtime(settings, store, metrics, solve_fn, SolveGate(settings, metrics))
        queue = _job_queue(runtime)
        runtime.jobs = queue
        app.state.runtime = runtime
        if ready:
            queue.start()
        else:
            runtime.start_when_ready(queue.start)
        try:
            yield
        finally:
            pictures.close()
            queue.shutdown()
            store.close()

    return lifespan


def create_app(
    settings: Settings | None = None,
    *,
    solve: SolveFunction | None = None,
    draw: DrawFunction | None = None,
) -> FastAPI:
    """Build the application.

    Parameters
    ----------
    settings : Settings, optional
        Defaults to :func:`service.settings.get_settings` (environment variables).
    solve : callable, optional
        The planning function; defaults to :func:`solver.solve`.
    draw : callable, optional
        Draws a plan's picture in a worker process (picklable); defaults to
        :func:`service.pictures.draw_picture`.
    """
    settings = get_settings() if settings is None else settings
    metrics = Metrics()
    pictures = Pictures(settings, metrics, draw_picture if draw is None else draw)

    lifespan = _lifespan(settings, metrics, pictures, solve)
    app = FastAPI(
        title="bandwright",
        version=_package_version(),
        summary="Optimised, verified carrier plans for a licensed spectrum block",
        description=DESCRIPTION,
        lifespan=lifespan,
        responses=COMMON_RESPONSES,
        docs_url="/docs" if settings.docs else None,
        redoc_url="/redoc" if settings.docs else None,
    )
    app.state.rate_limits = RateLimits(settings, metrics)
    app.state.pictures = pictures
    install_error_handlers(app)
    app.add_middleware(UnexpectedErrorMiddleware)  # innermost: the 500 is counted and timed
    app.add_middleware(BodyLimitMiddleware, limit_bytes=settings.max_body_bytes)
    app.add_middleware(MetricsMiddleware, metrics=metrics)
    app.add_middleware(NoSniffMiddleware)
    add_cors(app, settings.cors_origins)  # outermost: refusals carry the CORS headers too
    for module in (validate, plans, whatif, jobs, batches, carriers, modcods):
        app.include_router(
            module.router,
            dependencies=[Depends(authorise), Depends(limit_requests)],
            responses={**AUTH_RESPONSES, **LIMIT_RESPONSES},
        )
    app.include_router(health.router)  # the probes are open and unlimited; /metrics is neither
    return app
