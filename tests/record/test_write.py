"""pipeline/record/ledger/write.py: a run's rows committed in one transaction, then its folder
renamed into place; a failed rename takes the rows back.

The order is the one pipeline/record/ledger/__init__.py and DEVELOPERS.md ("The commit order")
describe; the ledger is read back with the sqlite3 module. The run is the tiny invented one
(plumbing only).
"""

from __future__ import annotations

import json
import sqlite3
from contextlib import closing
from datetime import UTC, datetime

import pytest
from conftest import tiny_data, write_tiny_spec

from pipeline.record.ledger import write
from pipeline.record.ledger.store import RUN_TABLES, insert, open_for_writing
from pipeline.spec import load_spec
from pipeline.stages.backtest import run_backtest
from pipeline.stages.check import check_data
from pipeline.stages.evaluate import evaluate
from pipeline.stages.forecast import make_forecast
from pipeline.stages.ingest import read_input


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """A run's values (spec, data, evaluation, forecast), made once for the module."""
    spec = load_spec(write_tiny_spec(tmp_path_factory.mktemp("write"), tiny_data(), actuals_to="2021-12"))
    data = check_data(spec, read_input(spec))
    backtest = run_backtest(spec, data)
    return {"spec": spec, "data": data, "evaluation": evaluate(spec, backtest),
            "forecast": make_forecast(spec, data, backtest)}


def staged(folder, run_id):
    staging = folder / f".incomplete-{run_id}"
    staging.mkdir(parents=True)
    (staging / "metrics.json").write_text(json.dumps({"run_id": run_id}), encoding="utf-8")
    return staging, folder / run_id


def record(made, ledger_file, staging, final, run_id):
    rows = write.run_rows(run_id=run_id, created=datetime.now(UTC), resolved=made["spec"].model_dump(mode="json"),
                          realised=None, staging=staging, final=final, **made)
    write.record_and_place(ledger_file, staging, final, run_id=run_id, rows=rows)


def counts(ledger_file, run_id) -> dict[str, int]:
    with closing(sqlite3.connect(ledger_file)) as conn:
        return {t: conn.execute(f"SELECT count(*) FROM {t} WHERE run_id = ?", (run_id,)).fetchone()[0]
                for t in RUN_TABLES}


def test_the_run_is_recorded_placed_and_its_folder_renamed(made, tmp_path):
    ledger_file = tmp_path / "ledger.sqlite"
    staging, final = staged(tmp_path, "run-1")
    record(made, ledger_file, staging, final, "run-1")
    assert final.is_dir() and not staging.exists() and (final / "metrics.json").exists()
    with closing(sqlite3.connect(ledger_file)) as conn:
        row = conn.execute("SELECT state, folder, staging FROM runs WHERE run_id = 'run-1'").fetchone()
    assert row == ("placed", str(final), str(staging))
    rows = counts(ledger_file, "run-1")
    assert rows["runs"] == 1 and rows["model_metrics"] == len(made["evaluation"].table)
    assert rows["forecasts"] == len(made["forecast"].forecast)


def test_rows_are_committed_before_the_folder_is_renamed(made, tmp_path, monkeypatch):
    ledger_file = tmp_path / "ledger.sqlite"
    staging, final = staged(tmp_path, "run-1")
    seen = {}
    place = write._place                      # no seam between the commit and the rename

    def watching(hidden, target):
        with closing(sqlite3.connect(ledger_file)) as other:      # another reader's view
            seen["state"] = other.execute("SELECT state FROM runs WHERE run_id = 'run-1'").fetchall()
        seen["folder then"] = target.exists()
        place(hidden, target)

    monkeypatch.setattr(write, "_place", watching)
    record(made, ledger_file, staging, final, "run-1")
    assert seen == {"state": [("placing",)], "folder then": False}


def test_a_failed_rename_deletes_the_rows_and_the_hidden_folder(made, tmp_path):
    ledger_file = tmp_path / "ledger.sqlite"
    staging, final = staged(tmp_path, "run-1")
    final.write_text("a file where the run folder should go", encoding="utf-8")   # rename fails
    with pytest.raises(OSError):
        record(made, ledger_file, staging, final, "run-1")
    assert set(counts(ledger_file, "run-1").values()) == {0}
    assert not staging.exists() and not list(tmp_path.glob(".discarded-*"))
    assert final.read_text(encoding="utf-8") == "a file where the run folder should go"


def test_the_next_run_finishes_an_interrupted_one_and_drops_a_lost_one(made, tmp_path):
    ledger_file = tmp_path / "ledger.sqlite"
    hidden, waiting = staged(tmp_path, "run-0")          # committed, stopped before its rename
    with closing(open_for_writing(ledger_file)) as conn:
        insert(conn, "runs", [
            {"run_id": r, "created": "2024-01-01T00:00:00", "spec_name": "tiny", "spec_hash": "h",
             "spec_json": "{}", "input_sha256": "i", "castline_version": "0", "folder": str(tmp_path / r),
             "staging": str(tmp_path / f".incomplete-{r}"), "state": "placing"}
            for r in ("run-0", "run-lost")])                # run-lost: both its folders gone
    staging, final = staged(tmp_path, "run-1")
    record(made, ledger_file, staging, final, "run-1")
    assert waiting.is_dir() and not hidden.exists()
    with closing(sqlite3.connect(ledger_file)) as conn:
        states = dict(conn.execute("SELECT run_id, state FROM runs").fetchall())
    assert states == {"run-0": "placed", "run-1": "placed"}
