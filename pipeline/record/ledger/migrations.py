"""The ledger's schema: one migration per version, each upgrading the one before.

Never edit a shipped migration: users hold files made by it. A new table or
column is a new entry and a raised SCHEMA_VERSION."""

from __future__ import annotations

import sqlite3
from pathlib import Path

from pipeline.core.errors import UserError
from pipeline.core.version import __version__

SCHEMA_VERSION = 2


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


def schema_version(conn: sqlite3.Connection, path: Path) -> int:
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
