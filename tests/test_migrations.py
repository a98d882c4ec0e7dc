"""Schema migrations, on SQLite and on PostgreSQL: the newest revision makes exactly the tables
the models declare, every revision goes down and up again, revision 0001 is the schema the
models had before migrations existed, and a database made then is recognised, stamped and
upgraded with its rows intact.  ``bandwright db upgrade|current`` on top.

The models of commit e3992df are copied below (``git show e3992df:service/store.py``): they are
what ``create_all`` made in every database before this change.
"""

from __future__ import annotations

import subprocess
import sys
import threading
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
import sqlalchemy as sa
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from db_support import BACKENDS, empty_database

from service.cli import ExitCode, main
from service.errors import SchemaNotReadyError
from service.migrations import COMPARE_OPTIONS, alembic_config, head_revision
from service.store import Store
from service.tables import METADATA

FIRST = "0001"
ID, NAME, STATE = sa.String(32), sa.String(200), sa.String(16)
MOMENT = sa.DateTime(timezone=True)
CREATED = datetime(2026, 11, 30, 8, 15, tzinfo=UTC)
PROCESS_TIMEOUT_S = 120
NEW_JOB_COLUMNS = ("owner", "lease_until", "sent_at", "key_id", "batch_id", "batch_position")


def _models_before_migrations() -> sa.MetaData:
    """The tables of commit e3992df's models, column for column."""
    metadata = sa.MetaData()

    def column(name: str, kind: Any, *, null: bool = False, index: bool = False) -> sa.Column[Any]:
        return sa.Column(name, kind, nullable=null, index=index)

    sa.Table(
        "plans",
        metadata,
        sa.Column("id", ID, primary_key=True),
        column("created_at", MOMENT, index=True),
        column("parent_id", ID, null=True, index=True),
        column("name", NAME),
        column("status", STATE),
        column("request_json", sa.Text),
        column("plan_json", sa.Text),
    )
    sa.Table(
        "jobs",
        metadata,
        sa.Column("id", ID, primary_key=True),
        column("name", NAME),
        column("state", STATE, index=True),
        column("created_at", MOMENT, index=True),
        column("updated_at", MOMENT),
        column("request_json", sa.Text),
        column("progress_json", sa.Text, null=True),
        column("plan_id", ID, null=True),
        column("error_json", sa.Text, null=True),
    )
    sa.Table(
        "api_keys",
        metadata,
        sa.Column("id", ID, primary_key=True),
        column("name", NAME),
        column("scope", STATE),
        sa.Column("key_hash", sa.String(128), nullable=False, unique=True),
        column("created_at", MOMENT),
        column("revoked_at", MOMENT, null=True),
    )
    sa.Table(
        "idempotency",
        metadata,
        sa.Column("key", sa.String(300), primary_key=True),
        column("body_hash", sa.String(64)),
        column("status", sa.Integer),
        column("location", sa.String(300)),
        column("body_json", sa.Text),
        column("created_at", MOMENT),
    )
    return metadata


@pytest.fixture(params=BACKENDS)
def empty_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """An empty database on SQLite, then on PostgreSQL (a fresh schema, dropped afterwards)."""
    with empty_database(request.param, tmp_path) as url:
        yield url


def _differences(url: str, metadata: sa.MetaData) -> list[Any]:
    """What autogenerate would write to make the database match ``metadata`` ([] if nothing)."""
    engine = sa.create_engine(url)
    with engine.connect() as connection:
        context = MigrationContext.configure(connection, opts=dict(COMPARE_OPTIONS))
        differences: list[Any] = compare_metadata(context, metadata)
    engine.dispose()
    return differences


def _alembic(url: str, verb: str, revision: str) -> None:
    engine = sa.create_engine(url)
    with engine.begin() as connection:
        getattr(command, verb)(alembic_config(connection), revision)
    engine.dispose()


def _tables(url: str) -> set[str]:
    engine = sa.create_engine(url)
    with engine.connect() as connection:
        names = set(sa.inspect(connection).get_table_names())
    engine.dispose()
    return names


def _upgraded(url: str) -> Any:
    store = Store(url)
    try:
        return store.upgrade_schema()
    finally:
        store.close()


def test_upgrade_makes_exactly_the_models_tables(empty_url: str) -> None:
    done = _upgraded(empty_url)
    assert (done.before, done.stamped, done.after) == (None, None, head_revision())
    assert _differences(empty_url, METADATA) == []


def test_the_comparison_notices_a_column_no_migration_adds(empty_url: str) -> None:
    _upgraded(empty_url)
    extended = sa.MetaData()
    for table in METADATA.sorted_tables:
        table.to_metadata(extended)
    unmigrated = sa.Column("added_without_a_migration", sa.Integer, nullable=True)
    extended.tables["jobs"].append_column(unmigrated)
    differences = _differences(empty_url, extended)
    assert [(d[0], d[2], d[3].name) for d in differences] == [
        ("add_column", "jobs", "added_without_a_migration")
    ]


