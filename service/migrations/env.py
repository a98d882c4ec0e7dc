"""Alembic's environment: runs the revisions on the connection :mod:`service.migrations` hands
over in ``config.attributes["connection"]``, or, for the developer's ``alembic`` command, on
``BANDWRIGHT_DATABASE_URL``.  Batch mode everywhere, so a revision works on SQLite (which
rebuilds a table to alter it) and on PostgreSQL (plain ``ALTER TABLE``) alike."""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context

from service.migrations import COMPARE_OPTIONS
from service.settings import Settings
from service.tables import METADATA


def _run(connection: sa.Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=METADATA,
        render_as_batch=True,
        **COMPARE_OPTIONS,
    )
    with context.begin_transaction():
        context.run_migrations()


def _main() -> None:
    if context.is_offline_mode():
        raise SystemExit("offline (--sql) migrations are not supported: run them on a database")
    given = context.config.attributes.get("connection")
    if given is not None:
        _run(given)
        return
    engine = sa.create_engine(Settings().database_url, poolclass=sa.pool.NullPool)
    try:
        with engine.connect() as connection:
            _run(connection)
    finally:
        engine.dispose()


_main()
