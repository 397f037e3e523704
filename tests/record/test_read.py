"""pipeline/record/ledger/read.py: the runs that count, and the rows of their tables.

A run counts once it is 'placed' or its folder exists (the ledger's commit order, described in
pipeline/record/ledger/__init__.py and DEVELOPERS.md); the rows here are written by hand.
"""

from __future__ import annotations

from contextlib import closing

import pytest

from pipeline.record.ledger.read import latest_realised, rows_of, visible_runs
from pipeline.record.ledger.store import insert, open_for_writing


def run_row(run_id: str, created: str, state: str, folder, name: str = "tiny") -> dict:
    return {"run_id": run_id, "created": created, "spec_name": name, "spec_hash": "h", "spec_json": "{}",
            "input_sha256": "i", "castline_version": "0", "folder": str(folder),
            "staging": str(folder.parent / f".incomplete-{run_id}"), "state": state}


@pytest.fixture
def ledger(tmp_path):
    conn = open_for_writing(tmp_path / "ledger.sqlite")
    with closing(conn):
        yield conn, tmp_path


def test_a_run_counts_once_placed_or_its_folder_exists(ledger):
    conn, folder = ledger
    (folder / "run-c").mkdir()
    insert(conn, "runs", [
        run_row("run-a", "2024-01-01T00:00:00", "placed", folder / "run-a"),    # placed: counts
        run_row("run-b", "2024-02-01T00:00:00", "placing", folder / "run-b"),   # no folder: not yet
        run_row("run-c", "2024-03-01T00:00:00", "placing", folder / "run-c")])  # folder in place
    assert list(visible_runs(conn)["run_id"]) == ["run-a", "run-c"]
    (folder / "run-b").mkdir()
    assert list(visible_runs(conn)["run_id"]) == ["run-a", "run-b", "run-c"]
    assert "state" not in visible_runs(conn).columns


def test_runs_are_oldest_first_and_of_the_named_spec(ledger):
    conn, folder = ledger
    insert(conn, "runs", [
        run_row("run-2", "2024-02-01T00:00:00", "placed", folder / "run-2"),
        run_row("run-1", "2024-01-01T00:00:00", "placed", folder / "run-1"),
        run_row("run-x", "2024-01-15T00:00:00", "placed", folder / "run-x", name="other")])
    assert list(visible_runs(conn)["run_id"]) == ["run-1", "run-x", "run-2"]
    assert list(visible_runs(conn, "tiny")["run_id"]) == ["run-1", "run-2"]
    assert visible_runs(conn, "nobody").empty


def test_rows_of_many_runs_are_all_read(ledger):
    conn, _ = ledger
    ids = [f"run-{i:04d}" for i in range(1234)]       # more than one statement's 500
    insert(conn, "model_metrics", [{"run_id": r, "model": "ols", "mae": float(i)} for i, r in enumerate(ids)])
    rows = rows_of(conn, "model_metrics", ids)
    assert sorted(rows["run_id"]) == ids and rows["mae"].sum() == sum(range(1234))   # 0 + … + 1233
    assert rows_of(conn, "model_metrics", []).empty
    assert list(rows_of(conn, "model_metrics", ids, " AND mae < ?", (2.0,))["run_id"]) == ids[:2]


def test_latest_realised_keeps_the_newest_runs_score_of_each_forecast(ledger):
    conn, folder = ledger
    insert(conn, "runs", [run_row(r, f"2024-0{i}-01T00:00:00", "placed", folder / r)
                          for i, r in enumerate(["run-1", "run-2", "run-3", "run-4"], start=1)])

    def score(run_id, period, actual):
        return {"run_id": run_id, "forecast_run_id": "run-1", "model": "ols", "period": period,
                "series": "all", "horizon": 1, "actual": actual}

    insert(conn, "realised", [score("run-2", "2024-02", 10.0), score("run-2", "2024-03", 20.0),
                              score("run-4", "2024-02", 11.0),    # revised by the newest run
                              score("run-3", "2024-03", 21.0)])
    latest = latest_realised(conn, visible_runs(conn)).set_index("period")
    assert latest["actual"].to_dict() == {"2024-02": 11.0, "2024-03": 21.0}
    assert latest["run_id"].to_dict() == {"2024-02": "run-4", "2024-03": "run-3"}
    # a score by a run that does not count (not among the runs given) is not read
    assert latest_realised(conn, visible_runs(conn).iloc[:2])["actual"].tolist() == [10.0, 20.0]