def test_every_revision_goes_down_to_base_and_up_again(empty_url: str) -> None:
    _upgraded(empty_url)
    _alembic(empty_url, "downgrade", FIRST)
    assert _differences(empty_url, _models_before_migrations()) == []
    _alembic(empty_url, "downgrade", "base")
    assert _tables(empty_url) == {"alembic_version"}
    _upgraded(empty_url)
    assert _differences(empty_url, METADATA) == []


def test_revision_0001_is_the_schema_create_all_made_before_migrations(empty_url: str) -> None:
    _alembic(empty_url, "upgrade", FIRST)
    assert _differences(empty_url, _models_before_migrations()) == []


def _fill_before_migrations(url: str) -> tuple[dict[str, Any], dict[str, Any]]:
    """A database as the release before migrations left it: its tables, a plan and a job."""
    old = _models_before_migrations()
    plan = {
        "id": "p" * 32,
        "created_at": CREATED,
        "parent_id": None,
        "name": "before migrations",
        "status": "optimal",
        "request_json": '{"name": "before migrations"}',
        "plan_json": '{"carriers": []}',
    }
    job = {
        "id": "j" * 32,
        "name": "queued before migrations",
        "state": "queued",
        "created_at": CREATED,
        "updated_at": CREATED,
        "request_json": '{"name": "queued before migrations"}',
        "progress_json": None,
        "plan_id": None,
        "error_json": None,
    }
    engine = sa.create_engine(url)
    old.create_all(engine)
    with engine.begin() as connection:
        connection.execute(old.tables["plans"].insert().values(plan))
        connection.execute(old.tables["jobs"].insert().values(job))
    engine.dispose()
    return plan, job


def _row(url: str, table: str) -> dict[str, Any]:
    engine = sa.create_engine(url)
    with engine.connect() as connection:
        (row,) = connection.execute(sa.select(METADATA.tables[table])).mappings().all()
    engine.dispose()
    aware = {
        k: v.replace(tzinfo=v.tzinfo or UTC) for k, v in row.items() if isinstance(v, datetime)
    }
    return {**row, **aware}  # SQLite gives naive datetimes; every stored time is UTC


def test_a_database_made_before_migrations_is_stamped_then_upgraded(empty_url: str) -> None:
    plan, job = _fill_before_migrations(empty_url)
    done = _upgraded(empty_url)
    assert (done.before, done.stamped, done.after) == (None, FIRST, head_revision())
    assert _differences(empty_url, METADATA) == []
    expected_plan = {**plan, "job_id": None}
    expected_job = {**job, "attempts": 0, **dict.fromkeys(NEW_JOB_COLUMNS)}
    migrated_plan, migrated_job = _row(empty_url, "plans"), _row(empty_url, "jobs")
    assert {k: migrated_plan[k] for k in expected_plan} == expected_plan  # later revisions may
    assert {k: migrated_job[k] for k in expected_job} == expected_job  # add more columns
    store = Store(empty_url)
    items, total = store.list_plans(0, 10)
    assert total == 1 and items[0].id == plan["id"]
    store.close()


def test_tables_create_all_made_from_todays_models_are_stamped_at_head(empty_url: str) -> None:
    engine = sa.create_engine(empty_url)
    METADATA.create_all(engine)
    engine.dispose()
    done = _upgraded(empty_url)
    assert (done.before, done.stamped, done.after) == (None, head_revision(), head_revision())


def test_tables_of_no_revision_are_refused_by_name(empty_url: str) -> None:
    engine = sa.create_engine(empty_url)
    with engine.begin() as connection:
        connection.execute(sa.text("CREATE TABLE plans (id VARCHAR(32) PRIMARY KEY, colour TEXT)"))
    engine.dispose()
    with pytest.raises(SchemaNotReadyError, match=r"match no revision \(plans: colour, id\)"):
        _upgraded(empty_url)
    assert _tables(empty_url) == {"plans"}  # nothing stamped, nothing changed


def test_a_database_a_newer_release_migrated_is_used_but_not_migrated(empty_url: str) -> None:
    _upgraded(empty_url)
    engine = sa.create_engine(empty_url)
    with engine.begin() as connection:
        connection.execute(sa.text("UPDATE alembic_version SET version_num = '9999'"))
    engine.dispose()
    store = Store(empty_url)
    state = store.schema_state()
    assert (state.current, state.known, state.behind) == ("9999", False, False)
    store.ensure_schema()  # no error: an older replica keeps serving during a rollout
    with pytest.raises(SchemaNotReadyError, match="'9999', which this version does not know"):
        store.upgrade_schema()
    store.close()


@pytest.mark.parametrize("backend", BACKENDS)
def test_only_the_embedded_sqlite_store_migrates_itself(backend: str, tmp_path: Path) -> None:
    with empty_database(backend, tmp_path) as url:
        store = Store(url)
        if backend == "sqlite":
            store.ensure_schema()
            assert store.schema_state().at_head
        else:
            with pytest.raises(SchemaNotReadyError, match="run `bandwright db upgrade`"):
                store.ensure_schema()
            assert _tables(url) == set()
        store.close()


