"""Opening the ledger file safely, and values in and out of its tables."""

from __future__ import annotations

import hashlib
import json
import math
import sqlite3
from collections.abc import Iterator
from contextlib import closing, contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core import catalogue
from pipeline.core.errors import UserError
from pipeline.record.ledger.checks import LedgerDamage, check_tables, version_of
from pipeline.record.ledger.migrations import SCHEMA_VERSION, migrate, schema_version
from pipeline.spec import Spec

LEDGER_FILE = "ledger.sqlite"


BUSY_SECONDS = 60.0          # how long a run waits for another run's write to finish


SQLITE_HEADER = b"SQLite format 3\x00"


SCORES = list(catalogue.SCORES)   # a column per score in the metric tables (a new one needs a migration)


INTERVAL_COLUMNS = [f"{method}_{side}_{level}" for method in ("analytic", "empirical")
                    for level in ("80", "95") for side in ("low", "high")]


RUN_TABLES = ["model_metrics", "origin_metrics", "horizon_metrics", "forecasts", "coefficients",
              "periods", "realised", "runs"]


REALISED_COLUMNS = ["forecast_run_id", "forecast_created", "model", "period", "series", "horizon",
                    "forecast", "actual", "error", "expected_mae", "interval_method", "low_80",
                    "high_80", "low_95", "high_95", "inside_80", "inside_95", "backtest_low_95",
                    "backtest_high_95", "within_backtest_95", "recorded"]


def ledger_path(spec: Spec, output_folder: str | Path | None = None) -> Path:
    """Return the ledger file a run of the spec records into: output.ledger, or
    ledger.sqlite in the folder its run folders are written to."""
    if spec.output.ledger is not None:
        return Path(spec.output.ledger)
    return (Path(output_folder) if output_folder else spec.output.folder).resolve() / LEDGER_FILE


