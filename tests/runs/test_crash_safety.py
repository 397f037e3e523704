"""Runs killed (SIGKILL) at the points tests/runs/test_ledger_safety.py does not cover.

That file kills a run mid-backtest, with its hidden folder complete, mid-insert and after
the ledger commit. Here a run is killed while reading its input, after the check stage,
after the forecast, while the hidden run folder is half written (before the report), and
after the rename but before the ledger marks the run placed; then the same output folder
is killed into at every point in turn. Each time the earlier run folders keep their
bytes, the ledger passes SQLite's integrity check and records exactly the run folders a
user can see, and nothing partial is visible (hidden ``.incomplete-*`` folders allowed).
The child processes and helpers are those of test_ledger_safety.py. Plumbing tests on the
invented demo data: no figure here is a reference value; no test measures time.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from test_ledger_safety import (
    CHILD,
    CHILD_LIMIT,
    assert_recorded_as_written,
    child_env,
    rows_by_table,
    tree_bytes,
    visible,
    wait_for,
    write_spec,
)

import pipeline
from pipeline.record import ledger

# The child of test_ledger_safety.py, with more points to stop at.
MORE_POINTS = r'''
import pipeline.present.pages as pages
if point == "ingest":           # reading the input file: nothing made yet
    runner.read_input = pause_first(runner.read_input)
elif point == "checked":        # the data checked, no model fitted
    runner.check_data = then_pause(runner.check_data)
elif point == "forecast":       # every model fitted, nothing written
    runner.make_forecast = then_pause(runner.make_forecast)
elif point == "writing":        # the hidden run folder half written: CSVs, no report yet
    pages.render_report = pause_first(pages.render_report)
elif point == "renamed":        # the folder renamed into place, the ledger row not yet 'placed'
    ledger._place = then_pause(ledger._place)
'''
KNOWN = '''if point == "backtest":'''
assert KNOWN in CHILD
EXTENDED = CHILD.replace(KNOWN, MORE_POINTS + "elif point == \"backtest\":", 1)
BEFORE_RENAME = ["ingest", "checked", "forecast", "writing"]
POINTS = [*BEFORE_RENAME, "renamed"]


def start(point: str, spec: Path, signal_file: Path) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", EXTENDED, point, str(spec), str(signal_file), "600"],
                            cwd=spec.parent, env=child_env(), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def kill_at(children: dict[str, subprocess.Popen], signals: dict[str, Path]) -> None:
    try:
        for point, child in children.items():
            wait_for(signals[point], child)
            os.kill(child.pid, signal.SIGKILL)
            child.communicate(timeout=CHILD_LIMIT)
            assert child.returncode == -signal.SIGKILL
    finally:
        for child in children.values():
            if child.poll() is None:
                child.kill()
                child.wait()


def assert_consistent(runs: Path) -> set[str]:
    """Check the ledger records exactly the visible run folders, each whole; return their names."""
    shown = set(visible(runs))
    assert all(name.startswith("run-") for name in shown), shown
    hidden = {p.name for p in runs.iterdir() if p.name.startswith(".")}
    assert all(name.startswith(".incomplete-") for name in hidden), hidden
    book = runs / ledger.LEDGER_FILE
    tables = rows_by_table(book)                      # also runs PRAGMA integrity_check
    with ledger.reading(book) as conn:
        counted = set(ledger.visible_runs(conn)["run_id"])
    assert counted == shown
    assert tables["runs"] >= shown
    for name in shown:
        assert {"summary.md", "report.html", "forecast.csv", "metrics.json"} <= {
            p.name for p in (runs / name).iterdir()}
        assert_recorded_as_written(book, runs / name)
    return shown


@pytest.fixture(scope="module")
def killed(tmp_path_factory) -> dict[str, tuple[Path, Path, dict[str, bytes]]]:
    """Per point: the spec, the earlier run's folder and its bytes, after the child was killed there."""
    base = tmp_path_factory.mktemp("killed_more")
    prepared = {}
    for point in POINTS:
        spec = write_spec(base / point)
        earlier = pipeline.run(spec).folder.path
        prepared[point] = (spec, earlier, tree_bytes(earlier))
    kill_at({p: start(p, prepared[p][0], base / p / "reached") for p in POINTS},
            {p: base / p / "reached" for p in POINTS})
    return prepared


@pytest.mark.parametrize("point", BEFORE_RENAME)
def test_a_run_killed_before_its_rename_leaves_the_earlier_run_and_the_ledger_as_they_were(killed, point):
    spec, earlier, before = killed[point]
    runs = earlier.parent
    assert assert_consistent(runs) == {earlier.name}
    assert tree_bytes(earlier) == before
    assert rows_by_table(runs / ledger.LEDGER_FILE)["runs"] == {earlier.name}


def test_a_run_killed_half_way_through_writing_leaves_only_a_hidden_folder(killed):
    spec, earlier, _ = killed["writing"]
    (staging,) = [p for p in earlier.parent.iterdir() if p.name.startswith(".incomplete-")]
    assert (staging / "forecast.csv").is_file() and not (staging / "report.html").exists()


def test_a_run_killed_after_its_rename_counts_whole_and_the_earlier_run_is_untouched(killed):
    spec, earlier, before = killed["renamed"]
    runs = earlier.parent
    shown = assert_consistent(runs)
    assert len(shown) == 2 and earlier.name in shown
    assert tree_bytes(earlier) == before


@pytest.mark.parametrize("point", POINTS)
def test_the_next_run_after_a_kill_lands_and_the_ledger_holds_exactly_the_visible_runs(killed, point):
    spec, earlier, before = killed[point]
    runs = earlier.parent
    was = set(visible(runs))
    later = pipeline.run(spec).folder.path
    assert assert_consistent(runs) == was | {later.name}
    assert tree_bytes(earlier) == before
    with ledger.reading(runs / ledger.LEDGER_FILE) as conn:
        assert set(ledger.visible_runs(conn)["run_id"]) == was | {later.name}


def test_one_output_folder_killed_into_at_every_point_in_turn_stays_consistent(tmp_path):
    spec = write_spec(tmp_path)
    runs = tmp_path / "runs"
    first = pipeline.run(spec).folder.path
    kept = {first.name: tree_bytes(first)}
    for point in [*POINTS, "backtest", "staged", "inserting", "recorded"]:
        signal_file = tmp_path / f"reached-{point}"
        kill_at({point: start(point, spec, signal_file)}, {point: signal_file})
        shown = assert_consistent(runs) if point not in ("recorded",) else set(visible(runs))
        for name, content in kept.items():
            assert tree_bytes(runs / name) == content, f"{name} changed after a kill at {point}"
        for name in shown - set(kept):
            kept[name] = tree_bytes(runs / name)
    last = pipeline.run(spec).folder.path
    shown = assert_consistent(runs)
    assert last.name in shown and first.name in shown
    # Killed after its commit, the 'recorded' run is finished by the next run: one more.
    assert len(shown) == 2 + 1 + 1
