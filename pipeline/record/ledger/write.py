"""Recording a run: its rows in one transaction, then its folder renamed into place."""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
import time
from datetime import datetime
from pathlib import Path

import pandas as pd

from pipeline.core import landing
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
            "first_period": data.cadence.label(data.first_period),
            "last_period": data.cadence.label(data.last_period),
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


def _same_folder(one: Path, other: Path) -> bool:
    return os.path.realpath(one) == os.path.realpath(other)


def _plain_name(run_id) -> bool:
    """Whether a ledger's run id can name a folder inside the output folder and nothing else."""
    text = str(run_id)
    return bool(text) and text not in (".", "..") and not any(c in text for c in ("/", "\\", "\0"))


def _refusal(run_id: str, final: Path, hidden: Path, output: Path) -> str | None:
    """Return why a ``placing`` row may not be finished by a run into ``output`` (None: it may).

    A ledger is a file anyone with access can edit, so its paths are not trusted. The only
    move allowed is the one castline itself would have made: this output folder's hidden
    ``.incomplete-<run id>`` folder, a real folder holding that run's own metrics.json, renamed
    to ``<run id>`` in the same folder. (A row of another output folder sharing the ledger is
    finished by a run into that folder.)
    """
    if not _plain_name(run_id) or hidden.name != f".incomplete-{run_id}" or final.name != run_id \
            or not _same_folder(hidden.parent, final.parent) or not _same_folder(hidden.parent, output):
        return "its two folders are not a hidden folder and the run folder named after it, side by side"
    if not hidden.is_dir() or hidden.is_symlink():
        return "its hidden folder is not a folder"
    try:
        own = json.loads((hidden / "metrics.json").read_text(encoding="utf-8")).get("run_id")
    except (OSError, ValueError, AttributeError):
        own = None
    if own != run_id:
        return "its hidden folder does not hold that run's metrics.json"
    return None


STALE_AFTER = 24 * 3600   # seconds: a hidden run folder untouched this long belongs to no live run


def _clear_stale(output: Path, placing: set[str]) -> list[str]:
    """Remove the hidden folders of runs killed before their ledger commit (``.incomplete-*``,
    and ``.discarded-*`` a failed run could not finish removing) older than a day that no
    ledger row is placing; return a note naming them. A live run's hidden folder is written
    to within minutes of its making, so a day's age marks a dead one."""
    now, removed = time.time(), []
    try:
        entries = list(os.scandir(output))
    except OSError:
        return []
    for entry in entries:
        if not entry.name.startswith((".incomplete-", ".discarded-")) or not _plain_name(entry.name) \
                or os.path.realpath(entry.path) in placing:
            continue
        try:
            if not entry.is_dir(follow_symlinks=False) or now - entry.stat(follow_symlinks=False).st_mtime \
                    < STALE_AFTER:
                continue
        except OSError:
            continue
        shutil.rmtree(entry.path, ignore_errors=True)
        if not os.path.lexists(entry.path):
            removed.append(entry.name)
    if not removed:
        return []
    shown = ", ".join(sorted(removed)[:3]) + (f" and {len(removed) - 3} more" if len(removed) > 3 else "")
    return [f"removed {len(removed)} hidden folder(s) of runs stopped before they were recorded, "
            f"untouched for over a day, from {output}: {shown}"]


def _finish_interrupted_runs(conn: sqlite3.Connection, output: Path) -> list[str]:
    """Finish the runs into ``output`` recorded but not placed (a run stopped between its commit
    and its rename): rename their complete hidden folders into place; drop rows whose folders
    are both gone. Return a note for each row that asks for any other move (refused).

    Called on an open write transaction, so two runs never finish the same run at once.
    """
    notes = []
    pending = conn.execute("SELECT run_id, folder, staging FROM runs WHERE state = 'placing'").fetchall()
    notes += _clear_stale(output, placing={os.path.realpath(str(staging)) for _, _, staging in pending})
    for run_id, folder, staging in pending:
        final, hidden = Path(str(folder)), Path(str(staging))
        named = _plain_name(run_id) and hidden.name == f".incomplete-{run_id}" and final.name == run_id \
            and _same_folder(hidden.parent, final.parent)
        if named and not _same_folder(hidden.parent, output):
            continue   # another output folder's run (a shared ledger): a run into that folder finishes it
        if named and final.is_dir() and not final.is_symlink():
            conn.execute("UPDATE runs SET state = 'placed' WHERE run_id = ?", (run_id,))
            continue   # placed already (its rename landed, the mark did not)
        if named and not os.path.lexists(hidden) and not os.path.lexists(final):
            _delete_run(conn, run_id)   # both gone: the run was lost
            continue
        refusal = _refusal(str(run_id), final, hidden, output) \
            or (f"{final} exists already" if os.path.lexists(final) else None)
        if refusal:
            notes.append(f"the ledger's unfinished run {run_id!r} asks to move {hidden} to {final}; "
                         f"not done, because {refusal}")
            continue
        try:
            os.rename(hidden, final)
        except OSError:
            continue   # still out of sight; a later run tries again
        conn.execute("UPDATE runs SET state = 'placed' WHERE run_id = ?", (run_id,))
    return notes


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
                     rows: dict[str, list[dict]]) -> list[str]:
    """Record the run in the ledger in one transaction, then rename its folder into place.

    ``rows`` are the run's rows as ``run_rows`` made them (while the run's pages were drawn).
    Return the notes on earlier unfinished runs this run refused to finish.

    See the module's docstring for why this order leaves no run half-visible.
    """
    with ledger_errors(ledger_file):
        conn = open_for_writing(ledger_file)
        try:
            with transaction(conn):
                notes = _finish_interrupted_runs(conn, staging.parent)
                _insert_run(conn, rows)
            try:
                _place(staging, final)
            except BaseException:
                if final.is_dir() and not staging.exists():
                    landing.mark(final)   # interrupted just after the rename: the run is made
                _withdraw(conn, run_id, staging, final)
                raise
            landing.mark(final)
            try:
                with transaction(conn):
                    conn.execute("UPDATE runs SET state = 'placed' WHERE run_id = ?", (run_id,))
            except sqlite3.Error:
                pass   # the run is made and counts already (its folder exists)
        finally:
            conn.close()
    return notes
