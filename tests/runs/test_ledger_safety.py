"""The run ledger under stress: runs at once, runs killed mid-way, old and damaged files, mistakes.

Plumbing tests on the invented demo data: no figure here is a reference value. Child
processes run ``castline run`` with one function of castline wrapped (monkeypatched in
the child) so that it stops at a chosen point and waits; the test then kills it with
SIGKILL, or lets it go on. No test measures time: the waits are for a child to reach
its point, bounded only so a broken child cannot hang the suite.
"""

from __future__ import annotations

import hashlib
import json
import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from contextlib import closing
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import DEMO_DATA, DEMO_SPEC, ROOT

import pipeline
from pipeline import cli
from pipeline.core.errors import SpecError
from pipeline.record import ledger

CHILD_LIMIT = 300          # seconds a child may take to reach its point before the test gives up

# A child `castline run`: argv = point, spec, signal file, seconds to hold at the point.
CHILD = r"""
import sys, time
from pathlib import Path
import pipeline.record.ledger.write as ledger
import pipeline.runner as runner
from pipeline.cli import main

point, spec, signal_file, hold = sys.argv[1], sys.argv[2], Path(sys.argv[3]), float(sys.argv[4])

def pause():
    signal_file.write_text(point, encoding="utf-8")
    time.sleep(hold)

def then_pause(function):
    def wrapped(*args, **kwargs):
        value = function(*args, **kwargs)
        pause()
        return value
    return wrapped

def pause_first(function):
    def wrapped(*args, **kwargs):
        pause()
        return function(*args, **kwargs)
    return wrapped

if point == "backtest":      # a stage mid-run: nothing written yet
    runner.run_backtest = then_pause(runner.run_backtest)
elif point == "staged":      # the hidden run folder complete, the ledger not yet opened
    ledger.record_and_place = pause_first(ledger.record_and_place)
elif point == "inserting":   # the run's rows inserted, the transaction not committed
    ledger._insert_run = then_pause(ledger._insert_run)
elif point == "recorded":    # the transaction committed, the folder not yet renamed
    ledger._place = pause_first(ledger._place)
elif point == "renamed":     # the folder renamed into place, the row not yet marked placed
    ledger._place = then_pause(ledger._place)
elif point == "printing":    # the run landed, its results being printed
    import pipeline.cli as command_line
    command_line._print_table = pause_first(command_line._print_table)
else:
    raise SystemExit(f"unknown point {point}")
sys.exit(main(["run", spec]))
"""

# The schema of version 1 as it shipped, frozen here so that a change to MIGRATIONS[1]
# (which would break the version-1 ledgers users hold) fails this file.
SCHEMA_V1 = """
CREATE TABLE schema_version (version INTEGER NOT NULL);
INSERT INTO schema_version (version) VALUES (1);
CREATE TABLE runs (run_id TEXT PRIMARY KEY, created TEXT NOT NULL, spec_name TEXT NOT NULL,
    spec_hash TEXT NOT NULL, spec_json TEXT NOT NULL, input_sha256 TEXT NOT NULL,
    castline_version TEXT NOT NULL, first_period TEXT, last_period TEXT, history_rows INTEGER,
    future_rows INTEGER, recommended TEXT, select_by TEXT, beats_baseline INTEGER,
    folder TEXT NOT NULL, staging TEXT NOT NULL,
    state TEXT NOT NULL CHECK (state IN ('placing', 'placed')));
CREATE INDEX runs_by_name ON runs (spec_name, created);
CREATE TABLE model_metrics (run_id TEXT NOT NULL, model TEXT NOT NULL, n INTEGER, mae REAL,
    rmse REAL, mape REAL, smape REAL, wape REAL, mase REAL, r2 REAL, bias REAL,
    skill_vs_mean REAL, p_value REAL, PRIMARY KEY (run_id, model));
CREATE TABLE origin_metrics (run_id TEXT NOT NULL, model TEXT NOT NULL, origin TEXT NOT NULL,
    n INTEGER, mae REAL, rmse REAL, mape REAL, smape REAL, wape REAL, mase REAL, r2 REAL,
    bias REAL, skill_vs_mean REAL, PRIMARY KEY (run_id, model, origin));
CREATE TABLE horizon_metrics (run_id TEXT NOT NULL, model TEXT NOT NULL, horizon INTEGER NOT NULL,
    n INTEGER, mae REAL, rmse REAL, bias REAL, skill_vs_mean REAL,
    PRIMARY KEY (run_id, model, horizon));
CREATE TABLE forecasts (run_id TEXT NOT NULL, model TEXT NOT NULL, period TEXT NOT NULL,
    series TEXT NOT NULL, horizon INTEGER NOT NULL, forecast REAL, analytic_low_80 REAL,
    analytic_high_80 REAL, analytic_low_95 REAL, analytic_high_95 REAL, empirical_low_80 REAL,
    empirical_high_80 REAL, empirical_low_95 REAL, empirical_high_95 REAL,
    PRIMARY KEY (run_id, model, period, series));
CREATE TABLE coefficients (run_id TEXT NOT NULL, model TEXT NOT NULL, term TEXT NOT NULL,
    estimate REAL, std_error REAL);
CREATE INDEX coefficients_by_run ON coefficients (run_id);
"""
OLD_RUN = "run-20261001T080000000000Z-0a0b0c"


