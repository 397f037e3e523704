"""Checks of what a ledger file holds, so a file changed by hand stops a command in one line.

A ledger is checked when it is opened, for reading or for recording a run, before anything is
read from it or written to it:

- its ``schema_version`` table: the one column ``version``, one row, an integer from 1 to
  ``SCHEMA_VERSION``;
- its tables: every table of that version's schema (``MIGRATIONS``), each with exactly the
  columns that version gave it;
- the values of its small tables (``runs``, the metric tables, the month fingerprints), scanned whole: each
  column holds values of its declared type (text, a whole number, a number) and no NULL where
  the schema allows none; ``runs.spec_json`` holds a JSON object.

The large tables (forecasts, coefficients, realised scores) would take
seconds to scan whole at thousands of series; their rows are checked the same way as they are
read (``check_rows``). A problem is raised as ``LedgerDamage`` without the file's name; the
ledger's opening (``store.ledger_errors``) adds it.
"""

from __future__ import annotations

import functools
import sqlite3
from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.core.errors import UserError
from pipeline.record.ledger.migrations import SCHEMA_VERSION, migrate

# The tables scanned whole when the ledger is opened: a few rows per run.
SCANNED = ("runs", "model_metrics", "origin_metrics", "horizon_metrics", "periods")

# Which stored types each declared type accepts (SQLite's typeof names). A REAL column keeps
# a whole number as an integer on disk; a text a number cannot be read from stays text.
ACCEPTED = {"TEXT": ("text",), "INTEGER": ("integer",), "REAL": ("real", "integer")}
WORDS = {"TEXT": "text", "INTEGER": "a whole number", "REAL": "a number"}


class LedgerDamage(UserError):
    """What is wrong with a ledger's tables; the ledger's opening puts the file's name first."""


@dataclass(frozen=True)
class Column:
    name: str
    kind: str        # TEXT, INTEGER or REAL
    required: bool   # NOT NULL, or part of the primary key


def _columns(conn: sqlite3.Connection, table: str) -> list[Column]:
    return [Column(name, kind.upper(), bool(notnull) or bool(pk))
            for _, name, kind, notnull, _, pk in conn.execute(f"PRAGMA table_info({table})")]