def _both_at_head(results: list[tuple[str, str]]) -> None:
    head = head_revision()
    assert sorted(results) == sorted([("none", head), (head, head)])


def test_two_upgrades_at_once_in_one_process_both_end_at_head(empty_url: str) -> None:
    start = threading.Barrier(2)

    def upgrade() -> tuple[str, str]:
        start.wait()
        done = _upgraded(empty_url)
        return done.before or "none", done.after

    with ThreadPoolExecutor(2) as pool:
        _both_at_head(list(pool.map(lambda _: upgrade(), range(2))))


UPGRADE_WHEN_BOTH_READY = """
import sys, time
from pathlib import Path
from service.store import Store
url, ready, other = sys.argv[1], Path(sys.argv[2]), Path(sys.argv[3])
store = Store(url)
ready.touch()
while not other.exists():
    time.sleep(0.001)
done = store.upgrade_schema()
print(done.before or "none", done.after)
"""


def test_two_upgrades_at_once_from_two_processes_both_end_at_head(tmp_path: Path) -> None:
    # Two `bandwright db upgrade` run together (two release jobs) on one PostgreSQL database.
    with empty_database("postgres", tmp_path) as url:
        flags = [tmp_path / "first.ready", tmp_path / "second.ready"]
        processes = [
            subprocess.Popen(
                [sys.executable, "-c", UPGRADE_WHEN_BOTH_READY, url, str(mine), str(theirs)],
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                text=True,
            )
            for mine, theirs in (flags, flags[::-1])
        ]
        outputs = [p.communicate(timeout=PROCESS_TIMEOUT_S) for p in processes]
        assert [p.returncode for p in processes] == [0, 0], outputs
        _both_at_head([tuple(out.split()) for out, _ in outputs])  # type: ignore[misc]


def test_db_upgrade_and_current_from_the_command_line(
    empty_url: str, capsys: pytest.CaptureFixture[str]
) -> None:
    head = head_revision()
    assert main(["db", "current", "--url", empty_url]) == ExitCode.OUTDATED
    assert capsys.readouterr().out == f"none (behind head {head}: run `bandwright db upgrade`)\n"
    _alembic(empty_url, "upgrade", FIRST)
    assert main(["db", "current", "--url", empty_url]) == ExitCode.OUTDATED
    assert capsys.readouterr().out.startswith(f"{FIRST} (behind head {head}")
    assert main(["db", "upgrade", "--url", empty_url]) == ExitCode.SERVED
    assert capsys.readouterr().out == f"{FIRST} → {head}\n"
    assert main(["db", "upgrade", "--url", empty_url]) == ExitCode.SERVED
    assert capsys.readouterr().out == f"{head} → {head} (already at head)\n"
    assert main(["db", "current", "--url", empty_url]) == ExitCode.SERVED
    outputs = capsys.readouterr()
    assert outputs.out == f"{head} (head)\n"
    assert "bandwright:bandwright@" not in outputs.err  # the password is not printed


def test_db_commands_read_the_configured_database_and_stamp_old_tables(
    empty_url: str, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    _fill_before_migrations(empty_url)
    monkeypatch.setenv("BANDWRIGHT_DATABASE_URL", empty_url)
    assert main(["db", "upgrade"]) == ExitCode.SERVED
    expected = f"{FIRST} (tables made before migrations, stamped) → {head_revision()}\n"
    assert capsys.readouterr().out == expected


@pytest.mark.parametrize(
    ("url", "code", "message"),
    [
        ("not a url", ExitCode.INVALID, "invalid input: --url: Could not parse"),
        ("nosuchdb://host/x", ExitCode.INVALID, "invalid input: --url: Can't load plugin"),
        ("postgresql+psycopg://u:p@127.0.0.1:1/x", ExitCode.UNREACHABLE, "cannot reach the store"),
    ],
)
def test_db_commands_name_a_bad_or_unreachable_url(
    url: str, code: ExitCode, message: str, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["db", "upgrade", "--url", url]) == code
    assert message in capsys.readouterr().err


def test_serve_starts_on_a_database_behind_its_release_and_says_why_it_is_not_ready(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture
) -> None:
    import uvicorn

    served: list[str] = []
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: served.append(kw["host"]))
    with empty_database("postgres", tmp_path) as url:
        monkeypatch.setenv("BANDWRIGHT_DATABASE_URL", url)
        assert main(["serve"]) == ExitCode.OUTDATED  # no tables at all: nothing to serve from
        assert served == []
        _alembic(url, "upgrade", FIRST)
        assert main(["serve"]) == ExitCode.SERVED
        assert served == ["127.0.0.1"]
        assert _tables(url) >= {"plans", "jobs"} and "batches" not in _tables(url)  # not migrated
    assert "run `bandwright db upgrade`" in caplog.text
