"""The run ledger: every run's identity, metrics and forecasts in one SQLite file, and the
track record read back from it (how earlier forecasts turned out, how the metrics moved).

One file, by default ``ledger.sqlite`` in the folder the run folders are written to
(``output.ledger`` moves it). Tables, one row per:

- ``runs``: run (id, time, spec name, sha256 of the resolved spec and the spec itself,
  input sha256, castline version, months covered, recommended model, where its folder is);
- ``model_metrics``, ``origin_metrics``, ``horizon_metrics``: model, and model and origin or
  months ahead, of a run's backtest;
- ``forecasts``: forecast a run made (period, series, months ahead, model, value, the
  analytic and empirical 80% and 95% bounds, and which of the two the summary stated);
- ``coefficients``: term of each final fit;
- ``periods``: month of a run's input, with a sha256 of that month's rows, so that two runs
  can tell which months were added or revised between them;
- ``realised``: earlier forecast whose month has an actual in a later run's data, scored
  by that later run (recorded when first scored and again whenever the actual is revised);
- ``schema_version``: the schema's version (``SCHEMA_VERSION``). An older ledger is
  upgraded in place by the ``MIGRATIONS`` when a run records into it (one transaction);
  reading an older ledger upgrades a copy in memory and leaves the file as it is.

Safety. Every run is recorded in one transaction; the file is in WAL mode with a busy
timeout, so runs started together queue for the write lock and each lands whole. A file
that is not a ledger, is damaged, or was written by a newer castline stops the run with
one line (exit 2) and is never written to.

The run folder and the ledger row. The ledger commit is the moment a run is made:

1. publish writes every file of the run into its hidden ``.incomplete-<run id>`` folder;
2. one transaction records the run, marked ``placing``, with both folder paths;
3. the hidden folder is renamed into place, and the row is marked ``placed``.

A run folder is never visible without its ledger row: the rename comes after the
commit. A ledger row counts (in history, compare and the track record) once it is
``placed`` or its run folder exists, so a row is never visible without its folder either.
A run stopped before step 2 leaves no row (SQLite discards the open transaction) and no
visible folder. A run stopped between steps 2 and 3 left a complete folder and a committed
row: the next run that records into the ledger finishes it (renames the folder into place),
so the run appears whole, later. If the rename itself fails, the row is deleted again.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import shutil
import sqlite3
from collections.abc import Iterator
from contextlib import closing, contextmanager
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline import __version__
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import UserError
from pipeline.spec import BASELINE, Spec
from pipeline.stages.check import CheckedData

LEDGER_FILE = "ledger.sqlite"
SCHEMA_VERSION = 2
BUSY_SECONDS = 60.0          # how long a run waits for another run's write to finish
SQLITE_HEADER = b"SQLite format 3\x00"
SCORES = ["n", "mae", "rmse", "mape", "smape", "wape", "mase", "r2", "bias", "skill_vs_mean"]
INTERVAL_COLUMNS = [f"{method}_{side}_{level}" for method in ("analytic", "empirical")
                    for level in ("80", "95") for side in ("low", "high")]

# Each entry upgrades the schema from the version before it. A new ledger runs them all.
MIGRATIONS: dict[int, str] = {
    1: """
        CREATE TABLE schema_version (version INTEGER NOT NULL);
        INSERT INTO schema_version (version) VALUES (1);
        CREATE TABLE runs (
            run_id TEXT PRIMARY KEY,
            created TEXT NOT NULL,
            spec_name TEXT NOT NULL,
            spec_hash TEXT NOT NULL,
            spec_json TEXT NOT NULL,
            input_sha256 TEXT NOT NULL,
            castline_version TEXT NOT NULL,
            first_period TEXT,
            last_period TEXT,
            history_rows INTEGER,
            future_rows INTEGER,
            recommended TEXT,
            select_by TEXT,
            beats_baseline INTEGER,
            folder TEXT NOT NULL,
            staging TEXT NOT NULL,
            state TEXT NOT NULL CHECK (state IN ('placing', 'placed'))
        );
        CREATE INDEX runs_by_name ON runs (spec_name, created);
        CREATE TABLE model_metrics (
            run_id TEXT NOT NULL, model TEXT NOT NULL,
            n INTEGER, mae REAL, rmse REAL, mape REAL, smape REAL, wape REAL, mase REAL,
            r2 REAL, bias REAL, skill_vs_mean REAL, p_value REAL,
            PRIMARY KEY (run_id, model)
        );
        CREATE TABLE origin_metrics (
            run_id TEXT NOT NULL, model TEXT NOT NULL, origin TEXT NOT NULL,
            n INTEGER, mae REAL, rmse REAL, mape REAL, smape REAL, wape REAL, mase REAL,
            r2 REAL, bias REAL, skill_vs_mean REAL,
            PRIMARY KEY (run_id, model, origin)
        );
        CREATE TABLE horizon_metrics (
            run_id TEXT NOT NULL, model TEXT NOT NULL, horizon INTEGER NOT NULL,
            n INTEGER, mae REAL, rmse REAL, bias REAL, skill_vs_mean REAL,
            PRIMARY KEY (run_id, model, horizon)
        );
        CREATE TABLE forecasts (
            run_id TEXT NOT NULL, model TEXT NOT NULL, period TEXT NOT NULL,
            series TEXT NOT NULL, horizon INTEGER NOT NULL, forecast REAL,
            analytic_low_80 REAL, analytic_high_80 REAL, analytic_low_95 REAL,
            analytic_high_95 REAL, empirical_low_80 REAL, empirical_high_80 REAL,
            empirical_low_95 REAL, empirical_high_95 REAL,
            PRIMARY KEY (run_id, model, period, series)
        );
        CREATE TABLE coefficients (
            run_id TEXT NOT NULL, model TEXT NOT NULL, term TEXT NOT NULL,
            estimate REAL, std_error REAL
        );
        CREATE INDEX coefficients_by_run ON coefficients (run_id)
    """,
    # v2: the interval each forecast's summary stated, per-month fingerprints of the
    # input, and the scores of earlier forecasts against the actuals that came later.
    2: """
        ALTER TABLE forecasts ADD COLUMN interval_method TEXT;
        CREATE TABLE periods (
            run_id TEXT NOT NULL, period TEXT NOT NULL,
            actual_rows INTEGER NOT NULL, planned_rows INTEGER NOT NULL, sha256 TEXT NOT NULL,
            PRIMARY KEY (run_id, period)
        );
        CREATE TABLE realised (
            run_id TEXT NOT NULL, forecast_run_id TEXT NOT NULL, model TEXT NOT NULL,
            period TEXT NOT NULL, series TEXT NOT NULL, horizon INTEGER NOT NULL,
            forecast REAL, actual REAL, error REAL, expected_mae REAL, interval_method TEXT,
            low_80 REAL, high_80 REAL, low_95 REAL, high_95 REAL,
            inside_80 INTEGER, inside_95 INTEGER,
            backtest_low_95 REAL, backtest_high_95 REAL, within_backtest_95 INTEGER,
            PRIMARY KEY (run_id, forecast_run_id, model, period, series)
        );
        CREATE INDEX realised_by_forecast_run ON realised (forecast_run_id);
        UPDATE schema_version SET version = 2
    """,
}
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


# ---------------------------------------------------------------- opening the file

def _ledger_error(path: Path, exc: sqlite3.Error) -> UserError | None:
    """Return the user-facing error for an SQLite failure the user can act on, else None."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = " ".join(str(exc).split())
    if name.startswith(("SQLITE_NOTADB", "SQLITE_CORRUPT")) or "malformed" in text \
            or "not a database" in text:
        return UserError(f"{path}: the run ledger is damaged ({text}); it was left as it is: move "
                         "it aside (the next run starts a new ledger) or restore a copy")
    if name.startswith(("SQLITE_BUSY", "SQLITE_LOCKED")) or "locked" in text:
        return UserError(f"{path}: the run ledger stayed busy for {BUSY_SECONDS:g} s (another "
                         "castline run is writing to it); try again")
    if name.startswith(("SQLITE_CANTOPEN", "SQLITE_PERM", "SQLITE_READONLY", "SQLITE_IOERR",
                        "SQLITE_FULL")) or "readonly" in text or "disk" in text \
            or "unable to open" in text:
        return UserError(f"{path}: cannot use the run ledger: {text}")
    return None


