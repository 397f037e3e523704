"""Reading recorded runs: the runs that count, and the rows of their tables."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.record.ledger.checks import check_rows
from pipeline.record.ledger.store import query


def specs_on_input(conn: sqlite3.Connection, input_sha256: str) -> list[str]:
    """Return the resolved spec (JSON text) of every recorded run on the input of this sha256."""
    return query(conn, "SELECT spec_json FROM runs WHERE input_sha256 = ?",
                 (input_sha256,))["spec_json"].tolist()


def visible_runs(conn: sqlite3.Connection, name: str | None = None) -> pd.DataFrame:
    """Return the runs that count, oldest first: placed, or recorded with their folder in place."""
    sql = ("SELECT run_id, created, spec_name, spec_hash, input_sha256, castline_version, "
           "first_period, last_period, history_rows, future_rows, recommended, select_by, "
           "beats_baseline, folder, state FROM runs")
    runs = check_rows(query(conn, sql + (" WHERE spec_name = ?" if name else "") + " ORDER BY created, run_id",
                            (name,) if name else ()), "runs")
    counts = [state == "placed" or Path(folder).is_dir()
              for state, folder in zip(runs["state"], runs["folder"])]
    return runs[np.asarray(counts, bool)].drop(columns=["state"]).reset_index(drop=True)


def rows_of(conn: sqlite3.Connection, table: str, run_ids, extra: str = "",
             parameters: tuple = ()) -> pd.DataFrame:
    """Return a table's rows for the given runs."""
    run_ids = list(run_ids)
    if not run_ids:
        return check_rows(query(conn, f"SELECT * FROM {table} WHERE 0"), table)
    frames = []
    for start in range(0, len(run_ids), 500):   # SQLite caps the parameters of one statement
        chunk = run_ids[start:start + 500]
        marks = ", ".join("?" for _ in chunk)
        frames.append(query(conn, f"SELECT * FROM {table} WHERE run_id IN ({marks}){extra}",
                             (*chunk, *parameters)))
    return check_rows(pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0], table)


def latest_realised(conn: sqlite3.Connection, runs: pd.DataFrame) -> pd.DataFrame:
    """Return each earlier forecast's latest score: the row recorded by the newest run that counts."""
    scored = rows_of(conn, "realised", runs["run_id"])
    if not len(scored):
        return scored
    order = dict(zip(runs["run_id"], range(len(runs))))
    scored = scored[scored["forecast_run_id"].isin(order)].copy()
    scored["_order"] = scored["run_id"].map(order)
    scored = scored.sort_values("_order", kind="stable")
    latest = scored.drop_duplicates(["forecast_run_id", "model", "period", "series"], keep="last")
    return latest.drop(columns=["_order"]).reset_index(drop=True)
