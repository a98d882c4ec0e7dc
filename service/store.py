"""Plan and job persistence with SQLAlchemy 2: a SQLite file by default, PostgreSQL by URL.

Plans are immutable: written once, never updated.  A replan is a new plan whose ``parent_id``
names the old one.  JSON documents are stored as text, which every SQL database holds the same
way, so the schema stays portable.  Every method opens its own short session, so one
:class:`Store` may be shared by the event loop's thread pool and the job threads.

The tables are modelled in :mod:`service.tables` and made by the migrations in
:mod:`service.migrations`; :meth:`Store.ensure_schema` is where the two meet.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any, cast

import sqlalchemy as sa
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session, sessionmaker

from service import migrations
from service.errors import SchemaNotReadyError, StoreUnavailableError
from service.legacy import upgrade_plan_document
from service.schemas import JobOut, JobProgress, JobState, PlanListItem, PlanOut, PlanRequest
from service.tables import BatchRow, JobRow, KeyRow, PlanRow, ReplayRow

__all__ = [
    "BatchEntry",
    "BatchRecord",
    "JobCapError",
    "JobRecord",
    "KeyRecord",
    "Replay",
    "Store",
    "StoreUnavailableError",
    "StoredPlan",
    "utc_now",
]

logger = logging.getLogger(__name__)

UNFINISHED = ("queued", "running")
SQLITE_BUSY_TIMEOUT_S = 30


def utc_now() -> datetime:
    """The current time, timezone-aware UTC."""
    return datetime.now(UTC)


def _aware(moment: datetime) -> datetime:
    # SQLite returns naive datetimes; every stored time is UTC.
    return moment if moment.tzinfo is not None else moment.replace(tzinfo=UTC)


@dataclass(frozen=True)
class KeyRecord:
    """An API key as stored: never the key itself, only its keyed hash."""

    id: str
    name: str
    scope: str
    created_at: datetime
    revoked_at: datetime | None


def _key_record(row: KeyRow) -> KeyRecord:
    revoked = None if row.revoked_at is None else _aware(row.revoked_at)
    return KeyRecord(row.id, row.name, row.scope, _aware(row.created_at), revoked)


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


class JobCapError(Exception):
    """The key already holds ``held`` queued or running jobs, its cap being ``cap``."""

    def __init__(self, held: int, cap: int) -> None:
        super().__init__(f"{held} queued or running jobs held; the cap is {cap}")
        self.held = held
        self.cap = cap


@dataclass(frozen=True)
class BatchEntry:
    """One job of a batch, with its plan's status and unserved count once it is done."""

    job: JobOut
    position: int
    plan_status: str | None
    unserved_count: int | None


