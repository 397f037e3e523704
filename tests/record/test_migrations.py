"""pipeline/record/ledger/migrations.py: the ledger's schema, one migration per version.

The reference is SQLite's own catalogue (sqlite_master) of the file, read with the sqlite3
module: a new ledger and one upgraded step by step must hold the same tables.
"""

from __future__ import annotations

import sqlite3
from contextlib import closing

import pytest

from pipeline.core.errors import UserError
from pipeline.record.ledger.migrations import MIGRATIONS, SCHEMA_VERSION, migrate, schema_version
from pipeline.record.ledger.store import open_for_writing, transaction


def schema(conn: sqlite3.Connection) -> list[tuple]:
    return conn.execute("SELECT type, name, sql FROM sqlite_master ORDER BY name").fetchall()


def version_row(conn: sqlite3.Connection) -> list[tuple]:
    return conn.execute("SELECT version FROM schema_version").fetchall()


def test_every_version_has_its_migration():
    assert sorted(MIGRATIONS) == list(range(1, SCHEMA_VERSION + 1))


def test_a_new_ledger_reaches_the_current_version(tmp_path):
    with closing(open_for_writing(tmp_path / "ledger.sqlite")) as conn:
        assert version_row(conn) == [(SCHEMA_VERSION,)]
        assert schema_version(conn, tmp_path) == SCHEMA_VERSION
        tables = {name for kind, name, _ in schema(conn) if kind == "table"}
    assert {"runs", "model_metrics", "forecasts", "periods", "realised", "schema_version"} <= tables


def test_opening_again_changes_nothing(tmp_path):
    path = tmp_path / "ledger.sqlite"
    with closing(open_for_writing(path)) as conn:
        first = schema(conn)
    with closing(open_for_writing(path)) as conn:
        assert schema(conn) == first and version_row(conn) == [(SCHEMA_VERSION,)]


def test_migrating_from_the_current_version_is_a_no_op():
    conn = sqlite3.connect(":memory:", isolation_level=None)
    with transaction(conn):
        migrate(conn, 0)
    before = schema(conn)
    with transaction(conn):
        migrate(conn, schema_version(conn, None))
    assert schema(conn) == before and version_row(conn) == [(SCHEMA_VERSION,)]


def test_step_by_step_gives_the_same_schema_as_all_at_once():
    at_once = sqlite3.connect(":memory:", isolation_level=None)
    with transaction(at_once):
        migrate(at_once, 0)
    stepwise = sqlite3.connect(":memory:", isolation_level=None)
    for version in range(SCHEMA_VERSION):
        with transaction(stepwise):
            migrate(stepwise, schema_version(stepwise, None), upto=version + 1)
        assert version_row(stepwise) == [(version + 1,)]
    assert schema(stepwise) == schema(at_once)


def test_a_migration_stays_inside_its_transaction(tmp_path):
    path = tmp_path / "ledger.sqlite"
    conn = sqlite3.connect(path, isolation_level=None)
    with pytest.raises(RuntimeError):
        with transaction(conn):
            migrate(conn, 0)
            raise RuntimeError("stopped before the commit")
    conn.close()
    with closing(sqlite3.connect(path)) as reopened:
        assert schema(reopened) == []          # rolled back whole: no table left behind


def test_a_foreign_database_or_a_newer_ledger_is_refused(tmp_path):
    foreign = sqlite3.connect(":memory:")
    foreign.execute("CREATE TABLE notes (text TEXT)")
    with pytest.raises(UserError, match="not a castline run ledger"):
        schema_version(foreign, tmp_path / "notes.sqlite")
    newer = sqlite3.connect(":memory:")
    newer.execute("CREATE TABLE schema_version (version INTEGER NOT NULL)")
    newer.execute("INSERT INTO schema_version VALUES (?)", (SCHEMA_VERSION + 1,))
    with pytest.raises(UserError, match="newer castline") as error:
        schema_version(newer, tmp_path / "ledger.sqlite")
    assert "\n" not in str(error.value) and "ledger.sqlite" in str(error.value)
    assert schema_version(sqlite3.connect(":memory:"), tmp_path) == 0     # an empty file: version 0