def write_spec(folder: Path, **output) -> Path:
    """Write a copy of the demo spec reading the demo data, its runs under folder/runs."""
    spec = yaml.safe_load(DEMO_SPEC.read_text(encoding="utf-8"))
    spec["input"]["file"] = str(DEMO_DATA)
    spec["input"]["as_of"] = "2027-01-31"
    spec["output"] = {"folder": "runs", **output}
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def child_env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    env.update(OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    return env


def start_child(point: str, spec: Path, signal_file: Path, hold: float) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", CHILD, point, str(spec), str(signal_file), str(hold)],
                            cwd=spec.parent, env=child_env(), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def wait_for(signal_file: Path, child: subprocess.Popen) -> None:
    """Wait until the child reaches its point (it writes the signal file)."""
    for _ in range(CHILD_LIMIT * 20):
        if signal_file.exists():
            return
        if child.poll() is not None:
            pytest.fail(f"the child ended before its point: {child.communicate()}")
        time.sleep(0.05)
    child.kill()
    pytest.fail("the child never reached its point")


def tree_bytes(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def visible(folder: Path) -> list[str]:
    """Return what a user sees in an output folder, the ledger's own files left out."""
    return sorted(p.name for p in folder.iterdir()
                  if not p.name.startswith(".") and not p.name.startswith(ledger.LEDGER_FILE))


def rows_by_table(path: Path) -> dict[str, set[str]]:
    """Return, per ledger table, the run ids it holds rows of (read straight from the file)."""
    with closing(sqlite3.connect(path)) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        return {table: {r[0] for r in conn.execute(f"SELECT DISTINCT run_id FROM {table}")}
                for table in ledger.RUN_TABLES}


def assert_recorded_as_written(path: Path, folder: Path) -> None:
    """Check the ledger holds the run's forecasts and metrics exactly as its folder does."""
    with closing(sqlite3.connect(path)) as conn:
        recorded = pd.read_sql_query("SELECT * FROM forecasts WHERE run_id = ? ORDER BY model, period, series",
                                     conn, params=(folder.name,))
        metrics = dict(conn.execute("SELECT model, mae FROM model_metrics WHERE run_id = ?", (folder.name,)))
    written = pd.read_csv(folder / "forecast.csv").astype({"period": str}).sort_values(
        ["model", "period", "series"]).reset_index(drop=True)
    assert len(recorded) == len(written) > 0
    np.testing.assert_allclose(recorded["forecast"].astype(float), written["forecast"], rtol=1e-12)
    in_folder = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["models"]
    assert metrics == {row["model"]: pytest.approx(row["mae"], rel=1e-12) for row in in_folder}


def history(capsys, *args: str) -> dict:
    capsys.readouterr()
    assert cli.main(["history", *args, "--format", "json"]) == 0
    return json.loads(capsys.readouterr().out)


# ---------------------------------------------------------------- two runs at once

def test_two_runs_started_together_both_land_whole(tmp_path):
    spec = write_spec(tmp_path)
    # Each child holds its write transaction open a moment, so the other must wait for it.
    children = [start_child("inserting", spec, tmp_path / f"reached-{i}", 1.5) for i in range(2)]
    outcomes = [child.communicate(timeout=CHILD_LIMIT) for child in children]
    for child, (out, err) in zip(children, outcomes):
        assert child.returncode == 0, err
        assert "Traceback" not in err and "run folder: " in out
    runs = tmp_path / "runs"
    folders = visible(runs)
    assert len(folders) == 2
    book = runs / ledger.LEDGER_FILE
    assert all(ids == set(folders) for table, ids in rows_by_table(book).items()
               if table not in ("realised",)), "every table holds both runs"
    for name in folders:
        assert_recorded_as_written(book, runs / name)
    with closing(sqlite3.connect(book)) as conn:
        assert conn.execute("SELECT DISTINCT state FROM runs").fetchall() == [("placed",)]
        assert conn.execute("PRAGMA journal_mode").fetchone() == ("wal",)


# ---------------------------------------------------------------- a run killed mid-way

POINTS = ["backtest", "staged", "inserting", "recorded"]


@pytest.fixture(scope="module")
def killed(tmp_path_factory) -> dict[str, tuple[Path, Path, dict[str, bytes]]]:
    """Per kill point: the spec, the earlier run's folder and its bytes, after the child was killed."""
    base = tmp_path_factory.mktemp("killed")
    prepared = {}
    for point in POINTS:
        spec = write_spec(base / point)
        earlier = pipeline.run(spec).folder.path
        prepared[point] = (spec, earlier, tree_bytes(earlier))
    children = {p: start_child(p, prepared[p][0], base / p / "reached", 600) for p in POINTS}
    try:
        for point, child in children.items():
            wait_for(base / point / "reached", child)
            os.kill(child.pid, signal.SIGKILL)
            child.communicate(timeout=CHILD_LIMIT)
            assert child.returncode == -signal.SIGKILL
    finally:
        for child in children.values():
            if child.poll() is None:
                child.kill()
                child.wait()
    return prepared


@pytest.mark.parametrize("point", POINTS)
def test_a_killed_run_leaves_no_run_folder_and_the_earlier_run_as_it_was(killed, point, capsys):
    spec, earlier, before = killed[point]
    runs = earlier.parent
    assert visible(runs) == [earlier.name]
    assert tree_bytes(earlier) == before
    shown = history(capsys, str(spec))["metrics"]
    assert {row["run_id"] for row in shown} == {earlier.name}


@pytest.mark.parametrize("point", ["backtest", "staged", "inserting"])
def test_a_run_killed_before_its_commit_leaves_no_ledger_row(killed, point):
    spec, earlier, _ = killed[point]
    tables = rows_by_table(earlier.parent / ledger.LEDGER_FILE)
    assert all(ids <= {earlier.name} for ids in tables.values()), tables
    assert tables["runs"] == {earlier.name}


def test_a_run_killed_after_its_commit_is_finished_by_the_next_run(killed, capsys):
    spec, earlier, before = killed["recorded"]
    runs = earlier.parent
    book = runs / ledger.LEDGER_FILE
    with closing(sqlite3.connect(book)) as conn:
        pending = conn.execute("SELECT run_id FROM runs WHERE state = 'placing'").fetchall()
    assert len(pending) == 1, "the killed run's row is committed, out of sight until its folder is placed"
    interrupted = pending[0][0]
    later = pipeline.run(spec).folder.path
    assert visible(runs) == sorted([earlier.name, interrupted, later.name])
    assert not (runs / f".incomplete-{interrupted}").exists()
    for name in (earlier.name, interrupted, later.name):
        assert_recorded_as_written(book, runs / name)
    assert tree_bytes(earlier) == before
    shown = history(capsys, str(spec))["metrics"]
    # one row per model of each run, the runs in order
    assert list(dict.fromkeys(row["run_id"] for row in shown)) == [earlier.name, interrupted, later.name]


@pytest.mark.parametrize("point, landed", [("recorded", False), ("renamed", True), ("printing", True)])
def test_ctrl_c_says_truthfully_whether_the_run_folder_was_written(tmp_path, point, landed):
    """Ctrl-C (SIGINT) before the rename, just after it, and while the results are printed: one
    stderr line that says whether the run folder was written, exit code 130, and what it says
    is what the output folder and the ledger hold."""
    spec = write_spec(tmp_path)
    child = start_child(point, spec, tmp_path / "reached", 120)
    wait_for(tmp_path / "reached", child)
    child.send_signal(signal.SIGINT)
    out, err = child.communicate(timeout=CHILD_LIMIT)
    assert child.returncode == 130, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("castline: interrupted"), err
    runs = tmp_path / "runs"
    folders = visible(runs)
    recorded = rows_by_table(runs / ledger.LEDGER_FILE)["runs"]
    if landed:
        assert len(folders) == 1 and str(runs / folders[0]) in lines[0] and "written" in lines[0]
        assert recorded == set(folders)
        assert_recorded_as_written(runs / ledger.LEDGER_FILE, runs / folders[0])
    else:
        assert "no run folder was written" in lines[0]
        assert folders == [] and recorded == set()
    assert not list(runs.glob(".incomplete-*"))


def test_hidden_folders_of_killed_runs_are_removed_after_a_day(tmp_path, capsys):
    """Runs killed before their commit leave hidden folders; the next run removes those untouched
    for over a day that no ledger row is placing, says so, and keeps younger ones (a run may be
    writing them) and the one a row is placing."""
    spec = write_spec(tmp_path)
    runs = tmp_path / "runs"
    day_old = time.time() - 2 * 24 * 3600
    old = [runs / ".incomplete-run-old1", runs / ".incomplete-run-old2", runs / ".discarded-run-old3"]
    young = runs / ".incomplete-run-young"
    for folder in [*old, young]:
        folder.mkdir(parents=True)
        (folder / "metrics.json").write_text("{}", encoding="utf-8")
    for folder in old:
        os.utime(folder, (day_old, day_old))
    victim = tmp_path / ".incomplete-run-outside"   # outside the output folder: never touched
    victim.mkdir()
    os.utime(victim, (day_old, day_old))
    assert cli.main(["run", str(spec)]) == 0
    out = capsys.readouterr().out
    assert not any(folder.exists() for folder in old)
    assert young.is_dir() and victim.is_dir()
    (note,) = [line for line in out.splitlines() if "hidden folder" in line]
    assert note.startswith("note: removed 3 hidden folder(s)") and "run-old1" in note


# ---------------------------------------------------------------- an older schema

def make_v1_ledger(path: Path) -> None:
    """Write a version-1 ledger holding one run that forecast the demo's 2026-10 for OLS."""
    with closing(sqlite3.connect(path)) as conn:
        conn.executescript(SCHEMA_V1)
        conn.execute("INSERT INTO runs VALUES (?, ?, 'compost-by-region', ?, '{}', ?, '0.0.9', '2019-01', "
                     "'2026-09', 372, 12, 'ols', 'mae', 1, ?, ?, 'placed')",
                     (OLD_RUN, "2026-10-01T08:00:00.000000+00:00", "0" * 64, "1" * 64,
                      str(path.parent / "archived" / OLD_RUN), str(path.parent / f".incomplete-{OLD_RUN}")))
        conn.executemany("INSERT INTO model_metrics (run_id, model, n, mae, rmse, skill_vs_mean) "
                         "VALUES (?, ?, 48, ?, ?, ?)",
                         [(OLD_RUN, "mean_baseline", 380.0, 460.0, 0.0), (OLD_RUN, "ols", 130.0, 170.0, 0.66)])
        conn.execute("INSERT INTO horizon_metrics (run_id, model, horizon, n, mae) VALUES (?, 'ols', 1, 4, 100.0)",
                     (OLD_RUN,))
        conn.executemany("INSERT INTO forecasts (run_id, model, period, series, horizon, forecast, "
                         "analytic_low_95, analytic_high_95, analytic_low_80, analytic_high_80) "
                         "VALUES (?, 'ols', '2026-10', ?, 1, ?, ?, ?, ?, ?)",
                         [(OLD_RUN, s, 3000.0, 2500.0, 3500.0, 2800.0, 3200.0)
                          for s in ("East", "North", "South", "West")])
        conn.commit()


def test_an_older_ledger_is_read_without_being_written(tmp_path, capsys):
    book = tmp_path / "runs" / "ledger.sqlite"
    book.parent.mkdir()
    make_v1_ledger(book)
    before = book.read_bytes()
    shown = history(capsys, "--ledger", str(book))
    assert [row["run_id"] for row in shown["metrics"]] == [OLD_RUN, OLD_RUN]
    assert shown["realised"] == []
    assert book.read_bytes() == before
    assert sorted(p.name for p in book.parent.iterdir()) == ["ledger.sqlite"]


def test_an_older_ledger_is_migrated_by_the_next_run_and_its_runs_kept(tmp_path, capsys):
    spec = write_spec(tmp_path)
    book = tmp_path / "runs" / "ledger.sqlite"
    book.parent.mkdir()
    make_v1_ledger(book)
    result = pipeline.run(spec)
    with closing(sqlite3.connect(book)) as conn:
        assert conn.execute("SELECT version FROM schema_version").fetchall() == [(2,)]
        assert [r[0] for r in conn.execute("SELECT run_id FROM runs ORDER BY created")] == [
            OLD_RUN, result.folder.run_id]
        methods = dict(conn.execute("SELECT run_id, COUNT(interval_method) FROM forecasts GROUP BY run_id"))
        # 6 models (the mean of the training months, ols, the four simple rules) × 4 regions × 3 months
        assert methods == {OLD_RUN: 0, result.folder.run_id: 6 * 12}
        assert {r[0] for r in conn.execute("SELECT DISTINCT run_id FROM periods")} == {result.folder.run_id}
    # The old run's forecasts of 2026-10 are scored against the demo's actuals, with the
    # intervals it recorded (analytic: it has no empirical ones).
    demo = pd.read_csv(DEMO_DATA)
    october = demo[demo["month"] == "2026-10-01"].set_index("region")["bags_sold"].astype(float)
    realised = result.realised.set_index("series")
    assert (realised["forecast_run_id"] == OLD_RUN).all() and len(realised) == 4
    np.testing.assert_allclose(realised["error"], 3000.0 - october[realised.index])
    assert set(realised["interval_method"]) == {"analytic"}
    assert list(realised["inside_95"]) == [bool(2500 <= v <= 3500) for v in october[realised.index]]
    assert (realised["expected_mae"] == 100.0).all()
    capsys.readouterr()
    assert cli.main(["compare", OLD_RUN, result.folder.run_id, "--ledger", str(book)]) == 0
    assert "months: not compared" in capsys.readouterr().out


def test_an_older_ledger_without_baseline_forecasts_gives_no_realised_skill_and_says_so(tmp_path):
    # The version-1 ledger's run recorded only its ols forecasts of 2026-10, none of the mean
    # baseline: their realised skill cannot be worked out, and the run says so instead of failing.
    spec = write_spec(tmp_path)
    book = tmp_path / "runs" / "ledger.sqlite"
    book.parent.mkdir()
    make_v1_ledger(book)
    result = pipeline.run(spec)
    assert len(result.realised) == 4
    skill = json.loads((result.folder.path / "track_record.json").read_text(encoding="utf-8"))["realised_skill"]
    assert (skill["forecasts"], skill["skill"], skill["without_baseline"]) == (0, None, 4)
    assert skill["runs_without_baseline"] == [OLD_RUN]
    assert [(r["forecast_run_id"], r["forecasts"], r["skill"]) for r in skill["by_run"]] == [(OLD_RUN, 0, None)]
    assert "Realised skill against the forecasts of the mean of the training months: not known" in \
        result.folder.summary.read_text(encoding="utf-8")
    assert not any("realised months" in w for w in result.warnings)


def test_the_migrations_build_the_same_schema_as_a_new_ledger(tmp_path):
    old, new = tmp_path / "old.sqlite", tmp_path / "new.sqlite"
    with closing(sqlite3.connect(old, isolation_level=None)) as conn:
        conn.executescript(SCHEMA_V1)
        conn.execute("BEGIN")
        ledger.migrate(conn, 1)
        conn.execute("COMMIT")
    with closing(sqlite3.connect(new, isolation_level=None)) as conn:
        conn.execute("BEGIN")
        ledger.migrate(conn, 0)
        conn.execute("COMMIT")

    def columns(path: Path) -> dict[str, list[str]]:
        with closing(sqlite3.connect(path)) as conn:
            tables = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
            return {t: [c[1] for c in conn.execute(f"PRAGMA table_info({t})")] for t in sorted(tables)}

    assert columns(old) == columns(new)


# ---------------------------------------------------------------- damaged and foreign files

def random_bytes(path: Path) -> None:
    path.write_bytes(random.Random(8).randbytes(8192))


def foreign_database(path: Path) -> None:
    with closing(sqlite3.connect(path)) as conn:
        conn.execute("CREATE TABLE invoices (number INTEGER)")
        conn.commit()


def newer_ledger(path: Path) -> None:
    with closing(sqlite3.connect(path)) as conn:
        conn.executescript("CREATE TABLE schema_version (version INTEGER); INSERT INTO schema_version VALUES (99);")


def damaged_pages(path: Path) -> None:
    make_v1_ledger(path)
    data = bytearray(path.read_bytes())
    data[1024:] = random.Random(9).randbytes(len(data) - 1024)   # the header survives, the tables do not
    path.write_bytes(bytes(data))


@pytest.mark.parametrize("spoil", [random_bytes, foreign_database, newer_ledger, damaged_pages])
def test_a_ledger_that_cannot_be_used_stops_the_run_and_is_left_as_it_is(tmp_path, capsys, spoil):
    spec = write_spec(tmp_path, ledger="book.sqlite")
    book = tmp_path / "book.sqlite"
    spoil(book)
    before = book.read_bytes()
    capsys.readouterr()
    for args in (["run", str(spec)], ["history", str(spec)], ["history", "--ledger", str(book)],
                 ["compare", "run-a", "run-b", "--ledger", str(book)]):
        assert cli.main(args) == 2, args
        err = capsys.readouterr().err
        assert err.startswith(f"castline: {book}: ") and err.count("\n") == 1, err
        assert "Traceback" not in err
        assert book.read_bytes() == before, args
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.sqlite", "spec.yaml"], \
        "no run folder, and SQLite wrote nothing beside the file"


# ---------------------------------------------------------------- the spec's keys

def test_the_ledger_key_is_read_from_the_specs_folder(tmp_path):
    spec = write_spec(tmp_path, ledger="books/forecasts.sqlite", warn_after_runs_without_skill=5)
    loaded = pipeline.load_spec(spec)
    assert loaded.output.ledger == (tmp_path / "books" / "forecasts.sqlite").resolve()
    assert loaded.output.warn_after_runs_without_skill == 5
    assert ledger.ledger_path(pipeline.load_spec(write_spec(tmp_path / "plain"))) == \
        (tmp_path / "plain" / "runs" / "ledger.sqlite").resolve()


@pytest.mark.parametrize("output, message", [
    ({"ledger": "."}, "output.ledger: is a folder, not a ledger file"),
    ({"warn_after_runs_without_skill": 0}, "output.warn_after_runs_without_skill: "),
    ({"ledgr": "x.sqlite"}, "did you mean 'ledger'?"),
])
def test_the_ledger_keys_are_checked(tmp_path, output, message):
    spec = write_spec(tmp_path, **output)
    with pytest.raises(SpecError) as refused:
        pipeline.load_spec(spec)
    line = next(n for n, text in enumerate(spec.read_text().splitlines(), 1) if text.strip().startswith(
        next(iter(output))))
    assert str(refused.value).startswith(f"{spec}:{line}: ")
    assert message in str(refused.value)


# ---------------------------------------------------------------- no skill, run after run

def test_a_model_that_never_beats_the_mean_is_warned_about_after_n_runs(tmp_path, capsys):
    rng = np.random.default_rng(3)
    months = pd.period_range("2020-01", "2024-12", freq="M")
    pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"),
                  "sales": np.round(1000 + rng.normal(0, 50, len(months)), 1),
                  "noise": np.round(rng.normal(0, 1, len(months)), 3)}).to_csv(tmp_path / "noise.csv", index=False)
    spec = tmp_path / "noise.yaml"
    spec.write_text("name: noise\ninput:\n  file: noise.csv\n  date_column: month\n  as_of: 2025-01-31\n"
                    "target: sales\ndrivers:\n  numeric: [noise]\nvalidation:\n  method: rolling_origin\n"
                    "  horizon: 12\n  min_train_periods: 36\nmodels: [ols]\noutput:\n  folder: runs\n"
                    "  warn_after_runs_without_skill: 2\n", encoding="utf-8")
    printed = []
    for _ in range(2):
        capsys.readouterr()
        assert cli.main(["run", str(spec)]) == 0
        printed.append(capsys.readouterr().out)
    runs = [tmp_path / "runs" / p for p in visible(tmp_path / "runs")]
    metrics = [json.loads((r / "metrics.json").read_text(encoding="utf-8")) for r in runs]
    # 60 months, 36 to train and 12 ahead: 13 origins, enough for a test (a single holdout
    # gives none, and an untested run neither starts nor breaks a streak)
    assert [m["tested"] for m in metrics] == [True, True], "the validation must give a test (the premise)"
    verdicts = [m["beats_baseline"] for m in metrics]
    assert verdicts == [False, False], "the noise driver must not beat the mean (the premise)"
    assert "has not beaten the mean of the training months" not in printed[0]
    warning = next(line for line in printed[1].splitlines() if "has not beaten the mean of the training months" in line)
    assert warning.startswith("warning: the recommended model has not beaten the mean of the training months in the "
                              "last 2 tested run(s)")
    assert warning[len("warning: "):] in (runs[1] / "summary.md").read_text(encoding="utf-8")


