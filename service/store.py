"""Plan and job persistence with SQLAlchemy 2: a SQLite file by default, PostgreSQL by URL.

Plans are immutable: written once, never updated.  A replan is a new plan whose ``parent_id``
names the old one.  JSON documents are stored as text, which every SQL database holds the same
way, so the schema stays portable.  Every method opens its own short session, so one
:class:`Store` may be shared by the event loop's thread pool and the job threads.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Engine
from sqlalchemy.orm import DeclarativeBase, Mapped, Session, mapped_column, sessionmaker

from service.errors import StoreUnavailableError
from service.schemas import JobOut, JobProgress, JobState, PlanListItem, PlanOut, PlanRequest

__all__ = [
    "JobRecord",
    "KeyRecord",
    "Replay",
    "Store",
    "StoreUnavailableError",
    "StoredPlan",
    "utc_now",
]

logger = logging.getLogger(__name__)

ID_LENGTH = 32
NAME_LENGTH = 200
STATE_LENGTH = 16
SQLITE_BUSY_TIMEOUT_S = 30


def utc_now() -> datetime:
    """The current time, timezone-aware UTC."""
    return datetime.now(UTC)


def _aware(moment: datetime) -> datetime:
    # SQLite returns naive datetimes; every stored time is UTC.
    return moment if moment.tzinfo is not None else moment.replace(tzinfo=UTC)


class _Base(DeclarativeBase):
    pass


class _PlanRow(_Base):
    __tablename__ = "plans"

    id: Mapped[str] = mapped_column(sa.String(ID_LENGTH), primary_key=True)
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True), index=True)
    parent_id: Mapped[str | None] = mapped_column(sa.String(ID_LENGTH), index=True)
    name: Mapped[str] = mapped_column(sa.String(NAME_LENGTH))
    status: Mapped[str] = mapped_column(sa.String(STATE_LENGTH))
    request_json: Mapped[str] = mapped_column(sa.Text)
    plan_json: Mapped[str] = mapped_column(sa.Text)


class _JobRow(_Base):
    __tablename__ = "jobs"

    id: Mapped[str] = mapped_column(sa.String(ID_LENGTH), primary_key=True)
    name: Mapped[str] = mapped_column(sa.String(NAME_LENGTH))
    state: Mapped[str] = mapped_column(sa.String(STATE_LENGTH), index=True)
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True), index=True)
    updated_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True))
    request_json: Mapped[str] = mapped_column(sa.Text)
    progress_json: Mapped[str | None] = mapped_column(sa.Text)
    plan_id: Mapped[str | None] = mapped_column(sa.String(ID_LENGTH))
    error_json: Mapped[str | None] = mapped_column(sa.Text)


class _KeyRow(_Base):
    __tablename__ = "api_keys"

    id: Mapped[str] = mapped_column(sa.String(ID_LENGTH), primary_key=True)
    name: Mapped[str] = mapped_column(sa.String(NAME_LENGTH))
    scope: Mapped[str] = mapped_column(sa.String(STATE_LENGTH))
    key_hash: Mapped[str] = mapped_column(sa.String(128), unique=True)
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True))
    revoked_at: Mapped[datetime | None] = mapped_column(sa.DateTime(timezone=True))


@dataclass(frozen=True)
class KeyRecord:
    """An API key as stored: never the key itself, only its keyed hash."""

    id: str
    name: str
    scope: str
    created_at: datetime
    revoked_at: datetime | None


def _key_record(row: _KeyRow) -> KeyRecord:
    revoked = None if row.revoked_at is None else _aware(row.revoked_at)
    return KeyRecord(row.id, row.name, row.scope, _aware(row.created_at), revoked)


class _ReplayRow(_Base):
    __tablename__ = "idempotency"

    key: Mapped[str] = mapped_column(sa.String(300), primary_key=True)
    body_hash: Mapped[str] = mapped_column(sa.String(64))
    status: Mapped[int] = mapped_column(sa.Integer)
    location: Mapped[str] = mapped_column(sa.String(300))
    body_json: Mapped[str] = mapped_column(sa.Text)
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True))


@dataclass(frozen=True)
class Replay:
    """The first answer to a POST made with an Idempotency-Key, kept to be given again."""

    body_hash: str
    status: int
    location: str
    body_json: str


@dataclass(frozen=True)
class StoredPlan:
    """A plan as stored, with the request that produced it."""

    plan: PlanOut
    request: PlanRequest


@dataclass(frozen=True)
class JobRecord:
    """A job as stored, with its request."""

    job: JobOut
    request: PlanRequest


def _make_engine(url: str) -> Engine:
    if url.startswith("sqlite"):
        connect_args: dict[str, Any] = {
            "check_same_thread": False,
            "timeout": SQLITE_BUSY_TIMEOUT_S,
        }
        return sa.create_engine(url, connect_args=connect_args)
    return sa.create_engine(url, pool_pre_ping=True)


class Store:
    """Plans and jobs in one SQL database named by a SQLAlchemy URL."""

    def __init__(self, url: str) -> None:
        self.url = url
        self._engine = _make_engine(url)
        self._sessions = sessionmaker(self._engine, expire_on_commit=False)
        self._schema_ready = False

    def ensure_schema(self) -> None:
        """Create missing tables; raises :class:`StoreUnavailableError` if unreachable."""
        try:
            _Base.metadata.create_all(self._engine)
        except sa.exc.SQLAlchemyError as exc:
            raise StoreUnavailableError(
                f"cannot reach the store: {exc.__class__.__name__}"
            ) from exc
        self._schema_ready = True

    def ping(self) -> None:
        """Check the database answers (and has its tables); raises StoreUnavailableError."""
        if not self._schema_ready:
            self.ensure_schema()
        try:
            with self._engine.connect() as conn:
                conn.execute(sa.text("SELECT 1"))
        except sa.exc.SQLAlchemyError as exc:
            raise StoreUnavailableError(
                f"cannot reach the store: {exc.__class__.__name__}"
            ) from exc

    def close(self) -> None:
        """Release every pooled connection."""
        self._engine.dispose()

    @contextmanager
    def _session(self) -> Iterator[Session]:
        try:
            with self._sessions() as session, session.begin():
                yield session
        except (sa.exc.OperationalError, sa.exc.InterfaceError) as exc:  # the server, not the SQL
            raise StoreUnavailableError(
                f"cannot reach the store: {exc.__class__.__name__}"
            ) from exc

    # ------------------------------------------------------------------------ plans

    def add_plan(self, plan: PlanOut, request: PlanRequest) -> None:
        """Store a new plan (its ``id`` must be set)."""
        if plan.id is None:
            raise ValueError("plan.id is None; only identified plans are stored")
        row = _PlanRow(
            id=plan.id,
            created_at=plan.created_at,
            parent_id=plan.parent_id,
            name=plan.name,
            status=plan.status.value,
            request_json=request.model_dump_json(),
            plan_json=plan.model_dump_json(),
        )
        with self._session() as session:
            session.add(row)

    def get_plan(self, plan_id: str) -> StoredPlan | None:
        """The stored plan with this id, or ``None``."""
        with self._session() as session:
            row = session.get(_PlanRow, plan_id)
            if row is None:
                return None
            return StoredPlan(
                plan=PlanOut.model_validate_json(row.plan_json),
                request=PlanRequest.model_validate_json(row.request_json),
            )

    def list_plans(self, offset: int, limit: int) -> tuple[list[PlanListItem], int]:
        """A page of plans, newest first, and the total count."""
        query = (
            sa.select(
                _PlanRow.id, _PlanRow.name, _PlanRow.created_at, _PlanRow.parent_id, _PlanRow.status
            )
            .order_by(_PlanRow.created_at.desc(), _PlanRow.id)
            .offset(offset)
            .limit(limit)
        )
        with self._session() as session:
            total = session.scalar(sa.select(sa.func.count()).select_from(_PlanRow)) or 0
            items = [
                PlanListItem(
                    id=r.id,
                    name=r.name,
                    created_at=_aware(r.created_at),
                    parent_id=r.parent_id,
                    status=r.status,
                )
                for r in session.execute(query)
            ]
        return items, total

    # ------------------------------------------------------------------------ jobs

    def add_job(self, job_id: str, request: PlanRequest) -> JobOut:
        """Store a new queued job."""
        now = utc_now()
        row = _JobRow(
            id=job_id,
            name=request.name,
            state=JobState.QUEUED.value,
            created_at=now,
            updated_at=now,
            request_json=request.model_dump_json(),
            progress_json=None,
            plan_id=None,
            error_json=None,
        )
        with self._session() as session:
            session.add(row)
            return _job_out(row)

    def get_job(self, job_id: str) -> JobRecord | None:
        """The job with this id, or ``None``."""
        with self._session() as session:
            row = session.get(_JobRow, job_id)
            if row is None:
                return None
            return JobRecord(_job_out(row), PlanRequest.model_validate_json(row.request_json))

    def update_job(
        self,
        job_id: str,
        *,
        state: JobState | None = None,
        progress: JobProgress | None = None,
        plan_id: str | None = None,
        error: dict[str, Any] | None = None,
    ) -> None:
        """Change a job's state, progress, plan or error (only the given ones)."""
        values: dict[str, Any] = {"updated_at": utc_now()}
        if state is not None:
            values["state"] = state.value
        if progress is not None:
            values["progress_json"] = progress.model_dump_json()
        if plan_id is not None:
            values["plan_id"] = plan_id
        if error is not None:
            values["error_json"] = json.dumps(error)
        with self._session() as session:
            session.execute(sa.update(_JobRow).where(_JobRow.id == job_id).values(**values))

    def unfinished_jobs(self) -> list[str]:
        """Ids of jobs still queued or running, oldest first (to requeue after a restart)."""
        states = [JobState.QUEUED.value, JobState.RUNNING.value]
        query = sa.select(_JobRow.id).where(_JobRow.state.in_(states)).order_by(_JobRow.created_at)
        with self._session() as session:
            return list(session.scalars(query))

    def count_jobs(self, state: JobState) -> int:
        """How many jobs are in ``state``."""
        query = sa.select(sa.func.count()).select_from(_JobRow).where(_JobRow.state == state.value)
        with self._session() as session:
            return int(session.scalar(query) or 0)

    # ------------------------------------------------------------------------ idempotency

    def find_replay(self, key: str) -> Replay | None:
        """The answer first given for this Idempotency-Key (route-qualified), or None."""
        with self._session() as session:
            row = session.get(_ReplayRow, key)
            if row is None:
                return None
            return Replay(row.body_hash, row.status, row.location, row.body_json)

    def add_replay(self, key: str, replay: Replay) -> Replay:
        """Keep the answer for this key; when another request kept one first, that one."""
        row = _ReplayRow(
            key=key,
            body_hash=replay.body_hash,
            status=replay.status,
            location=replay.location,
            body_json=replay.body_json,
            created_at=utc_now(),
        )
        try:
            with self._session() as session:
                session.add(row)
        except sa.exc.IntegrityError:
            first = self.find_replay(key)
            if first is not None:
                return first
            raise
        return replay

    # ------------------------------------------------------------------------ API keys

    def add_key(self, key_id: str, name: str, scope: str, key_hash: str) -> KeyRecord:
        """Store a new key's hash (the key itself is never stored)."""
        row = _KeyRow(id=key_id, name=name, scope=scope, key_hash=key_hash, created_at=utc_now())
        with self._session() as session:
            session.add(row)
        return _key_record(row)

    def list_keys(self) -> list[KeyRecord]:
        """Every key, oldest first, revoked ones included."""
        with self._session() as session:
            rows = session.scalars(sa.select(_KeyRow).order_by(_KeyRow.created_at)).all()
            return [_key_record(r) for r in rows]

    def revoke_key(self, key_id: str) -> bool:
        """Revoke a key; False when there is no such key or it was revoked already."""
        with self._session() as session:
            row = session.get(_KeyRow, key_id)
            if row is None or row.revoked_at is not None:
                return False
            row.revoked_at = utc_now()
            return True

    def find_key(self, key_hash: str) -> KeyRecord | None:
        """The live (not revoked) key with this hash, or None."""
        with self._session() as session:
            row = session.scalars(
                sa.select(_KeyRow).where(_KeyRow.key_hash == key_hash, _KeyRow.revoked_at.is_(None))
            ).first()
            return None if row is None else _key_record(row)

    def has_keys(self) -> bool:
        """Whether any live key exists (without one the service runs open)."""
        with self._session() as session:
            query = sa.select(sa.func.count()).select_from(_KeyRow)
            return bool(session.scalar(query.where(_KeyRow.revoked_at.is_(None))))


def _job_out(row: _JobRow) -> JobOut:
    progress = (
        None if row.progress_json is None else JobProgress.model_validate_json(row.progress_json)
    )
    return JobOut(
        id=row.id,
        name=row.name,
        state=JobState(row.state),
        created_at=_aware(row.created_at),
        updated_at=_aware(row.updated_at),
        progress=progress,
        plan_id=row.plan_id,
        plan_url=None if row.plan_id is None else f"/v1/plans/{row.plan_id}",
        error=None if row.error_json is None else json.loads(row.error_json),
    )
