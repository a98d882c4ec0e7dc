"""Plans, jobs, API keys and idempotency replays: the tables as they were before migrations.

The same tables, columns, indexes and constraints ``create_all`` made from the models of commit
e3992df, so a database made that way is stamped with this revision and upgraded from here.

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0001"
down_revision: str | Sequence[str] | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

ID = sa.String(32)
NAME = sa.String(200)
STATE = sa.String(16)
MOMENT = sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "plans",
        sa.Column("id", ID, primary_key=True),
        sa.Column("created_at", MOMENT, nullable=False),
        sa.Column("parent_id", ID, nullable=True),
        sa.Column("name", NAME, nullable=False),
        sa.Column("status", STATE, nullable=False),
        sa.Column("request_json", sa.Text(), nullable=False),
        sa.Column("plan_json", sa.Text(), nullable=False),
    )
    op.create_index("ix_plans_created_at", "plans", ["created_at"])
    op.create_index("ix_plans_parent_id", "plans", ["parent_id"])
    op.create_table(
        "jobs",
        sa.Column("id", ID, primary_key=True),
        sa.Column("name", NAME, nullable=False),
        sa.Column("state", STATE, nullable=False),
        sa.Column("created_at", MOMENT, nullable=False),
        sa.Column("updated_at", MOMENT, nullable=False),
        sa.Column("request_json", sa.Text(), nullable=False),
        sa.Column("progress_json", sa.Text(), nullable=True),
        sa.Column("plan_id", ID, nullable=True),
        sa.Column("error_json", sa.Text(), nullable=True),
    )
    op.create_index("ix_jobs_state", "jobs", ["state"])
    op.create_index("ix_jobs_created_at", "jobs", ["created_at"])
    op.create_table(
        "api_keys",
        sa.Column("id", ID, primary_key=True),
        sa.Column("name", NAME, nullable=False),
        sa.Column("scope", STATE, nullable=False),
        sa.Column("key_hash", sa.String(128), nullable=False),
        sa.Column("created_at", MOMENT, nullable=False),
        sa.Column("revoked_at", MOMENT, nullable=True),
        sa.UniqueConstraint("key_hash"),  # unnamed, as create_all made it
    )
    op.create_table(
        "idempotency",
        sa.Column("key", sa.String(300), primary_key=True),
        sa.Column("body_hash", sa.String(64), nullable=False),
        sa.Column("status", sa.Integer(), nullable=False),
        sa.Column("location", sa.String(300), nullable=False),
        sa.Column("body_json", sa.Text(), nullable=False),
        sa.Column("created_at", MOMENT, nullable=False),
    )


def downgrade() -> None:
    op.drop_table("idempotency")
    op.drop_table("api_keys")
    op.drop_index("ix_jobs_created_at", table_name="jobs")
    op.drop_index("ix_jobs_state", table_name="jobs")
    op.drop_table("jobs")
    op.drop_index("ix_plans_parent_id", table_name="plans")
    op.drop_index("ix_plans_created_at", table_name="plans")
    op.drop_table("plans")