# ---------------------------------------------------------------- mistakes on the command line

@pytest.fixture(scope="module")
def one_run(tmp_path_factory) -> tuple[Path, Path]:
    spec = write_spec(tmp_path_factory.mktemp("one"))
    folder = pipeline.run(spec).folder.path
    return spec, folder


@pytest.mark.parametrize("args, says", [
    (["history"], "give a spec file, or --ledger PATH"),
    (["history", "compost-by-region"], "give --ledger PATH to read the runs of 'compost-by-region'"),
    (["history", "--ledger", "{tmp}/none.sqlite"], "no run ledger here yet"),
    (["history", "other-name", "--ledger", "{ledger}"], "no runs of 'other-name' (recorded: compost-by-region)"),
    (["history", "{spec}", "--format", "csv", "--show", "all"], "--format csv writes one table"),
    (["history", "{spec}", "--model", "ridge"], "--model: no runs with model 'ridge'"),
    (["history", "{spec}", "--plot", "{tmp}/plot.xyz"], "cannot draw a plot of type '.xyz'"),
    (["history", "{spec}", "--plot", "{tmp}/no/such/folder/plot.png"], "cannot write the plot"),
    (["history", "{tmp}/missing.yaml"], "no such spec file"),
    (["compare", "run-x", "run-y", "--ledger", "{ledger}"], "no run 'run-x'"),
    (["compare", "run-", "run-", "--ledger", "{ledger}"], None),
    (["compare", "run-x", "run-y"], "give --ledger PATH to find runs by id"),
    (["compare", "run-x", "run-y", "--ledger", "{ledger}", "--top", "0"], "--top: give 1 or more"),
])
def test_a_mistake_gives_one_line_and_exit_code_2(one_run, tmp_path, capsys, args, says):
    spec, folder = one_run
    filled = [a.format(tmp=tmp_path, ledger=folder.parent / "ledger.sqlite", spec=spec) for a in args]
    capsys.readouterr()
    code = cli.main(filled)
    err = capsys.readouterr().err
    if says is None:     # one run only: 'run-' names it twice, a valid (empty) comparison
        assert code == 0, err
        return
    assert code == 2, err
    assert err.startswith("castline: ") and err.count("\n") == 1 and "Traceback" not in err
    assert says in err


def test_compare_accepts_run_folders_and_finds_the_ledger_beside_them(one_run, capsys):
    spec, folder = one_run
    capsys.readouterr()
    assert cli.main(["compare", str(folder), str(folder), "--format", "json"]) == 0
    found = json.loads(capsys.readouterr().out)
    assert found["earlier"]["run_id"] == found["later"]["run_id"] == folder.name
    assert found["spec_changes"] == [] and found["months"] == [] and found["coefficient_moves"] == []
    resolved = yaml.safe_load((folder / "spec.yaml").read_text(encoding="utf-8"))
    assert resolved["output"]["ledger"] == str(folder.parent / "ledger.sqlite")
    canonical = json.dumps(resolved, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert found["earlier"]["spec_hash"] == hashlib.sha256(canonical.encode("utf-8")).hexdigest()
