"""Service settings, read from environment variables prefixed ``BANDWRIGHT_``.

Examples: ``BANDWRIGHT_DATABASE_URL=postgresql+psycopg://user@db/bandwright``,
``BANDWRIGHT_MAX_CONCURRENT_SOLVES=2``.  :func:`get_settings` is cached; tests pass their own
:class:`Settings` to :func:`service.app.create_app` instead.

``BANDWRIGHT_CACHE_DIR`` (stored spectrum profiles) is not a field here: the solver reads it
itself (:mod:`solver.physics.profilecache`), so the command line, the service and library use agree.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Annotated
from urllib.parse import urlsplit

from limits import parse_many
from pydantic import Field, field_validator
from pydantic_settings import BaseSettings, NoDecode, SettingsConfigDict

__all__ = ["Settings", "get_settings", "origin_problem"]

DEFAULT_DATABASE_URL = "sqlite:///./bandwright.db"
MEBIBYTE = 1024 * 1024


class Settings(BaseSettings):
    """Every knob of the service, with its environment variable ``BANDWRIGHT_<NAME>``.

    CPU budget: ``max_concurrent_solves × workers_per_solve`` threads for synchronous solves plus
    ``job_workers × workers_per_solve`` for background jobs; keep the sum at or below the cores.
    """

    model_config = SettingsConfigDict(env_prefix="BANDWRIGHT_", frozen=True, extra="ignore")

    database_url: str = Field(DEFAULT_DATABASE_URL, description="SQLAlchemy URL of the plan store")
    max_concurrent_solves: int = Field(2, ge=1, description="synchronous solves running at once")
    max_queued: int = Field(
        4, ge=0, description="synchronous solves allowed to wait; beyond this → 503"
    )
    workers_per_solve: int = Field(1, ge=1, le=64, description="CP-SAT workers per solve")
    job_workers: int = Field(1, ge=1, description="background job threads")
    max_queued_jobs: int = Field(100, ge=1, description="jobs waiting before POST /v1/jobs → 503")
    retry_after_s: int = Field(2, ge=1, description="Retry-After on 202 and 503 answers (s)")
    max_body_bytes: int = Field(5 * MEBIBYTE, ge=1024, description="request body limit (bytes)")
    access_log: bool = Field(
        False, description="log every request (off: /metrics counts them, at far less cost)"
    )
    progress_interval_s: float = Field(
        0.5, gt=0, description="least time between stored job progress updates (s)"
    )
    broker_url: str | None = Field(
        None,
        description="Celery broker (redis://host:6379/0): jobs go to `bandwright worker` "
        "processes; unset, jobs run on threads in the API process",
    )
    job_lease_s: float = Field(
        15.0,
        ge=1.0,
        le=600.0,
        description="a job's holder renews its lease every third of this; a job whose lease "
        "runs out (its process was killed) is run again by a live process",
    )
    unsent_after_s: float = Field(
        10.0, gt=0, description="a stored job no queue was given after this long is sent again"
    )
    worker_heartbeat_file: str = Field(
        "/tmp/bandwright-worker.alive",
        description="touched by `bandwright worker` while it runs; `bandwright worker --check` "
        "reads its age",
    )
    keys_pepper: str = Field(
        "", description="secret mixed into every stored API key hash (set it in production)"
    )
    allow_open: bool = Field(
        False, description="serve without API keys on an address other than loopback"
    )
    docs: bool = Field(True, description="serve /docs and /redoc (the OpenAPI document stays)")
    host: str = Field("127.0.0.1", description="address `bandwright serve` binds")
    port: int = Field(8000, ge=0, le=65535, description="port `bandwright serve` binds")
    rate_limit: str = Field(
        "120/minute",
        description="requests per API key (open: per client address) on every route but the "
        "probes, as `limits` strings ('120/minute', '10/second;1000/hour'); empty: no limit",
    )
    solve_rate_limit: str = Field(
        "10/minute",
        description="solving POSTs (/v1/plans, /v1/jobs) per API key or address, counted on "
        "top of rate_limit; empty: no limit",
    )
    max_jobs_per_key: int = Field(
        50,
        ge=1,
        description="queued plus running jobs one API key may hold (a batch's items included); "
        "beyond this → 429",
    )
    max_work_configurations: int = Field(
        2_000_000,
        ge=1,
        description="upper bound on the carrier configurations one plan may ask the solver to "
        "weigh (service.worksize); beyond this → 422",
    )
    cors_origins: Annotated[list[str], NoDecode] = Field(
        default_factory=list,
        description="origins allowed to call from a browser, comma-separated and exact "
        "(https://ops.example.org); empty: no CORS headers at all",
    )
    picture_workers: int = Field(
        1, ge=1, le=16, description="processes drawing spectrum pictures (one picture each)"
    )
    picture_queue: int = Field(
        4, ge=0, description="pictures allowed to wait for a drawing process; beyond this → 503"
    )
    picture_cache_bytes: int = Field(
        64 * MEBIBYTE, ge=0, description="memory kept for drawn pictures (bytes; 0: none kept)"
    )
    picture_timeout_s: float = Field(
        120.0, gt=0, le=3600, description="a drawing that takes longer is stopped (s)"
    )

    @field_validator("rate_limit", "solve_rate_limit")
    @classmethod
    def _rate(cls, value: str) -> str:
        if value.strip():
            try:
                parse_many(value)
            except ValueError as exc:
                raise ValueError(f"{value!r} is not a rate such as '120/minute': {exc}") from exc
        return value.strip()

    @field_validator("cors_origins", mode="before")
    @classmethod
    def _split_origins(cls, value: object) -> object:
        if isinstance(value, str):
            return [item.strip() for item in value.split(",") if item.strip()]
        return value

    @field_validator("cors_origins")
    @classmethod
    def _exact_origins(cls, value: list[str]) -> list[str]:
        for origin in value:
            why = origin_problem(origin)
            if why is not None:
                raise ValueError(f"{origin!r} {why}")
        return value


def origin_problem(origin: str) -> str | None:
    """Why ``origin`` is not an exact web origin (RFC 6454 §6.2 serialisation:
    ``scheme://host[:port]``, no path, no wildcard), or None when it is one.

    >>> origin_problem("https://ops.example.org:8443") is None
    True
    >>> origin_problem("https://ops.example.org/")
    'must be scheme://host[:port] with no path, query or fragment'
    """
    if origin == "*":
        return "is a wildcard; list each origin"
    try:
        parts = urlsplit(origin)
        port = parts.port
    except ValueError:
        return "is not a URL"
    if parts.scheme not in ("http", "https") or not parts.hostname:
        return "must start with http:// or https:// and name a host"
    if parts.path or parts.query or parts.fragment or "@" in parts.netloc:
        return "must be scheme://host[:port] with no path, query or fragment"
    if port is not None and not 0 < port < 65536:
        return "has a port outside 1–65535"
    return None


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, read once from the environment."""
    return Settings()
