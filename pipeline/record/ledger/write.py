"""Recording a run: its rows in one transaction, then its folder renamed into place."""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
from datetime import datetime
from pathlib import Path

import pandas as pd

from pipeline.core.version import __version__
from pipeline.record.ledger.fingerprints import period_fingerprints
from pipeline.record.ledger.store import (
    INTERVAL_COLUMNS,
    REALISED_COLUMNS,
    RUN_TABLES,
    SCORES,
    frame_rows,
    insert,
    ledger_errors,
    open_for_writing,
    spec_hash,
    transaction,
)
from pipeline.spec import Spec
from pipeline.stages.check import CheckedData


def _stated_methods(evaluation, forecast) -> dict[str, str]:
    """Return, per model, the interval method its forecasts were stated with in the summary."""
    from pipeline.core.intervals import trusted_method  # the summary's own rule
    table = forecast.forecast
    return {model: trusted_method(evaluation.coverage, model, rows)
            for model, rows in table.groupby("model", sort=False)} if len(table) else {}


def run_rows(*, run_id: str, created: datetime, spec: Spec, resolved: dict, data: CheckedData,
              evaluation, forecast, realised: pd.DataFrame | None, staging: Path,
              final: Path, periods: pd.DataFrame | None = None) -> dict[str, list[dict]]:
    """Return every row the ledger records for a run, table by table (``periods``: the data's
    month fingerprints, ``period_fingerprints(data)``, when made already)."""
    methods = _stated_methods(evaluation, forecast)
    forecasts = frame_rows(forecast.forecast, ["model", "period", "series", "horizon", "forecast",
                                                *INTERVAL_COLUMNS], run_id=run_id)
    for row in forecasts:
        row["interval_method"] = methods.get(row["model"])
    scored = []
    if realised is not None and len(realised):
        kept = realised[realised["recorded"]]
        scored = frame_rows(kept, [c for c in REALISED_COLUMNS
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
            # Empty when the validation gave no test: the run says nothing either way.
            "beats_baseline": bool(evaluation.beats_baseline) if evaluation.tested else None,
            "folder": str(final),
            "staging": str(staging), "state": "placing"}],
        "model_metrics": frame_rows(evaluation.table, ["model", *SCORES, "p_value"], run_id=run_id),
        "origin_metrics": frame_rows(by_origin, ["model", "origin", *SCORES], run_id=run_id),
        "horizon_metrics": frame_rows(evaluation.by_horizon, ["model", "horizon", "n", "mae", "rmse",
                                                               "bias", "skill_vs_mean"], run_id=run_id),
        "forecasts": forecasts,
        "coefficients": frame_rows(coefficients, ["model", "term", "estimate", "std_error"],
                                    run_id=run_id),
        "periods": frame_rows(period_fingerprints(data) if periods is None else periods,
                              ["period", "actual_rows", "planned_rows", "sha256"], run_id=run_id),
        "realised": scored,
    }


def _insert_run(conn: sqlite3.Connection, rows: dict[str, list[dict]]) -> None:
    """Insert a run's rows, every table, on the open transaction."""
    for table in ["runs", *[t for t in RUN_TABLES if t != "runs"]]:
        insert(conn, table, rows.get(table, []))


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
        with transaction(conn):
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
                     rows: dict[str, list[dict]]) -> None:
    """Record the run in the ledger in one transaction, then rename its folder into place.

    ``rows`` are the run's rows as ``run_rows`` made them (while the run's pages were drawn).

    See the module's docstring for why this order leaves no run half-visible.
    """
    with ledger_errors(ledger_file):
        conn = open_for_writing(ledger_file)
        try:
            with transaction(conn):
                _finish_interrupted_runs(conn)
                _insert_run(conn, rows)
            try:
                _place(staging, final)
            except BaseException:
                _withdraw(conn, run_id, staging, final)
                raise
            try:
                with transaction(conn):
                    conn.execute("UPDATE runs SET state = 'placed' WHERE run_id = ?", (run_id,))
            except sqlite3.Error:
                pass   # the run is made and counts already (its folder exists)
        finally:
            conn.close()