def _ledger_error(path: Path, exc: sqlite3.Error) -> UserError | None:
    """Return the user-facing error for an SQLite failure the user can act on, else None."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = " ".join(str(exc).split())
    if name.startswith(("SQLITE_NOTADB", "SQLITE_CORRUPT")) or "malformed" in text \
            or "not a database" in text:
        return UserError(f"{path}: the run ledger is damaged ({text}); it was left as it is: move "
                         "it aside (the next run starts a new ledger) or restore a copy")
    if "no such table" in text or "no such column" in text:
        return UserError(f"{path}: the run ledger's tables are not those castline writes ({text}); it "
                         "was left as it is: restore a copy, or move it aside (the next run starts a "
                         "new ledger)")
    if name.startswith(("SQLITE_BUSY", "SQLITE_LOCKED")) or "locked" in text:
        return UserError(f"{path}: the run ledger stayed busy for {BUSY_SECONDS:g} s (another "
                         "castline run is writing to it); try again")
    if name.startswith(("SQLITE_CANTOPEN", "SQLITE_PERM", "SQLITE_READONLY", "SQLITE_IOERR",
                        "SQLITE_FULL")) or "readonly" in text or "disk" in text \
            or "unable to open" in text:
        return UserError(f"{path}: cannot use the run ledger: {text}")
    return None


@contextmanager
def ledger_errors(path: Path) -> Iterator[None]:
    """Turn SQLite failures the user can act on into a one-line UserError naming the file."""
    try:
        yield
    except LedgerDamage as damage:
        raise UserError(f"{path}: {damage}") from None
    except sqlite3.Error as exc:
        mistake = _ledger_error(path, exc)
        if mistake is None:
            raise
        raise mistake from None


def _refuse_unusable(path: Path) -> None:
    """Stop before SQLite touches a path that is a folder or a file that is not SQLite."""
    if path.is_dir():
        raise UserError(f"{path}: the run ledger path is a folder, not a file")
    if path.exists() and path.stat().st_size > 0:
        with path.open("rb") as handle:
            head = handle.read(len(SQLITE_HEADER))
        if head != SQLITE_HEADER:
            raise UserError(f"{path}: the run ledger is damaged or is not a ledger (it is not an "
                            "SQLite database); it was left as it is: move it aside (the next run "
                            "starts a new ledger) or restore a copy")


@contextmanager
def transaction(conn: sqlite3.Connection) -> Iterator[None]:
    """Run a block in one write transaction: taken at once, committed whole or not at all."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield
    except BaseException:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def checked_version(conn: sqlite3.Connection, path: Path) -> int:
    """Return the file's schema version (0 for an empty file) once its tables are checked
    (``checks``): a ledger changed by hand or damaged raises LedgerDamage."""
    tables = {row[0] for row in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    if "schema_version" in tables:
        version_of(conn)
    version = schema_version(conn, path)   # refuses a file of another program, or of a newer castline
    if version:
        check_tables(conn, version)
    return version


def _connect(path: Path, *, create: bool) -> sqlite3.Connection:
    mode = "rwc" if create else "rw"
    conn = sqlite3.connect(f"{path.resolve().as_uri()}?mode={mode}", uri=True,
                           timeout=BUSY_SECONDS, isolation_level=None)
    conn.execute(f"PRAGMA busy_timeout = {int(BUSY_SECONDS * 1000)}")
    return conn


def open_for_writing(path: Path) -> sqlite3.Connection:
    """Return a connection to the ledger, created or upgraded to the current schema."""
    _refuse_unusable(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"{path.parent}: cannot create the ledger's folder: {exc.strerror}") from None
    conn = _connect(path, create=True)
    try:
        if path.stat().st_size > 0:
            check = conn.execute("PRAGMA quick_check(1)").fetchone()
            if check is None or check[0] != "ok":
                found = " ".join(str(check[0]).split()) if check else "no answer from the check"
                raise UserError(f"{path}: the run ledger is damaged ({found}); it was left as it "
                                "is: move it aside (the next run starts a new ledger) or restore "
                                "a copy")
            checked_version(conn, path)   # before anything is written, the journal mode included
        conn.execute("PRAGMA journal_mode = WAL")   # waits on busy_timeout like any write
        conn.execute("PRAGMA synchronous = FULL")   # the commit is the run's commit point
        with transaction(conn):
            version = schema_version(conn, path)
            migrate(conn, version)
    except BaseException:
        conn.close()
        raise
    return conn


def _open_for_reading(path: Path) -> sqlite3.Connection:
    """Return a connection for reading the ledger at the current schema; never writes the file.

    An older ledger is copied into memory and upgraded there.
    """
    _refuse_unusable(path)
    conn = _connect(path, create=False)
    try:
        conn.execute("PRAGMA query_only = ON")
        version = checked_version(conn, path)
        if version == SCHEMA_VERSION:
            return conn
        memory = sqlite3.connect(":memory:", isolation_level=None)
        conn.backup(memory)
    except BaseException:
        conn.close()
        raise
    conn.close()
    with transaction(memory):
        migrate(memory, version)
    return memory


@contextmanager
def reading(path: Path) -> Iterator[sqlite3.Connection]:
    """Open the ledger for reading, with its problems reported as one-line user errors."""
    path = Path(path)
    if not path.exists():
        raise UserError(f"{path}: no run ledger here yet; 'castline run' records every run in it")
    with ledger_errors(path):
        with closing(_open_for_reading(path)) as conn:
            yield conn


def plain(value):
    """Return a value SQLite stores: numpy scalars as Python ones, NaN and NA as NULL."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, bool | int | float | str):
        return value
    if isinstance(value, pd.Period | pd.Timestamp):
        return str(value)
    return str(value)


def json_records(frame: pd.DataFrame) -> list[dict]:
    """Return a table's rows as JSON-ready dicts (NaN as null, numpy scalars as numbers)."""
    return [{k: plain(v) for k, v in row.items()} for row in frame.to_dict(orient="records")]


def insert(conn: sqlite3.Connection, table: str, rows: list[dict]) -> None:
    if not rows:
        return
    columns = list(rows[0])
    conn.executemany(f"INSERT INTO {table} ({', '.join(columns)}) VALUES "
                     f"({', '.join('?' for _ in columns)})",
                     [[plain(row.get(c)) for c in columns] for row in rows])


def frame_rows(frame: pd.DataFrame, columns: list[str], **fixed) -> list[dict]:
    """Return the frame's rows as dicts of the given columns (absent columns as NULL)."""
    if frame is None or not len(frame):
        return []
    present = [c for c in columns if c in frame.columns]
    return [{**fixed, **{c: row.get(c) for c in columns}}
            for row in frame[present].to_dict(orient="records")]


def query(conn: sqlite3.Connection, sql: str, parameters=()) -> pd.DataFrame:
    cursor = conn.execute(sql, parameters)
    names = [d[0] for d in cursor.description]
    return pd.DataFrame(cursor.fetchall(), columns=names)


def spec_hash(resolved: dict) -> str:
    """Return the sha256 of the resolved spec, written as canonical JSON (keys sorted)."""
    text = json.dumps(resolved, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
