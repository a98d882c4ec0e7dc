"""Jobs held on leases, one plan per job, and batches (what commit 2a3f214 added).

``plans.job_id`` (unique, nullable); on ``jobs`` the holder (``owner``, ``lease_until``), the
attempts (not null, 0 for the rows already there), when a queue was given the job
(``sent_at``), the key that submitted it and its batch; the ``batches`` table.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | Sequence[str] | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

ID = sa.String(32)
MOMENT = sa.DateTime(timezone=True)
PLANS_JOB_ID_UNIQUE = "plans_job_id_key"  # the name PostgreSQL gave it under create_all


def upgrade() -> None:
    with op.batch_alter_table("plans") as plans:
        plans.add_column(sa.Column("job_id", ID, nullable=True))
        plans.create_unique_constraint(PLANS_JOB_ID_UNIQUE, ["job_id"])
    with op.batch_alter_table("jobs") as jobs:
        jobs.add_column(sa.Column("owner", sa.String(200), nullable=True))
        jobs.add_column(sa.Column("lease_until", MOMENT, nullable=True))
        jobs.add_column(
            sa.Column("attempts", sa.Integer(), nullable=False, server_default=sa.text("0"))
        )
        jobs.add_column(sa.Column("sent_at", MOMENT, nullable=True))
        jobs.add_column(sa.Column("key_id", ID, nullable=True))
        jobs.add_column(sa.Column("batch_id", ID, nullable=True))
        jobs.add_column(sa.Column("batch_position", sa.Integer(), nullable=True))
        jobs.create_index("ix_jobs_lease_until", ["lease_until"])
        jobs.create_index("ix_jobs_key_id", ["key_id"])
        jobs.create_index("ix_jobs_batch_id", ["batch_id"])
    op.create_table(
        "batches",
        sa.Column("id", ID, primary_key=True),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("created_at", MOMENT, nullable=False),
        sa.Column("size", sa.Integer(), nullable=False),
        sa.Column("key_id", ID, nullable=True),
    )
    op.create_index("ix_batches_created_at", "batches", ["created_at"])


def downgrade() -> None:
    op.drop_index("ix_batches_created_at", table_name="batches")
    op.drop_table("batches")
    with op.batch_alter_table("jobs") as jobs:
        jobs.drop_index("ix_jobs_batch_id")
        jobs.drop_index("ix_jobs_key_id")
        jobs.drop_index("ix_jobs_lease_until")
        for column in (
            "batch_position",
            "batch_id",
            "key_id",
            "sent_at",
            "attempts",
            "lease_until",
            "owner",
        ):
            jobs.drop_column(column)
    with op.batch_alter_table("plans") as plans:
        plans.drop_constraint(PLANS_JOB_ID_UNIQUE, type_="unique")
        plans.drop_column("job_id")
