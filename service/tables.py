"""The store's tables as SQLAlchemy 2 declarative models: this version's schema for the code.

The tables in a database are made and changed by the migrations in :mod:`service.migrations`,
never from these models directly; ``tests/test_migrations.py`` checks that a database at the
newest revision has exactly these tables, columns, indexes and constraints, so a model changed
without a new revision fails it (DEVELOPERS.md, "Schema migrations").
"""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

__all__ = ["METADATA", "BatchRow", "JobRow", "KeyRow", "PlanRow", "ReplayRow"]

ID_LENGTH = 32
NAME_LENGTH = 200
STATE_LENGTH = 16
OWNER_LENGTH = 200


class Base(DeclarativeBase):
    pass


class PlanRow(Base):
    __tablename__ = "plans"

    id: Mapped[str] = mapped_column(sa.String(ID_LENGTH), primary_key=True)
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True), index=True)
    parent_id: Mapped[str | None] = mapped_column(sa.String(ID_LENGTH), index=True)
    name: Mapped[str] = mapped_column(sa.String(NAME_LENGTH))
    status: Mapped[str] = mapped_column(sa.String(STATE_LENGTH))
    request_json: Mapped[str] = mapped_column(sa.Text)
    plan_json: Mapped[str] = mapped_column(sa.Text)
    job_id: Mapped[str | None] = mapped_column(sa.String(ID_LENGTH), unique=True)


class JobRow(Base):
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
    owner: Mapped[str | None] = mapped_column(sa.String(OWNER_LENGTH))
    lease_until: Mapped[datetime | None] = mapped_column(sa.DateTime(timezone=True), index=True)
    attempts: Mapped[int] = mapped_column(sa.Integer, default=0, server_default=sa.text("0"))
    sent_at: Mapped[datetime | None] = mapped_column(sa.DateTime(timezone=True))
    key_id: Mapped[str | None] = mapped_column(sa.String(ID_LENGTH), index=True)
    batch_id: Mapped[str | None] = mapped_column(sa.String(ID_LENGTH), index=True)
    batch_position: Mapped[int | None] = mapped_column(sa.Integer)


class BatchRow(Base):
    __tablename__ = "batches"

    id: Mapped[str] = mapped_column(sa.String(ID_LENGTH), primary_key=True)
    name: Mapped[str] = mapped_column(sa.String(NAME_LENGTH))
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True), index=True)
    size: Mapped[int] = mapped_column(sa.Integer)
    key_id: Mapped[str | None] = mapped_column(sa.String(ID_LENGTH))


class KeyRow(Base):
    __tablename__ = "api_keys"

    id: Mapped[str] = mapped_column(sa.String(ID_LENGTH), primary_key=True)
    name: Mapped[str] = mapped_column(sa.String(NAME_LENGTH))
    scope: Mapped[str] = mapped_column(sa.String(STATE_LENGTH))
    key_hash: Mapped[str] = mapped_column(sa.String(128), unique=True)
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True))
    revoked_at: Mapped[datetime | None] = mapped_column(sa.DateTime(timezone=True))


class ReplayRow(Base):
    __tablename__ = "idempotency"

    key: Mapped[str] = mapped_column(sa.String(300), primary_key=True)
    body_hash: Mapped[str] = mapped_column(sa.String(64))
    status: Mapped[int] = mapped_column(sa.Integer)
    location: Mapped[str] = mapped_column(sa.String(300))
    body_json: Mapped[str] = mapped_column(sa.Text)
    created_at: Mapped[datetime] = mapped_column(sa.DateTime(timezone=True))


METADATA: sa.MetaData = Base.metadata
"""Every table of the store, as this version's code expects it (Alembic's autogenerate target)."""
