"""Schema migrations (Alembic): the revisions in ``versions/`` and how they are run.

Alembic is configured here in code, from the package (``script_location``
``service:migrations``); no ``alembic.ini`` is needed at run time.  The migrations run on a
connection this module hands to ``env.py``.

* :func:`schema_state` reads a database's revision and compares it with this version's head.
* :func:`upgrade` brings a database to head.  A database whose tables were made before
  migrations existed (``create_all``, no ``alembic_version`` table) is recognised by its tables
  and columns, stamped with the revision that made the same layout, then upgraded.  One upgrade
  runs at a time: per process (Alembic's command context is global) and, on PostgreSQL, per
  database (an advisory lock held by the upgrade's transaction).

The embedded SQLite store runs :func:`upgrade` itself at start; any other database is upgraded
once per release by ``bandwright db upgrade`` (:mod:`service.cli`), never by the replicas.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory

__all__ = [
    "COMPARE_OPTIONS",
    "MigrationError",
    "SchemaState",
    "Upgrade",
    "alembic_config",
    "head_revision",
    "schema_state",
    "upgrade",
]

logger = logging.getLogger(__name__)

SCRIPT_LOCATION = str(Path(__file__).resolve().parent)
POSTGRES_LOCK_KEY = 0x62616E64  # pg_advisory_xact_lock: one `db upgrade` at a time
VERSION_TABLE = "alembic_version"
_ONE_AT_A_TIME = threading.RLock()  # Alembic keeps a running command's context in module globals

COMPARE_OPTIONS: Mapping[str, Any] = {"compare_type": True, "compare_server_default": True}
"""How autogenerate (and the test that models and migrations agree) compares a database with
the models: column types and server defaults too, not only tables, columns and indexes."""

Layout = Mapping[str, frozenset[str]]
"""Table name → its column names."""


class MigrationError(RuntimeError):
    """The database cannot be migrated as it stands (tables made by no known revision, or a
    revision this version does not know); the message says what was found."""


@dataclass(frozen=True)
class SchemaState:
    """A database's revision against this version's head.

    ``current`` is None when the database has no ``alembic_version`` table (empty, or made
    before migrations); ``known`` is False for a revision this version does not have (a newer
    release migrated the database).
    """

    current: str | None
    head: str
    known: bool

    @property
    def at_head(self) -> bool:
        return self.current == self.head

    @property
    def behind(self) -> bool:
        """Needs ``bandwright db upgrade`` before this version can use it."""
        return self.known and not self.at_head


@dataclass(frozen=True)
class Upgrade:
    """What :func:`upgrade` did: ``before`` → ``after``; ``stamped`` is the revision a database
    made before migrations was recognised as (None otherwise)."""

    before: str | None
    stamped: str | None
    after: str


def alembic_config(connection: sa.Connection | None = None) -> Config:
    """Alembic's configuration for this package, running on ``connection`` when given
    (``env.py`` otherwise connects to ``BANDWRIGHT_DATABASE_URL``)."""
    config = Config()
    config.set_main_option("script_location", SCRIPT_LOCATION)
    if connection is not None:
        config.attributes["connection"] = connection
    return config


@lru_cache(maxsize=1)
def _script() -> ScriptDirectory:
    return ScriptDirectory.from_config(alembic_config())


def head_revision() -> str:
    """The newest revision of this version."""
    head = _script().get_current_head()
    if head is None:
        raise MigrationError("no migration revisions are installed")
    return head


def _revisions_oldest_first() -> list[str]:
    return [script.revision for script in reversed(list(_script().walk_revisions()))]


def _current(connection: sa.Connection) -> str | None:
    return MigrationContext.configure(connection).get_current_revision()


def schema_state(engine: sa.Engine) -> SchemaState:
    """The database's revision against head; raises SQLAlchemy's errors when unreachable."""
    with engine.connect() as connection:
        current = _current(connection)
    known = current is None or current in _revisions_oldest_first()
    return SchemaState(current, head_revision(), known)


def upgrade(engine: sa.Engine) -> Upgrade:
    """Bring the database to head in one transaction (on PostgreSQL, one upgrade at a time).

    Raises :class:`MigrationError` for a database this version cannot migrate, and SQLAlchemy's
    errors when the database does not answer.
    """
    with _ONE_AT_A_TIME, engine.begin() as connection:
        if connection.dialect.name == "postgresql":
            connection.execute(sa.select(sa.func.pg_advisory_xact_lock(POSTGRES_LOCK_KEY)))
        before = _current(connection)
        if before is not None and before not in _revisions_oldest_first():
            raise MigrationError(
                f"the database is at revision {before!r}, which this version does not know "
                f"(its newest is {head_revision()!r}): was it migrated by a newer release?"
            )
        stamped = _stamp_premigration(connection) if before is None else None
        config = alembic_config(connection)
        command.upgrade(config, "head")
        after = _current(connection) or ""
    if before != after:
        logger.info("database migrated from %s to %s", before or stamped or "empty", after)
    return Upgrade(before, stamped, after)


def _stamp_premigration(connection: sa.Connection) -> str | None:
    """Stamp a database made before migrations with the revision whose tables it has; None
    for a database without any of our tables."""
    found = _layout(connection, _known_tables())
    if not found:
        return None
    for revision, layout in _revision_layouts().items():
        if found == layout:
            logger.warning(
                "tables made before migrations match revision %s: stamped, then upgraded", revision
            )
            command.stamp(alembic_config(connection), revision)
            return revision
    raise MigrationError(
        "the database has tables made before migrations that match no revision "
        f"({_describe(found)}); compare them with service/migrations/versions/ and stamp "
        "the matching revision by hand"
    )


def _layout(connection: sa.Connection, tables: frozenset[str]) -> dict[str, frozenset[str]]:
    inspector = sa.inspect(connection)
    return {
        table: frozenset(column["name"] for column in inspector.get_columns(table))
        for table in inspector.get_table_names()
        if table in tables
    }


@lru_cache(maxsize=1)
def _revision_layouts() -> dict[str, Layout]:
    """The tables and columns each revision leaves, read from the migrations themselves run on
    an in-memory SQLite database."""
    layouts: dict[str, Layout] = {}
    engine = sa.create_engine("sqlite://")
    with _ONE_AT_A_TIME, engine.begin() as connection:
        for revision in _revisions_oldest_first():
            command.upgrade(alembic_config(connection), revision)
            every_table = frozenset(sa.inspect(connection).get_table_names()) - {VERSION_TABLE}
            layouts[revision] = _layout(connection, every_table)
    engine.dispose()
    return layouts


def _known_tables() -> frozenset[str]:
    return frozenset().union(*(layout.keys() for layout in _revision_layouts().values()))


def _describe(layout: Layout) -> str:
    return "; ".join(f"{table}: {', '.join(sorted(layout[table]))}" for table in sorted(layout))
