"""Databases for the store tests: a SQLite file, or a fresh schema of the test PostgreSQL
database named by ``BANDWRIGHT_TEST_POSTGRES_URL`` (``.ci/run`` starts one and sets it; the
PostgreSQL half of a test is skipped without it).  Importable from every test directory
(``pythonpath`` in pyproject.toml)."""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
import sqlalchemy as sa

__all__ = ["BACKENDS", "POSTGRES_URL", "empty_database", "fresh_postgres_url"]

POSTGRES_URL = os.environ.get("BANDWRIGHT_TEST_POSTGRES_URL", "")
"""A PostgreSQL database for the store tests (``.ci/run`` starts one and sets it)."""

BACKENDS = ("sqlite", "postgres")
NO_POSTGRES = "BANDWRIGHT_TEST_POSTGRES_URL is not set (.ci/run sets it)"


def fresh_postgres_url() -> str:
    """A URL of the test PostgreSQL database whose ``search_path`` is a new, empty schema
    (the calling test is skipped when there is no test database)."""
    if not POSTGRES_URL:
        pytest.skip(NO_POSTGRES)
    schema = f"t{uuid.uuid4().hex[:12]}"
    engine = sa.create_engine(POSTGRES_URL)
    with engine.begin() as conn:
        conn.execute(sa.text(f"CREATE SCHEMA {schema}"))
    engine.dispose()
    separator = "&" if "?" in POSTGRES_URL else "?"
    return f"{POSTGRES_URL}{separator}options=-csearch_path%3D{schema}"


def _drop_schema(url: str) -> None:
    schema = url.rsplit("%3D", 1)[1]
    engine = sa.create_engine(POSTGRES_URL)
    with engine.begin() as conn:
        conn.execute(sa.text(f"DROP SCHEMA {schema} CASCADE"))
    engine.dispose()


@contextmanager
def empty_database(backend: str, directory: Path) -> Iterator[str]:
    """The URL of an empty database on ``backend`` ("sqlite": a file in ``directory``;
    "postgres": a fresh schema, dropped afterwards)."""
    if backend == "sqlite":
        yield f"sqlite:///{directory / 'store.db'}"
        return
    url = fresh_postgres_url()
    try:
        yield url
    finally:
        _drop_schema(url)