@dataclass(frozen=True)
class BatchRecord:
    """A batch as stored, with its jobs in item order."""

    id: str
    name: str
    created_at: datetime
    size: int
    entries: list[BatchEntry]


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
        """Make sure the tables are this version's (the app calls this at start).

        The embedded SQLite store migrates itself to the newest revision.  Any other database
        is only checked, never migrated by the replicas (``bandwright db upgrade`` does that,
        once per release): behind the newest revision it raises :class:`SchemaNotReadyError`.
        A database a newer release migrated is used as it is.  Raises
        :class:`StoreUnavailableError` if the database does not answer.
        """
        state = self.schema_state()
        if state.behind and self._engine.dialect.name == "sqlite":
            self.upgrade_schema()
        elif state.behind:
            raise SchemaNotReadyError(_behind(state))
        elif not state.known:
            logger.warning(
                "the database is at revision %s, newer than this version's %s: used as it is",
                state.current,
                state.head,
            )
        self._schema_ready = True

    def schema_state(self) -> migrations.SchemaState:
        """The database's migration revision against this version's newest."""
        with self._schema_errors():
            return migrations.schema_state(self._engine)

    def upgrade_schema(self) -> migrations.Upgrade:
        """Migrate the database to the newest revision (``bandwright db upgrade``, tests)."""
        with self._schema_errors():
            return migrations.upgrade(self._engine)

    @contextmanager
    def _schema_errors(self) -> Iterator[None]:
        try:
            yield
        except migrations.MigrationError as exc:
            raise SchemaNotReadyError(str(exc)) from exc
        except (sa.exc.OperationalError, sa.exc.InterfaceError) as exc:  # the server, not the SQL
            raise StoreUnavailableError(
                f"cannot reach the store: {exc.__class__.__name__}"
            ) from exc
        except sa.exc.SQLAlchemyError as exc:  # e.g. no permission to read or change the schema
            reason = str(getattr(exc, "orig", None) or exc).splitlines()[0]
            raise SchemaNotReadyError(
                f"the schema could not be read or migrated: {exc.__class__.__name__}: {reason}"
            ) from exc

    def ping(self) -> None:
        """Check the database answers with this version's schema (:meth:`ensure_schema` until it
        has once); raises :class:`StoreUnavailableError` or :class:`SchemaNotReadyError`."""
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
        with self._session() as session:
            session.add(_plan_row(plan, request, None))

    def get_plan(self, plan_id: str) -> StoredPlan | None:
        """The stored plan with this id, or ``None``; a plan stored by an earlier version is
        read with today's field names (:func:`~service.legacy.upgrade_plan_document`)."""
        with self._session() as session:
            row = session.get(PlanRow, plan_id)
            if row is None:
                return None
            request = PlanRequest.model_validate_json(row.request_json)
            document = upgrade_plan_document(json.loads(row.plan_json), request)
            return StoredPlan(plan=PlanOut.model_validate(document), request=request)

    def list_plans(self, offset: int, limit: int) -> tuple[list[PlanListItem], int]:
        """A page of plans, newest first, and the total count."""
        query = (
            sa.select(
                PlanRow.id, PlanRow.name, PlanRow.created_at, PlanRow.parent_id, PlanRow.status
            )
            .order_by(PlanRow.created_at.desc(), PlanRow.id)
            .offset(offset)
            .limit(limit)
        )
        with self._session() as session:
            total = session.scalar(sa.select(sa.func.count()).select_from(PlanRow)) or 0
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
    #
    # A job's row is the truth about it; a queue only carries its id.  The process running a job
    # (or, in-process, holding it queued) is its ``owner`` and keeps a lease on it
    # (``lease_until``).  A job whose lease ran out is adopted again by any live process
    # (:meth:`adopt_expired`), so a killed worker strands nothing; :meth:`claim_job` and
    # :meth:`finish_job` are compare-and-set, and ``plans.job_id`` is unique, so a job that runs
    # twice still gives one plan.

    def add_job(
        self,
        job_id: str,
        request: PlanRequest,
        *,
        owner: str | None = None,
        lease_s: float | None = None,
        key_id: str | None = None,
        batch: tuple[str, int] | None = None,
        key_cap: int | None = None,
    ) -> JobOut:
        """Store a new queued job, held by ``owner`` for ``lease_s`` (in-process queue) or by
        nobody (a distributed queue carries it).  With ``key_cap``, raises
        :class:`JobCapError` when ``key_id`` already holds that many queued or running jobs:
        counted and inserted in one transaction with the key's row locked, so submissions
        racing on one key never pass the cap."""
        now = utc_now()
        row = JobRow(
            id=job_id,
            name=request.name,
            state=JobState.QUEUED.value,
            created_at=now,
            updated_at=now,
            request_json=request.model_dump_json(),
            owner=owner,
            lease_until=None if lease_s is None else now + timedelta(seconds=lease_s),
            attempts=0,
            key_id=key_id,
            batch_id=None if batch is None else batch[0],
            batch_position=None if batch is None else batch[1],
        )
        with self._session() as session:
            if key_id is not None and key_cap is not None:
                # A write to the key's row first: it locks that row on PostgreSQL and takes
                # SQLite's write lock, so one submission per key counts and inserts at a time.
                session.execute(
                    sa.update(KeyRow).where(KeyRow.id == key_id).values(name=KeyRow.name)
                )
                held = session.scalar(
                    sa.select(sa.func.count())
                    .select_from(JobRow)
                    .where(JobRow.key_id == key_id, JobRow.state.in_(UNFINISHED))
                )
                if (held or 0) >= key_cap:
                    raise JobCapError(int(held or 0), key_cap)
            session.add(row)
            return _job_out(row)

    def get_job(self, job_id: str) -> JobRecord | None:
        """The job with this id, or ``None``."""
        with self._session() as session:
            row = session.get(JobRow, job_id)
            if row is None:
                return None
            return JobRecord(_job_out(row), PlanRequest.model_validate_json(row.request_json))

    def claim_job(self, job_id: str, owner: str, lease_s: float) -> JobRecord | None:
        """Start the job for ``owner``: it must be queued (and not held by another live owner)
        or running on an expired lease.  None when someone else has it or it has ended."""
        now = utc_now()
        free = sa.or_(JobRow.owner.is_(None), JobRow.owner == owner, JobRow.lease_until < now)
        claimable = sa.or_(
            sa.and_(JobRow.state == JobState.QUEUED.value, free),
            sa.and_(JobRow.state == JobState.RUNNING.value, JobRow.lease_until < now),
        )
        values = {
            "state": JobState.RUNNING.value,
            "owner": owner,
            "lease_until": now + timedelta(seconds=lease_s),
            "attempts": JobRow.attempts + 1,
            "updated_at": now,
        }
        with self._session() as session:
            claimed = session.execute(
                sa.update(JobRow).where(JobRow.id == job_id, claimable).values(**values)
            )
            if _changed(claimed) != 1:
                return None
        return self.get_job(job_id)

    def renew_leases(self, owner: str, job_ids: Iterable[str], lease_s: float) -> set[str]:
        """Extend ``owner``'s lease on these jobs; returns the ones it still holds (a job
        cancelled, finished or adopted by another process is not among them)."""
        ids = list(job_ids)
        if not ids:
            return set()
        held = sa.and_(JobRow.id.in_(ids), JobRow.owner == owner, JobRow.state.in_(UNFINISHED))
        until = utc_now() + timedelta(seconds=lease_s)
        with self._session() as session:
            session.execute(sa.update(JobRow).where(held).values(lease_until=until))
            return set(session.scalars(sa.select(JobRow.id).where(held)))

    def record_progress(self, job_id: str, owner: str, progress: JobProgress) -> bool:
        """Store the running job's latest progress; False when ``owner`` no longer runs it."""
        running = sa.and_(
            JobRow.id == job_id, JobRow.owner == owner, JobRow.state == JobState.RUNNING.value
        )
        values = {"progress_json": progress.model_dump_json(), "updated_at": utc_now()}
        with self._session() as session:
            return bool(
                _changed(session.execute(sa.update(JobRow).where(running).values(**values)))
            )

    def finish_job(self, job_id: str, plan: PlanOut, request: PlanRequest) -> str | None:
        """Store the job's plan and mark it done, in one transaction.  When another attempt
        stored a plan first, the job keeps that one (its id is returned); None when the job was
        cancelled meanwhile (nothing is stored)."""
        if plan.id is None:
            raise ValueError("plan.id is None; only identified plans are stored")
        try:
            with self._session() as session:
                row = session.get(JobRow, job_id, with_for_update=True)
                if row is None or row.state == JobState.CANCELLED.value:
                    return None
                if row.state == JobState.DONE.value:
                    return row.plan_id
                session.add(_plan_row(plan, request, job_id))
                session.flush()
                _mark_done(row, plan.id)
                return plan.id
        except sa.exc.IntegrityError:  # another attempt stored this job's plan first
            with self._session() as session:
                first = session.scalar(sa.select(PlanRow.id).where(PlanRow.job_id == job_id))
                row = session.get(JobRow, job_id, with_for_update=True)
                if row is not None and first is not None and row.state in UNFINISHED:
                    _mark_done(row, first)
                return first

    def fail_job(self, job_id: str, owner: str, error: dict[str, Any]) -> bool:
        """Mark the job failed with a problem document, if ``owner`` still runs it."""
        failed = JobState.FAILED.value
        return self._end_held(job_id, owner, state=failed, error_json=json.dumps(error))

    def release_job(self, job_id: str, owner: str) -> bool:
        """Give a job ``owner`` holds back to the queue (its process is stopping)."""
        values = {
            "state": JobState.QUEUED.value,
            "owner": None,
            "lease_until": None,
            "sent_at": None,
        }
        return self._end_held(job_id, owner, **values)

    def _end_held(self, job_id: str, holder: str, **values: Any) -> bool:
        held = sa.and_(JobRow.id == job_id, JobRow.owner == holder, JobRow.state.in_(UNFINISHED))
        with self._session() as session:
            changed = session.execute(
                sa.update(JobRow).where(held).values(updated_at=utc_now(), **values)
            )
            return bool(_changed(changed))

    def cancel_job(self, job_id: str) -> JobOut | None:
        """Cancel a queued or running job (its runner notices at its next lease renewal and
        stores nothing); the job as it now stands, or None when there is no such job."""
        unfinished = sa.and_(JobRow.id == job_id, JobRow.state.in_(UNFINISHED))
        values = {"state": JobState.CANCELLED.value, "lease_until": None, "updated_at": utc_now()}
        with self._session() as session:
            session.execute(sa.update(JobRow).where(unfinished).values(**values))
            row = session.get(JobRow, job_id)
            return None if row is None else _job_out(row)

    def adopt_jobs(
        self, owner: str | None, lease_s: float | None, *, unheld: bool = False, limit: int = 100
    ) -> list[str]:
        """Take over jobs whose holder stopped renewing their lease (and, with ``unheld``,
        queued jobs nobody holds or sent): they become queued again, held by ``owner`` for
        ``lease_s`` (in-process) or by nobody, to be sent to the queue again."""
        now = utc_now()
        adoptable = sa.and_(JobRow.state.in_(UNFINISHED), JobRow.lease_until < now)
        if unheld:
            free = sa.and_(
                JobRow.state == JobState.QUEUED.value,
                JobRow.owner.is_(None),
                JobRow.sent_at.is_(None),
            )
            adoptable = sa.or_(adoptable, free)
        until = None if lease_s is None else now + timedelta(seconds=lease_s)
        values = {
            "state": JobState.QUEUED.value,
            "owner": owner,
            "lease_until": until,
            "sent_at": None,
            "updated_at": now,
        }
        with self._session() as session:
            candidates = session.scalars(
                sa.select(JobRow.id).where(adoptable).order_by(JobRow.created_at).limit(limit)
            ).all()
        adopted = []
        for job_id in candidates:  # one compare-and-set each: two adopters never both win
            with self._session() as session:
                won = session.execute(
                    sa.update(JobRow).where(JobRow.id == job_id, adoptable).values(**values)
                )
                if _changed(won) == 1:
                    adopted.append(job_id)
        return adopted

    def unsent_jobs(self, older_than_s: float, limit: int = 100) -> list[str]:
        """Queued jobs nobody holds and no queue has been given (their sender stopped between
        storing and sending them), older than ``older_than_s``."""
        cutoff = utc_now() - timedelta(seconds=older_than_s)
        query = (
            sa.select(JobRow.id)
            .where(
                JobRow.state == JobState.QUEUED.value,
                JobRow.owner.is_(None),
                JobRow.sent_at.is_(None),
                JobRow.updated_at < cutoff,
            )
            .order_by(JobRow.created_at)
            .limit(limit)
        )
        with self._session() as session:
            return list(session.scalars(query))

    def mark_sent(self, job_id: str, sent: bool = True) -> bool:
        """Record that the job was handed to the queue (False: another process did it first).
        ``sent=False`` undoes it after a failed send."""
        if sent:
            where = sa.and_(JobRow.id == job_id, JobRow.sent_at.is_(None))
            value = utc_now()
        else:
            where, value = JobRow.id == job_id, None
        with self._session() as session:
            return bool(
                _changed(session.execute(sa.update(JobRow).where(where).values(sent_at=value)))
            )

    def count_jobs(self, state: JobState, *, key_id: str | None = None) -> int:
        """How many jobs are in ``state`` (only those submitted with ``key_id``, when given)."""
        query = sa.select(sa.func.count()).select_from(JobRow).where(JobRow.state == state.value)
        if key_id is not None:
            query = query.where(JobRow.key_id == key_id)
        with self._session() as session:
            return int(session.scalar(query) or 0)

    def job_owner(self, job_id: str) -> str | None:
        """The process holding the job now (``host:pid:tag``), if any."""
        with self._session() as session:
            return session.scalar(sa.select(JobRow.owner).where(JobRow.id == job_id))

    def count_plans(self) -> int:
        """How many plans are stored."""
        with self._session() as session:
            return int(session.scalar(sa.select(sa.func.count()).select_from(PlanRow)) or 0)

    def plans_of_job(self, job_id: str) -> list[str]:
        """Ids of the plans stored for this job (never more than one)."""
        with self._session() as session:
            return list(session.scalars(sa.select(PlanRow.id).where(PlanRow.job_id == job_id)))

    # ------------------------------------------------------------------------ batches

    def add_batch(self, batch_id: str, name: str, size: int, key_id: str | None) -> datetime:
        """Store a new batch (its jobs are added with ``batch=(batch_id, position)``)."""
        now = utc_now()
        row = BatchRow(id=batch_id, name=name, created_at=now, size=size, key_id=key_id)
        with self._session() as session:
            session.add(row)
        return now

    def get_batch(self, batch_id: str) -> BatchRecord | None:
        """The batch with its jobs in item order, each with its plan's status and unserved
        count once done; None when there is no such batch."""
        query = (
            sa.select(JobRow, PlanRow.status, PlanRow.plan_json)
            .outerjoin(PlanRow, PlanRow.id == JobRow.plan_id)
            .where(JobRow.batch_id == batch_id)
            .order_by(JobRow.batch_position)
        )
        with self._session() as session:
            batch = session.get(BatchRow, batch_id)
            if batch is None:
                return None
            items = []
            for job, status, plan_json in session.execute(query):
                unserved = None if plan_json is None else len(json.loads(plan_json)["unserved"])
                items.append(BatchEntry(_job_out(job), job.batch_position or 0, status, unserved))
            return BatchRecord(batch.id, batch.name, _aware(batch.created_at), batch.size, items)

    # ------------------------------------------------------------------------ idempotency

    def find_replay(self, key: str) -> Replay | None:
        """The answer first given for this Idempotency-Key (route-qualified), or None."""
        with self._session() as session:
            row = session.get(ReplayRow, key)
            if row is None:
                return None
            return Replay(row.body_hash, row.status, row.location, row.body_json)

    def add_replay(self, key: str, replay: Replay) -> Replay:
        """Keep the answer for this key; when another request kept one first, that one."""
        row = ReplayRow(
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
        row = KeyRow(id=key_id, name=name, scope=scope, key_hash=key_hash, created_at=utc_now())
        with self._session() as session:
            session.add(row)
        return _key_record(row)

    def list_keys(self) -> list[KeyRecord]:
        """Every key, oldest first, revoked ones included."""
        with self._session() as session:
            rows = session.scalars(sa.select(KeyRow).order_by(KeyRow.created_at)).all()
            return [_key_record(r) for r in rows]

    def revoke_key(self, key_id: str) -> bool:
        """Revoke a key; False when there is no such key or it was revoked already."""
        with self._session() as session:
            row = session.get(KeyRow, key_id)
            if row is None or row.revoked_at is not None:
                return False
            row.revoked_at = utc_now()
            return True

    def find_key(self, key_hash: str) -> KeyRecord | None:
        """The live (not revoked) key with this hash, or None."""
        with self._session() as session:
            row = session.scalars(
                sa.select(KeyRow).where(KeyRow.key_hash == key_hash, KeyRow.revoked_at.is_(None))
            ).first()
            return None if row is None else _key_record(row)

    def has_keys(self) -> bool:
        """Whether any live key exists (without one the service runs open)."""
        with self._session() as session:
            query = sa.select(sa.func.count()).select_from(KeyRow)
            return bool(session.scalar(query.where(KeyRow.revoked_at.is_(None))))


def _behind(state: migrations.SchemaState) -> str:
    found = state.current or "none (an empty database, or tables made before migrations)"
    return (
        f"the database's schema revision is {found}, behind this version's {state.head}: "
        "run `bandwright db upgrade` (once, before the replicas of a new release start)"
    )


def _changed(result: sa.Result[Any]) -> int:
    """Rows an UPDATE changed (every UPDATE result is a cursor result)."""
    return int(cast("sa.CursorResult[Any]", result).rowcount)


def _plan_row(plan: PlanOut, request: PlanRequest, job_id: str | None) -> PlanRow:
    return PlanRow(
        id=plan.id,
        created_at=plan.created_at,
        parent_id=plan.parent_id,
        name=plan.name,
        status=plan.status.value,
        request_json=request.model_dump_json(),
        plan_json=plan.model_dump_json(),
        job_id=job_id,
    )


def _mark_done(row: JobRow, plan_id: str) -> None:
    row.state = JobState.DONE.value
    row.plan_id = plan_id
    row.lease_until = None
    row.updated_at = utc_now()


def _job_out(row: JobRow) -> JobOut:
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
        attempts=row.attempts or 0,
        batch_id=row.batch_id,
    )