@contextmanager
def _ledger_errors(path: Path) -> Iterator[None]:
    """Turn SQLite failures the user can act on into a one-line UserError naming the file."""
    try:
        yield
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


def _schema_version(conn: sqlite3.Connection, path: Path) -> int:
    """Return the ledger's schema version: 0 for an empty file."""
    tables = {row[0] for row in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    if "schema_version" not in tables:
        if tables:
            raise UserError(f"{path}: is an SQLite database but not a castline run ledger (no "
                            "schema_version table); it was left as it is: set output.ledger to "
                            "another file")
        return 0
    row = conn.execute("SELECT version FROM schema_version").fetchone()
    if row is None or not isinstance(row[0], int):
        raise UserError(f"{path}: the run ledger's schema_version table is empty or damaged; "
                        "it was left as it is")
    if row[0] > SCHEMA_VERSION:
        raise UserError(f"{path}: the run ledger was written by a newer castline (schema version "
                        f"{row[0]}; this castline {__version__} reads up to {SCHEMA_VERSION}); "
                        "upgrade castline")
    return row[0]


def _execute_script(conn: sqlite3.Connection, script: str) -> None:
    # Not executescript(): it commits first, and a migration must stay inside its transaction.
    for statement in script.split(";"):
        if statement.strip():
            conn.execute(statement)


def migrate(conn: sqlite3.Connection, version: int, upto: int = SCHEMA_VERSION) -> None:
    """Apply the migrations after `version`, up to `upto`, on an open transaction."""
    for step in range(version + 1, upto + 1):
        _execute_script(conn, MIGRATIONS[step])


@contextmanager
def _transaction(conn: sqlite3.Connection) -> Iterator[None]:
    """Run a block in one write transaction: taken at once, committed whole or not at all."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield
    except BaseException:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def _connect(path: Path, *, create: bool) -> sqlite3.Connection:
    mode = "rwc" if create else "rw"
    conn = sqlite3.connect(f"{path.resolve().as_uri()}?mode={mode}", uri=True,
                           timeout=BUSY_SECONDS, isolation_level=None)
    conn.execute(f"PRAGMA busy_timeout = {int(BUSY_SECONDS * 1000)}")
    return conn


def _open_for_writing(path: Path) -> sqlite3.Connection:
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
        conn.execute("PRAGMA journal_mode = WAL")   # waits on busy_timeout like any write
        conn.execute("PRAGMA synchronous = FULL")   # the commit is the run's commit point
        with _transaction(conn):
            version = _schema_version(conn, path)
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
        version = _schema_version(conn, path)
        if version == SCHEMA_VERSION:
            return conn
        memory = sqlite3.connect(":memory:", isolation_level=None)
        conn.backup(memory)
    except BaseException:
        conn.close()
        raise
    conn.close()
    with _transaction(memory):
        migrate(memory, version)
    return memory


@contextmanager
def reading(path: Path) -> Iterator[sqlite3.Connection]:
    """Open the ledger for reading, with its problems reported as one-line user errors."""
    path = Path(path)
    if not path.exists():
        raise UserError(f"{path}: no run ledger here yet; 'castline run' records every run in it")
    with _ledger_errors(path):
        with closing(_open_for_reading(path)) as conn:
            yield conn


# ---------------------------------------------------------------- values in and out

def _plain(value):
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
    return [{k: _plain(v) for k, v in row.items()} for row in frame.to_dict(orient="records")]


def _insert(conn: sqlite3.Connection, table: str, rows: list[dict]) -> None:
    if not rows:
        return
    columns = list(rows[0])
    conn.executemany(f"INSERT INTO {table} ({', '.join(columns)}) VALUES "
                     f"({', '.join('?' for _ in columns)})",
                     [[_plain(row.get(c)) for c in columns] for row in rows])


def _frame_rows(frame: pd.DataFrame, columns: list[str], **fixed) -> list[dict]:
    """Return the frame's rows as dicts of the given columns (absent columns as NULL)."""
    if frame is None or not len(frame):
        return []
    present = [c for c in columns if c in frame.columns]
    return [{**fixed, **{c: row.get(c) for c in columns}}
            for row in frame[present].to_dict(orient="records")]


def _query(conn: sqlite3.Connection, sql: str, parameters=()) -> pd.DataFrame:
    cursor = conn.execute(sql, parameters)
    names = [d[0] for d in cursor.description]
    return pd.DataFrame(cursor.fetchall(), columns=names)


def spec_hash(resolved: dict) -> str:
    """Return the sha256 of the resolved spec, written as canonical JSON (keys sorted)."""
    text = json.dumps(resolved, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _canonical(value):
    """Return a cell as text that does not depend on how the column's type was read."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, float | int | np.number) and not isinstance(value, bool | np.bool_):
        number = float(value)
        return None if math.isnan(number) else repr(number)
    if isinstance(value, pd.Timestamp | datetime):
        return value.isoformat()
    return str(value)


def period_fingerprints(data: CheckedData) -> pd.DataFrame:
    """Return, per month of the input, its rows with and without actuals and a sha256 of them.

    The hash covers every column the spec uses (the target included), rows ordered by
    series; line numbers are left out, so adding rows elsewhere changes no month's hash.
    """
    internal = {PERIOD, SERIES, ROW}
    rows = pd.concat([data.history.assign(_actual=True), data.future.assign(_actual=False)],
                     ignore_index=True)
    columns = sorted(c for c in data.history.columns if c not in internal)
    out = []
    for period, group in rows.groupby(PERIOD, sort=True):
        group = group.sort_values(SERIES, kind="stable")
        cells = [[_canonical(v) for v in row] for row in group[columns].itertuples(index=False)]
        digest = hashlib.sha256(json.dumps([columns, cells]).encode("utf-8")).hexdigest()
        actual = int(group["_actual"].sum())
        out.append({"period": str(period), "actual_rows": actual,
                    "planned_rows": len(group) - actual, "sha256": digest})
    return pd.DataFrame(out, columns=["period", "actual_rows", "planned_rows", "sha256"])


# ---------------------------------------------------------------- recording a run

def _stated_methods(evaluation, forecast) -> dict[str, str]:
    """Return, per model, the interval method its forecasts were stated with in the summary."""
    from pipeline.core.intervals import trusted_method  # the summary's own rule
    table = forecast.forecast
    return {model: trusted_method(evaluation.coverage, model, rows)
            for model, rows in table.groupby("model", sort=False)} if len(table) else {}


def _run_rows(*, run_id: str, created: datetime, spec: Spec, resolved: dict, data: CheckedData,
              evaluation, forecast, track: TrackRecord | None, staging: Path,
              final: Path) -> dict[str, list[dict]]:
    """Return every row the ledger records for a run, table by table."""
    methods = _stated_methods(evaluation, forecast)
    forecasts = _frame_rows(forecast.forecast, ["model", "period", "series", "horizon", "forecast",
                                                *INTERVAL_COLUMNS], run_id=run_id)
    for row in forecasts:
        row["interval_method"] = methods.get(row["model"])
    realised = []
    if track is not None and len(track.realised):
        kept = track.realised[track.realised["recorded"]]
        realised = _frame_rows(kept, [c for c in REALISED_COLUMNS
                                      if c not in ("recorded", "forecast_created")], run_id=run_id)
    by_origin = evaluation.by_origin.assign(origin=evaluation.by_origin["origin"].astype(str)) \
        if len(evaluation.by_origin) else evaluation.by_origin
    coefficients = forecast.coefficients
    if "series" in coefficients.columns and coefficients["series"].notna().any():
        # A model per series has each term once per series: the series is part of its name.
        own = coefficients["series"].notna()
        coefficients = coefficients.assign(term=coefficients["term"].where(
            ~own, "series " + coefficients["series"].astype(str) + ": " + coefficients["term"]))
    return {
        "runs": [{
            "run_id": run_id, "created": created.isoformat(timespec="microseconds"),
            "spec_name": spec.name, "spec_hash": spec_hash(resolved),
            "spec_json": json.dumps(resolved, sort_keys=True, ensure_ascii=False),
            "input_sha256": data.raw.sha256, "castline_version": __version__,
            "first_period": str(data.first_period), "last_period": str(data.last_period),
            "history_rows": len(data.history), "future_rows": len(data.future),
            "recommended": evaluation.recommended, "select_by": evaluation.select_by,
            "beats_baseline": bool(evaluation.beats_baseline), "folder": str(final),
            "staging": str(staging), "state": "placing"}],
        "model_metrics": _frame_rows(evaluation.table, ["model", *SCORES, "p_value"], run_id=run_id),
        "origin_metrics": _frame_rows(by_origin, ["model", "origin", *SCORES], run_id=run_id),
        "horizon_metrics": _frame_rows(evaluation.by_horizon, ["model", "horizon", "n", "mae", "rmse",
                                                               "bias", "skill_vs_mean"], run_id=run_id),
        "forecasts": forecasts,
        "coefficients": _frame_rows(coefficients, ["model", "term", "estimate", "std_error"],
                                    run_id=run_id),
        "periods": _frame_rows(period_fingerprints(data), ["period", "actual_rows", "planned_rows",
                                                           "sha256"], run_id=run_id),
        "realised": realised,
    }


def _insert_run(conn: sqlite3.Connection, rows: dict[str, list[dict]]) -> None:
    """Insert a run's rows, every table, on the open transaction."""
    for table in ["runs", *[t for t in RUN_TABLES if t != "runs"]]:
        _insert(conn, table, rows.get(table, []))


def _delete_run(conn: sqlite3.Connection, run_id: str) -> None:
    for table in RUN_TABLES:
        conn.execute(f"DELETE FROM {table} WHERE run_id = ?", (run_id,))


def _place(staging: Path, final: Path) -> None:
    """Rename the run's hidden folder into place (done already if another run finished it)."""
    try:
        os.rename(staging, final)
    except FileNotFoundError:
        if not final.is_dir():
            raise


def _finish_interrupted_runs(conn: sqlite3.Connection) -> None:
    """Finish the runs recorded but not placed (a run stopped between its commit and its
    rename): rename their complete hidden folders into place; drop rows whose folder is gone.

    Called on an open write transaction, so two runs never finish the same run at once.
    """
    pending = conn.execute("SELECT run_id, folder, staging FROM runs WHERE state = 'placing'").fetchall()
    for run_id, folder, staging in pending:
        final, hidden = Path(folder), Path(staging)
        if not final.exists() and hidden.is_dir():
            try:
                os.rename(hidden, final)
            except OSError:
                continue   # still out of sight; a later run tries again
        if final.is_dir():
            conn.execute("UPDATE runs SET state = 'placed' WHERE run_id = ?", (run_id,))
        elif not hidden.exists():
            _delete_run(conn, run_id)


def _withdraw(conn: sqlite3.Connection, run_id: str, staging: Path, final: Path) -> None:
    """Undo a recorded run whose folder could not be placed: delete its rows, discard its folder."""
    try:
        with _transaction(conn):
            if final.is_dir():
                return
            _delete_run(conn, run_id)
    except sqlite3.Error:
        pass   # the row stays out of sight (no folder); the next run drops it
    discard = staging.with_name(staging.name.replace(".incomplete-", ".discarded-", 1))
    try:
        os.rename(staging, discard)   # out of reach of a run finishing interrupted runs
    except OSError:
        return
    shutil.rmtree(discard, ignore_errors=True)


def record_and_place(ledger_file: Path, staging: Path, final: Path, *, run_id: str,
                     created: datetime, spec: Spec, resolved: dict, data: CheckedData, evaluation,
                     forecast, track: TrackRecord | None) -> None:
    """Record the run in the ledger in one transaction, then rename its folder into place.

    See the module's docstring for why this order leaves no run half-visible.
    """
    rows = _run_rows(run_id=run_id, created=created, spec=spec, resolved=resolved, data=data,
                     evaluation=evaluation, forecast=forecast, track=track, staging=staging,
                     final=final)
    with _ledger_errors(ledger_file):
        conn = _open_for_writing(ledger_file)
        try:
            with _transaction(conn):
                _finish_interrupted_runs(conn)
                _insert_run(conn, rows)
            try:
                _place(staging, final)
            except BaseException:
                _withdraw(conn, run_id, staging, final)
                raise
            try:
                with _transaction(conn):
                    conn.execute("UPDATE runs SET state = 'placed' WHERE run_id = ?", (run_id,))
            except sqlite3.Error:
                pass   # the run is made and counts already (its folder exists)
        finally:
            conn.close()


# ---------------------------------------------------------------- reading runs

def visible_runs(conn: sqlite3.Connection, name: str | None = None) -> pd.DataFrame:
    """Return the runs that count, oldest first: placed, or recorded with their folder in place."""
    sql = ("SELECT run_id, created, spec_name, spec_hash, input_sha256, castline_version, "
           "first_period, last_period, history_rows, future_rows, recommended, select_by, "
           "beats_baseline, folder, state FROM runs")
    runs = _query(conn, sql + (" WHERE spec_name = ?" if name else "") + " ORDER BY created, run_id",
                  (name,) if name else ())
    counts = [state == "placed" or Path(folder).is_dir()
              for state, folder in zip(runs["state"], runs["folder"])]
    return runs[np.asarray(counts, bool)].drop(columns=["state"]).reset_index(drop=True)


def _rows_of(conn: sqlite3.Connection, table: str, run_ids, extra: str = "",
             parameters: tuple = ()) -> pd.DataFrame:
    """Return a table's rows for the given runs."""
    run_ids = list(run_ids)
    if not run_ids:
        return _query(conn, f"SELECT * FROM {table} WHERE 0")
    frames = []
    for start in range(0, len(run_ids), 500):   # SQLite caps the parameters of one statement
        chunk = run_ids[start:start + 500]
        marks = ", ".join("?" for _ in chunk)
        frames.append(_query(conn, f"SELECT * FROM {table} WHERE run_id IN ({marks}){extra}",
                             (*chunk, *parameters)))
    return pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0]


def _latest_realised(conn: sqlite3.Connection, runs: pd.DataFrame) -> pd.DataFrame:
    """Return each earlier forecast's latest score: the row recorded by the newest run that counts."""
    scored = _rows_of(conn, "realised", runs["run_id"])
    if not len(scored):
        return scored
    order = dict(zip(runs["run_id"], range(len(runs))))
    scored = scored[scored["forecast_run_id"].isin(order)].copy()
    scored["_order"] = scored["run_id"].map(order)
    scored = scored.sort_values("_order", kind="stable")
    latest = scored.drop_duplicates(["forecast_run_id", "model", "period", "series"], keep="last")
    return latest.drop(columns=["_order"]).reset_index(drop=True)


# ---------------------------------------------------------------- the track record

@dataclass(frozen=True)
class TrackRecord:
    """How the forecasts of earlier runs of a spec turned out against this run's actuals,
    and the warnings that follow; read from the ledger before the run is published."""

    ledger: Path
    realised: pd.DataFrame          # one row per earlier forecast whose month now has an actual
    by_horizon: pd.DataFrame        # per earlier run, model and months ahead
    earlier_runs: int
    recommended: dict[str, str] = field(default_factory=dict)   # earlier run → its recommended model
    warnings: list[str] = field(default_factory=list)
    runs_without_skill: int = 0     # runs in a row, this one included, not beating the baseline


def _empty_realised() -> pd.DataFrame:
    return pd.DataFrame(columns=REALISED_COLUMNS)


def score_forecasts(forecasts: pd.DataFrame, actuals: pd.DataFrame,
                    expected: pd.DataFrame) -> pd.DataFrame:
    """Return each forecast that has an actual, scored: error (forecast − actual), whether
    the actual fell inside the stated 80% and 95% intervals and inside the backtest's 95%
    range of errors at that horizon, and the MAE the backtest led the user to expect.

    ``forecasts`` has the ledger's forecast columns and forecast_created; ``actuals`` has
    period, series and actual; ``expected`` has run_id, model, horizon and expected_mae
    (horizon NaN for a model's overall MAE, used where its horizon was not measured).
    """
    if not len(forecasts):
        return _empty_realised().drop(columns=["recorded"])
    scored = forecasts.merge(actuals, on=["period", "series"], how="inner")
    if not len(scored):
        return _empty_realised().drop(columns=["recorded"])
    scored["error"] = scored["forecast"] - scored["actual"]
    stated = scored["interval_method"].astype(object).where(scored["interval_method"].notna(), None)
    fallback = np.where(scored["empirical_low_95"].notna(), "empirical", "analytic")
    scored["interval_method"] = [s if s else f for s, f in zip(stated, fallback)]
    empirical = scored["interval_method"].to_numpy() == "empirical"
    for level in ("80", "95"):
        for side in ("low", "high"):
            scored[f"{side}_{level}"] = np.where(empirical, scored[f"empirical_{side}_{level}"],
                                                 scored[f"analytic_{side}_{level}"]).astype(float)
        low, high = scored[f"low_{level}"], scored[f"high_{level}"]
        inside = (scored["actual"] >= low) & (scored["actual"] <= high)
        scored[f"inside_{level}"] = inside.astype(object).where(low.notna() & high.notna(), None)
    # The backtest's 95% range of errors at the horizon: the empirical interval's offsets
    # (built from the backtest's own errors), else the stated 95% interval's.
    use_empirical = scored["empirical_low_95"].notna()
    high_bound = scored["empirical_high_95"].where(use_empirical, scored["high_95"])
    low_bound = scored["empirical_low_95"].where(use_empirical, scored["low_95"])
    scored["backtest_low_95"] = scored["forecast"] - high_bound
    scored["backtest_high_95"] = scored["forecast"] - low_bound
    within = (scored["error"] >= scored["backtest_low_95"]) & (scored["error"] <= scored["backtest_high_95"])
    scored["within_backtest_95"] = within.astype(object).where(scored["backtest_low_95"].notna(), None)
    at_horizon = expected[expected["horizon"].notna()].astype({"horizon": int})
    overall = expected[expected["horizon"].isna()].drop(columns=["horizon"])
    scored = scored.merge(at_horizon, left_on=["forecast_run_id", "model", "horizon"],
                          right_on=["run_id", "model", "horizon"], how="left").drop(columns=["run_id"])
    scored = scored.merge(overall.rename(columns={"expected_mae": "_overall"}),
                          left_on=["forecast_run_id", "model"], right_on=["run_id", "model"],
                          how="left").drop(columns=["run_id"])
    scored["expected_mae"] = scored["expected_mae"].fillna(scored["_overall"])
    columns = [c for c in REALISED_COLUMNS if c != "recorded"]
    return scored[columns].sort_values(["forecast_created", "model", "period", "series"],
                                       kind="stable").reset_index(drop=True)


def summarise_realised(realised: pd.DataFrame) -> pd.DataFrame:
    """Return, per forecast run, model and months ahead: how many forecasts have actuals,
    their MAE and bias against the MAE the backtest expected, and how often the actual
    fell inside the stated 80% and 95% intervals and the backtest's 95% range."""
    columns = ["forecast_run_id", "forecast_created", "model", "horizon", "n", "realised_mae",
               "expected_mae", "realised_bias", "inside_80", "inside_95", "within_backtest_95"]
    if not len(realised):
        return pd.DataFrame(columns=columns)
    def share(values: pd.Series) -> float:
        known = values.dropna()
        return float(known.astype(bool).mean()) if len(known) else float("nan")

    rows = []
    for (run_id, created, model, horizon), group in realised.groupby(
            ["forecast_run_id", "forecast_created", "model", "horizon"], sort=False):
        errors = group["error"].astype(float)
        expected = group["expected_mae"].astype(float).dropna()
        rows.append({"forecast_run_id": run_id, "forecast_created": created, "model": model,
                     "horizon": int(horizon), "n": len(group),
                     "realised_mae": float(errors.abs().mean()),
                     "expected_mae": float(expected.iloc[0]) if len(expected) else float("nan"),
                     "realised_bias": float(errors.mean()),
                     "inside_80": share(group["inside_80"]), "inside_95": share(group["inside_95"]),
                     "within_backtest_95": share(group["within_backtest_95"])})
    return pd.DataFrame(rows, columns=columns).sort_values(
        ["forecast_created", "forecast_run_id", "model", "horizon"], kind="stable").reset_index(drop=True)


def _expected_errors(conn: sqlite3.Connection, run_ids) -> pd.DataFrame:
    """Return the backtest MAE per run, model and horizon, and overall (horizon NaN)."""
    horizons = _rows_of(conn, "horizon_metrics", run_ids)[["run_id", "model", "horizon", "mae"]]
    overall = _rows_of(conn, "model_metrics", run_ids)[["run_id", "model", "mae"]].assign(horizon=np.nan)
    frame = pd.concat([horizons.astype({"horizon": float}), overall], ignore_index=True)
    return frame.rename(columns={"mae": "expected_mae"})


def _earlier_forecasts(conn: sqlite3.Connection, runs: pd.DataFrame, through: str) -> pd.DataFrame:
    """Return the forecasts the runs made for months up to `through`, with each run's time."""
    forecasts = _rows_of(conn, "forecasts", runs["run_id"], " AND period <= ?", (through,))
    created = dict(zip(runs["run_id"], runs["created"]))
    return forecasts.rename(columns={"run_id": "forecast_run_id"}).assign(
        forecast_created=lambda t: t["forecast_run_id"].map(created))


def _actuals(spec: Spec, data: CheckedData) -> pd.DataFrame:
    return pd.DataFrame({"period": data.history[PERIOD].astype(str).to_numpy(),
                         "series": data.history[SERIES].astype(str).to_numpy(),
                         "actual": data.history[spec.target].to_numpy(float)})


def _signed(value: float) -> str:
    return f"{value:+,.4g}"


def _realised_warning(realised: pd.DataFrame, runs: pd.DataFrame) -> str | None:
    """Return a warning when forecasts of the latest run that has actuals now, from the model it
    recommended, missed by more than the backtest's 95% range of errors."""
    if not len(realised):
        return None
    latest = realised.sort_values(["forecast_created", "forecast_run_id"]).iloc[-1]["forecast_run_id"]
    recommended = runs.set_index("run_id")["recommended"].get(latest)
    rows = realised[(realised["forecast_run_id"] == latest) & (realised["model"] == recommended)]
    judged = rows[rows["within_backtest_95"].notna()]
    outside = judged[~judged["within_backtest_95"].astype(bool)]
    if not len(outside):
        return None
    shown = "; ".join(f"{r.period} {r.series} ({r.horizon} month(s) ahead): error {_signed(r.error)} "
                      f"outside {_signed(r.backtest_low_95)} to {_signed(r.backtest_high_95)}"
                      for r in outside.head(3).itertuples())
    more = f"; and {len(outside) - 3} more" if len(outside) > 3 else ""
    return (f"realised accuracy: {len(outside)} of {len(judged)} forecasts from {latest} "
            f"({recommended}, the model it recommended) missed by more than the backtest's 95% "
            f"range of errors (about 1 in 20 would by chance; error = forecast − actual): "
            f"{shown}{more}. The model may be getting worse, or the months just past were unusual.")


def _skill_warning(spec: Spec, runs: pd.DataFrame, beats_now: bool) -> tuple[str | None, int]:
    """Return a warning when the recommended model has not beaten the mean baseline in the last
    N runs (this one included), and how many runs in a row it has not."""
    record = [bool(b) for b in runs["beats_baseline"]] + [bool(beats_now)]
    streak = 0
    for beat in reversed(record):
        if beat:
            break
        streak += 1
    wanted = spec.output.warn_after_runs_without_skill
    if streak < wanted:
        return None, streak
    since = runs["created"].iloc[len(runs) - wanted + 1][:10] if wanted > 1 else "this run"
    return (f"the recommended model has not beaten the mean baseline in the last {wanted} run(s) "
            f"(since {since}; {streak} in a row): the plain average forecasts as well; review the "
            f"drivers (output.warn_after_runs_without_skill: {wanted})"), streak


def track_record(spec: Spec, data: CheckedData, evaluation, *,
                 output_folder: str | Path | None = None) -> TrackRecord:
    """Return how earlier runs' forecasts turned out against this run's actuals, and the
    warnings for this run; reads the ledger (never writes it).

    A damaged ledger stops the run here, before anything is written.
    """
    path = ledger_path(spec, output_folder)
    if not path.exists() or (path.is_file() and path.stat().st_size == 0):
        runs = pd.DataFrame(columns=["run_id", "created", "recommended", "beats_baseline"])
        realised, latest = _empty_realised(), pd.DataFrame()
    else:
        with reading(path) as conn:
            runs = visible_runs(conn, spec.name)
            forecasts = _earlier_forecasts(conn, runs, str(data.last_period))
            expected = _expected_errors(conn, runs["run_id"])
            latest = _latest_realised(conn, runs)
        realised = score_forecasts(forecasts, _actuals(spec, data), expected)
    if len(realised) and len(latest):
        # Record a score when it is new, or when the actual was revised since it was recorded.
        key = ["forecast_run_id", "model", "period", "series"]
        before = realised.merge(latest[key + ["actual"]].rename(columns={"actual": "_before"}),
                                on=key, how="left")["_before"].astype(float).to_numpy()
        realised["recorded"] = np.isnan(before) | (before != realised["actual"].to_numpy(float))
    elif len(realised):
        realised["recorded"] = True
    else:
        realised = _empty_realised()
    warnings = [w for w in [_realised_warning(realised, runs)] if w]
    skill, streak = _skill_warning(spec, runs, evaluation.beats_baseline)
    if skill:
        warnings.append(skill)
    return TrackRecord(ledger=path, realised=realised, by_horizon=summarise_realised(realised),
                       earlier_runs=len(runs), recommended=dict(zip(runs["run_id"], runs["recommended"])),
                       warnings=warnings, runs_without_skill=streak)


def _markdown(frame: pd.DataFrame) -> str:
    def cell(value) -> str:
        if isinstance(value, float):
            return "n/a" if not math.isfinite(value) else f"{value:.4g}"
        return str(value)
    lines = ["| " + " | ".join(frame.columns) + " |", "|" + "|".join(" --- " for _ in frame.columns) + "|"]
    lines += ["| " + " | ".join(cell(v) for v in row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join(lines)


def track_record_section(track: TrackRecord, runs_shown: int = 12) -> str:
    """Return the summary's track-record section in Markdown."""
    lines = ["## Track record", ""]
    lines += [f"- **Warning:** {w}" for w in track.warnings]
    if track.warnings:
        lines.append("")
    if not track.earlier_runs:
        lines += [f"This is the first run of this spec in the ledger `{track.ledger}`; later runs "
                  "score its forecasts as their months' actuals arrive.", ""]
        return "\n".join(lines)
    lines += [f"{track.earlier_runs} earlier run(s) of this spec are in the ledger `{track.ledger}`."]
    table = track.by_horizon
    table = table[[track.recommended.get(r) == m for r, m in zip(table["forecast_run_id"], table["model"])]]
    if not len(table):
        lines += ["None of their forecasts has an actual in this run's data yet.", ""]
        return "\n".join(lines)
    runs = list(dict.fromkeys(table["forecast_run_id"]))[-runs_shown:]
    shown = table[table["forecast_run_id"].isin(runs)]
    shown = pd.DataFrame({
        "run": shown["forecast_run_id"], "model": shown["model"], "months ahead": shown["horizon"],
        "forecasts": shown["n"], "realised MAE": shown["realised_mae"],
        "expected MAE": shown["expected_mae"], "realised bias": shown["realised_bias"],
        "inside 80%": shown["inside_80"], "inside 95%": shown["inside_95"]})
    lines += ["", "How their forecasts turned out now that the months have actuals (each run's "
              "recommended model; expected MAE is that run's backtest MAE at the same months "
              "ahead; bias is forecast − actual; inside is the share of actuals within the "
              "interval the run stated). Every scored forecast is in realised.csv.", "",
              _markdown(shown), ""]
    return "\n".join(lines)


def with_track_record(summary: str, track: TrackRecord | None) -> str:
    """Return the summary with the track-record section put before its data section."""
    if track is None:
        return summary
    section = track_record_section(track) + "\n"
    for heading in ("\n## Data\n", "\n## Cautions\n"):
        if heading in summary:
            at = summary.index(heading) + 1
            return summary[:at] + section + summary[at:]
    return summary.rstrip("\n") + "\n\n" + section


# ---------------------------------------------------------------- history

HISTORY_METRICS = ["mae", "rmse", "mape", "smape", "wape", "mase", "r2", "bias", "skill_vs_mean"]
CHANGED = ["mae", "rmse", "skill_vs_mean"]   # the headline metrics, with the change from the run before


def metrics_history(conn: sqlite3.Connection, name: str | None = None) -> pd.DataFrame:
    """Return each run's backtest metrics per model, oldest run first, with the change in
    MAE, RMSE and skill from the previous run of the same spec and model."""
    runs = visible_runs(conn, name)
    metrics = _rows_of(conn, "model_metrics", runs["run_id"])
    table = runs[["spec_name", "run_id", "created", "last_period", "recommended"]].merge(
        metrics, on="run_id", how="inner")
    table["recommended"] = table["model"] == table["recommended"]
    table["_run"] = table["run_id"].map(dict(zip(runs["run_id"], range(len(runs)))))
    table["_baseline_last"] = table["model"] != BASELINE
    table = table.sort_values(["_run", "_baseline_last", "model"], kind="stable")
    for metric in CHANGED:
        table[metric] = table[metric].astype(float)
        table[f"{metric}_change"] = table.groupby(["spec_name", "model"], sort=False)[metric].diff()
    columns = ["spec_name", "run_id", "created", "last_period", "model", "recommended", "n"]
    for metric in HISTORY_METRICS:
        columns += [metric] + ([f"{metric}_change"] if metric in CHANGED else [])
    return table[columns].reset_index(drop=True)


def realised_history(conn: sqlite3.Connection, name: str | None = None) -> pd.DataFrame:
    """Return how each run's forecasts turned out, per model and months ahead, from the
    latest score of each forecast (later runs rescore a month whose actual was revised)."""
    runs = visible_runs(conn, name)
    latest = _latest_realised(conn, runs)
    if not len(latest):
        return summarise_realised(latest).assign(spec_name=[], recommended=[], scored_through=[])
    created = dict(zip(runs["run_id"], runs["created"]))
    latest["forecast_created"] = latest["forecast_run_id"].map(created)
    table = summarise_realised(latest)
    by_run = runs.set_index("run_id")
    table.insert(0, "spec_name", table["forecast_run_id"].map(by_run["spec_name"]))
    table.insert(4, "recommended", [by_run["recommended"].get(r) == m
                                    for r, m in zip(table["forecast_run_id"], table["model"])])
    through = latest.groupby("forecast_run_id")["run_id"].agg(lambda ids: max(ids, key=created.get))
    table["scored_through"] = table["forecast_run_id"].map(through).map(by_run["last_period"])
    return table


def plot_history(table: pd.DataFrame, metric: str, path: Path, title: str) -> None:
    """Draw a metric per model (and spec) across the run dates into an image file."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    figure = Figure(figsize=(8, 4.5), layout="constrained")
    canvas = FigureCanvasAgg(figure)
    supported = canvas.get_supported_filetypes()
    suffix = path.suffix.lower().lstrip(".")
    if suffix not in supported:
        raise UserError(f"{path}: cannot draw a plot of type '.{suffix}'; use one of "
                        f"{', '.join('.' + s for s in sorted(supported))}")
    axes = figure.subplots()
    several = table["spec_name"].nunique() > 1
    for (name, model), rows in table.groupby(["spec_name", "model"], sort=False):
        if metric == "skill_vs_mean" and model == BASELINE:
            continue   # 0 by definition: the line drawn at 0 stands for it
        when = pd.to_datetime(rows["created"], utc=True, format="ISO8601")
        axes.plot(when, rows[metric].astype(float), marker="o",
                  label=f"{name}: {model}" if several else model)
    axes.set_title(title)
    axes.set_xlabel("run date (UTC)")
    axes.set_ylabel(metric.replace("_", " "))
    if metric == "skill_vs_mean":
        axes.axhline(0, color="grey", linewidth=0.8)
    axes.legend()
    figure.autofmt_xdate()
    try:
        canvas.print_figure(path)
    except OSError as exc:
        raise UserError(f"{path}: cannot write the plot: {exc.strerror or exc}") from None


# ---------------------------------------------------------------- compare

def find_run(conn: sqlite3.Connection, reference: str, ledger_file: Path) -> pd.Series:
    """Return the run a reference names: its id, or enough of its start to be unique."""
    runs = visible_runs(conn)
    exact = runs[runs["run_id"] == reference]
    if len(exact):
        return exact.iloc[0]
    matches = runs[runs["run_id"].str.startswith(reference) | runs["run_id"].str.endswith(reference)]
    if len(matches) == 1:
        return matches.iloc[0]
    if len(matches) > 1:
        raise UserError(f"'{reference}' matches {len(matches)} runs in {ledger_file} "
                        f"({', '.join(matches['run_id'].head(3))}, ...); give more of the run id")
    raise UserError(f"{ledger_file}: no run '{reference}' (see 'castline history --ledger "
                    f"{ledger_file}')")


def flatten(value, prefix: str = "") -> dict[str, object]:
    """Return a nested spec as key paths (``validation.last_periods``, ``models[1].kind``)."""
    if isinstance(value, dict):
        out: dict[str, object] = {}
        for key, item in value.items():
            out.update(flatten(item, f"{prefix}.{key}" if prefix else str(key)))
        return out or {prefix: {}}
    if isinstance(value, list):
        out = {}
        for index, item in enumerate(value):
            out.update(flatten(item, f"{prefix}[{index}]"))
        return out or {prefix: []}
    return {prefix: value}


def spec_differences(earlier: dict, later: dict) -> pd.DataFrame:
    """Return the keys whose values differ between two resolved specs."""
    before, after = flatten(earlier), flatten(later)
    missing = object()
    rows = []
    for key in list(dict.fromkeys([*before, *after])):
        old, new = before.get(key, missing), after.get(key, missing)
        if old != new:
            rows.append({"key": key, "earlier": "(not set)" if old is missing else old,
                         "later": "(not set)" if new is missing else new})
    return pd.DataFrame(rows, columns=["key", "earlier", "later"])


def month_changes(earlier: pd.DataFrame, later: pd.DataFrame) -> pd.DataFrame:
    """Return the months whose rows differ between two runs' inputs, each with what changed:
    actuals added, actuals revised, actuals removed, a new month to forecast, or the planned
    drivers of a month to forecast changed."""
    columns = ["period", "change", "earlier_actual_rows", "later_actual_rows"]
    both = earlier.merge(later, on="period", how="outer", suffixes=("_earlier", "_later"))
    rows = []
    for row in both.sort_values("period").itertuples(index=False):
        old_actual = 0 if pd.isna(row.actual_rows_earlier) else int(row.actual_rows_earlier)
        new_actual = 0 if pd.isna(row.actual_rows_later) else int(row.actual_rows_later)
        if row.sha256_earlier == row.sha256_later:
            continue
        if old_actual == 0 and new_actual > 0:
            change = "actuals added"
        elif old_actual > 0 and new_actual == 0:
            change = "actuals removed"
        elif old_actual > 0:
            change = "actuals revised" if new_actual == old_actual else "actuals added and revised"
        elif pd.isna(row.sha256_earlier):
            change = "new month to forecast"
        elif pd.isna(row.sha256_later):
            change = "month to forecast dropped"
        else:
            change = "planned drivers changed"
        rows.append({"period": row.period, "change": change, "earlier_actual_rows": old_actual,
                     "later_actual_rows": new_actual})
    return pd.DataFrame(rows, columns=columns)


def coefficient_moves(earlier: pd.DataFrame, later: pd.DataFrame, top: int) -> pd.DataFrame:
    """Return the coefficients that moved most between two runs: by the change measured in the
    earlier run's standard errors where it has them, else by the size of the change."""
    both = earlier.merge(later, on=["model", "term"], how="outer", suffixes=("_earlier", "_later"))
    both["change"] = both["estimate_later"] - both["estimate_earlier"]
    both["change_in_se"] = both["change"] / both["std_error_earlier"]
    both["_rank"] = both["change_in_se"].abs().fillna(-1)
    both["_size"] = both["change"].abs().fillna(np.inf)   # a term added or dropped ranks high
    # Unchanged terms are not moves (added or dropped ones are), nor are terms left out of
    # both fits (a term constant within a series, in a model per series).
    both = both[both["change"].ne(0)
                & ~(both["estimate_earlier"].isna() & both["estimate_later"].isna())]
    both = both.sort_values(["_rank", "_size"], ascending=False, kind="stable")
    columns = ["model", "term", "estimate_earlier", "estimate_later", "change", "change_in_se"]
    return both[columns].rename(columns={"estimate_earlier": "earlier", "estimate_later": "later"}) \
        .head(top).reset_index(drop=True)


def metric_changes(earlier: pd.DataFrame, later: pd.DataFrame) -> pd.DataFrame:
    """Return each model's headline metrics in the two runs and the change."""
    both = earlier.merge(later, on="model", how="outer", suffixes=("_earlier", "_later"))
    table = pd.DataFrame({"model": both["model"]})
    for metric in CHANGED:
        table[f"{metric}_earlier"] = both[f"{metric}_earlier"].astype(float)
        table[f"{metric}_later"] = both[f"{metric}_later"].astype(float)
        table[f"{metric}_change"] = table[f"{metric}_later"] - table[f"{metric}_earlier"]
    order = {BASELINE: 0}
    return table.sort_values("model", key=lambda m: m.map(lambda v: order.get(v, 1)),
                             kind="stable").reset_index(drop=True)


@dataclass(frozen=True)
class Comparison:
    """What changed between two runs, the earlier one first."""

    earlier: dict
    later: dict
    swapped: bool                   # the runs were given newest first
    spec: pd.DataFrame              # key, earlier, later
    months: pd.DataFrame            # period, change, earlier/later rows with actuals
    months_recorded: bool           # both runs have per-month fingerprints
    coefficients: pd.DataFrame
    metrics: pd.DataFrame

    def as_dict(self) -> dict:
        """Return the comparison as plain JSON-ready values."""
        records = json_records
        return {"earlier": self.earlier, "later": self.later, "given_newest_first": self.swapped,
                "spec_changes": records(self.spec), "data": self.data_summary(),
                "months": records(self.months) if self.months_recorded else None,
                "coefficient_moves": records(self.coefficients), "metric_changes": records(self.metrics)}

    def data_summary(self) -> dict:
        """Return the change in the input: same file bytes or not, and rows with actuals."""
        months = self.months
        counted = months.groupby("change").size().to_dict() if self.months_recorded else {}
        return {"same_input": self.earlier["input_sha256"] == self.later["input_sha256"],
                "rows_with_actuals_earlier": self.earlier["history_rows"],
                "rows_with_actuals_later": self.later["history_rows"],
                "rows_with_actuals_added": int(self.later["history_rows"]) - int(self.earlier["history_rows"]),
                "months_by_change": {k: int(v) for k, v in counted.items()}}


RUN_FIELDS = ["run_id", "created", "spec_name", "spec_hash", "input_sha256", "castline_version",
              "first_period", "last_period", "history_rows", "future_rows", "recommended", "folder"]


def compare_runs(conn: sqlite3.Connection, first: str, second: str, ledger_file: Path,
                 top: int = 10) -> Comparison:
    """Return what changed between two runs of the ledger: spec keys, data, coefficients, metrics."""
    one, two = find_run(conn, first, ledger_file), find_run(conn, second, ledger_file)
    swapped = (one["created"], one["run_id"]) > (two["created"], two["run_id"])
    earlier, later = (two, one) if swapped else (one, two)
    ids = [earlier["run_id"], later["run_id"]]
    specs = dict(conn.execute("SELECT run_id, spec_json FROM runs WHERE run_id IN (?, ?)", ids).fetchall())
    periods = _rows_of(conn, "periods", ids)
    coefficients = _rows_of(conn, "coefficients", ids)
    metrics = _rows_of(conn, "model_metrics", ids)

    def of(frame: pd.DataFrame, run_id: str) -> pd.DataFrame:
        return frame[frame["run_id"] == run_id].drop(columns=["run_id"])

    recorded = all(len(of(periods, r)) for r in ids)
    months = month_changes(of(periods, ids[0]), of(periods, ids[1])) if recorded else \
        pd.DataFrame(columns=["period", "change", "earlier_actual_rows", "later_actual_rows"])
    return Comparison(
        earlier={k: _plain(earlier[k]) for k in RUN_FIELDS},
        later={k: _plain(later[k]) for k in RUN_FIELDS}, swapped=bool(swapped),
        spec=spec_differences(json.loads(specs[ids[0]]), json.loads(specs[ids[1]])),
        months=months, months_recorded=recorded,
        coefficients=coefficient_moves(of(coefficients, ids[0]), of(coefficients, ids[1]), top),
        metrics=metric_changes(of(metrics, ids[0]), of(metrics, ids[1])))