@functools.cache
def schema(version: int = SCHEMA_VERSION) -> dict[str, tuple[Column, ...]]:
    """Return the tables and columns a ledger of this schema version has (built in memory)."""
    conn = sqlite3.connect(":memory:", isolation_level=None)
    try:
        migrate(conn, 0, version)
        tables = [row[0] for row in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        return {table: tuple(_columns(conn, table)) for table in tables}
    finally:
        conn.close()


def _damage(where: str, what: str) -> LedgerDamage:
    return LedgerDamage(f"{where}: {what}; the ledger was changed by hand or damaged, and was left "
                        "as it is: restore a copy, or move it aside (the next run starts a new ledger)")


def version_of(conn: sqlite3.Connection) -> int:
    """Return the schema version the file's ``schema_version`` table holds, once checked."""
    names = [column.name for column in _columns(conn, "schema_version")]
    if names != ["version"]:
        raise _damage("table schema_version", f"has the columns {', '.join(names) or 'none'} where "
                      "castline writes the one column version")
    rows = conn.execute("SELECT version FROM schema_version LIMIT 2").fetchall()
    if len(rows) != 1:
        raise _damage("table schema_version", "is empty" if not rows else "has more than one row")
    version = rows[0][0]
    if not isinstance(version, int) or isinstance(version, bool):
        raise _damage("table schema_version", f"version {version!r} is not a whole number")
    if version < 1:
        raise _damage("table schema_version", f"version {version} is not a version castline wrote")
    return version


def check_tables(conn: sqlite3.Connection, version: int) -> None:
    """Check that the file has the tables and columns of its schema version, and scan the
    small tables' values; raise LedgerDamage naming the first problem."""
    present = {row[0] for row in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    expected = schema(version)
    missing = [table for table in expected if table not in present]
    if missing and not set(expected) - {"schema_version"} - set(missing):
        raise LedgerDamage("is an SQLite database with a schema_version table but none of the other "
                           "tables of a castline run ledger; it was left as it is: set output.ledger "
                           "(or --ledger) to another file")
    if missing:
        raise _damage(f"table {missing[0]}", "is missing")
    for table, columns in expected.items():
        found = [column.name for column in _columns(conn, table)]
        wanted = [column.name for column in columns]
        lacking = [name for name in wanted if name not in found]
        if lacking:
            raise _damage(f"table {table}", f"has no column {lacking[0]}")
        extra = [name for name in found if name not in wanted]
        if extra:
            raise _damage(f"table {table}", f"has a column {extra[0]} that castline does not write")
    for table in SCANNED:
        if table in expected:   # a version-1 ledger has no month fingerprints
            _scan(conn, table, expected[table])


def _accepts(column: Column) -> str:
    types = ACCEPTED.get(column.kind, ("text", "integer", "real"))
    allowed = ", ".join(f"'{t}'" for t in (*types, *(() if column.required else ("null",))))
    return f"typeof({column.name}) IN ({allowed})"


def _scan(conn: sqlite3.Connection, table: str, columns: tuple[Column, ...]) -> None:
    tests = [_accepts(column) for column in columns]
    if table == "runs":
        tests.append("(json_valid(spec_json) AND json_type(spec_json) = 'object')")
    names = ", ".join(column.name for column in columns)
    row = conn.execute(f"SELECT {names} FROM {table} WHERE NOT ({' AND '.join(tests)}) LIMIT 1").fetchone()
    if row is None:
        return
    values = dict(zip([column.name for column in columns], row))
    for column in columns:
        _check_value(table, column, values[column.name], values)
    raise _damage(f"table runs, run {values.get('run_id')!r}, column spec_json",
                  "is not a resolved spec written as JSON")


def _row_name(table: str, values: dict) -> str:
    keys = [key for key in ("run_id", "model", "origin", "horizon", "period", "series", "term")
            if values.get(key) is not None and not (isinstance(values.get(key), float) and np.isnan(values[key]))]
    return f"table {table}, row " + ", ".join(f"{key} {values[key]!r}" for key in keys[:3]) if keys \
        else f"table {table}"


def _fits(column: Column, value) -> bool:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return not column.required
    if column.kind == "TEXT":
        return isinstance(value, str)
    if isinstance(value, bool | bytes) or not isinstance(value, int | float | np.number):
        return False
    return column.kind != "INTEGER" or float(value).is_integer()


def _check_value(table: str, column: Column, value, values: dict) -> None:
    if _fits(column, value):
        return
    if value is None or (isinstance(value, float) and np.isnan(value)):
        raise _damage(f"{_row_name(table, values)}, column {column.name}", "is empty where castline "
                      "always writes a value")
    shown = repr(value if not isinstance(value, bytes) else value[:20])
    raise _damage(f"{_row_name(table, values)}, column {column.name}",
                  f"holds {shown} where castline writes {WORDS.get(column.kind, 'a value')}")


def _column_fits(column: Column, values: pd.Series) -> bool:
    """Return True when every value of a column read back fits it (at numpy's speed when it can)."""
    dtype = values.dtype
    if dtype.kind == "O" and values.isna().all():   # every value NULL (or no rows)
        return not (column.required and len(values))
    if column.kind in ("REAL", "INTEGER") and dtype.kind in "iuf":
        if column.required and values.isna().any():
            return False
        if column.kind == "INTEGER" and dtype.kind == "f":
            whole = values.dropna().to_numpy()
            return bool(np.all(np.floor(whole) == whole))
        return True
    if column.kind == "TEXT" and dtype.kind == "O":
        inferred = pd.api.types.infer_dtype(values, skipna=True)
        return inferred in ("string", "empty") and not (column.required and values.isna().any())
    return False


def check_rows(frame: pd.DataFrame, table: str) -> pd.DataFrame:
    """Return rows read from a table of the ledger (at the current schema) once checked: each
    column holds values of its type and no NULL where the schema allows none."""
    for column in schema().get(table, ()):
        if column.name not in frame.columns or _column_fits(column, frame[column.name]):
            continue
        for position, value in enumerate(frame[column.name]):
            _check_value(table, column, value, frame.iloc[position].to_dict())
    return frame
