"""A ledger is a file anyone with access can edit: the paths in its rows are not trusted.

A run finishes an earlier run stopped between its ledger commit and its rename
(pipeline/record/ledger/write.py). The only move it may make is the one castline itself
would have made: its own output folder's hidden ``.incomplete-<run id>`` folder, holding that
run's metrics.json, renamed to ``<run id>`` beside it. Every other ``placing`` row planted in
the ledger is refused with a note, and nothing outside the output folder changes.

Plumbing tests on the tiny invented run of tests/conftest.py: no figure here is a reference
value. Each case plants one row, runs ``castline run`` in this process, and compares every
file and folder under the test's folder, outside the new run folder, before and after.
"""

from __future__ import annotations

import json
import os
import sqlite3
from contextlib import closing
from pathlib import Path

import pytest
from conftest import run_cli, tiny_data, write_tiny_spec


def tree(root: Path) -> dict[str, str]:
    """Every path under root (links not followed) with what it is and, for files, its text."""
    seen = {}
    for path in sorted(root.rglob("*")):
        relative = str(path.relative_to(root))
        if path.is_symlink():
            seen[relative] = "link to " + os.readlink(path)
        elif path.is_dir():
            seen[relative] = "folder"
        elif path.suffix != ".sqlite" and "-wal" not in path.name and "-shm" not in path.name:
            seen[relative] = path.read_bytes().hex()[:200]
    return seen


def plant(ledger_file: Path, run_id: str, staging: Path | str, folder: Path | str) -> None:
    with closing(sqlite3.connect(ledger_file)) as conn, conn:
        conn.execute(
            "INSERT INTO runs (run_id, created, spec_name, spec_hash, spec_json, input_sha256, "
            "castline_version, folder, staging, state) VALUES (?, ?, 'tiny', 'h', '{}', 'i', '0', ?, ?, "
            "'placing')", (run_id, "2020-01-01T00:00:00", str(folder), str(staging)))


def state_of(ledger_file: Path, run_id: str) -> str | None:
    with closing(sqlite3.connect(ledger_file)) as conn:
        row = conn.execute("SELECT state FROM runs WHERE run_id = ?", (run_id,)).fetchone()
    return row[0] if row else None


def hidden_run(folder: Path, run_id: str, *, own: bool = True) -> Path:
    """A folder shaped like a run's hidden folder (its metrics.json naming run_id when own)."""
    folder.mkdir(parents=True)
    (folder / "metrics.json").write_text(json.dumps({"run_id": run_id if own else "someone-else"}),
                                         encoding="utf-8")
    (folder / "keep.txt").write_text("the user's own file", encoding="utf-8")
    return folder


@pytest.fixture
def base(tmp_path):
    """A first run of the tiny spec, so the output folder holds a ledger; returns (spec, runs)."""
    spec = write_tiny_spec(tmp_path / "project", tiny_data(), actuals_to="2021-12")
    code, _, err = run_cli(["run", str(spec)])
    assert code == 0, err
    return spec, tmp_path / "project" / "runs"


def planted_case(name: str, root: Path, runs: Path) -> tuple[str, Path | str, Path | str]:
    """Return (run id, staging, folder) of the hostile row ``name``, making what it points at."""
    victim = root / "victim"
    if name == "staging_anywhere":                # the user's folder renamed into the output folder
        hidden_run(victim, "run-x")
        return "run-x", victim, runs / "run-x"
    if name == "folder_anywhere":                 # a real hidden folder moved out of the output folder
        hidden_run(runs / ".incomplete-run-x", "run-x")
        return "run-x", runs / ".incomplete-run-x", root / "elsewhere" / "run-x"
    if name == "both_elsewhere_badly_named":      # a folder renamed in another place
        hidden_run(victim, "run-x")
        return "run-x", victim, root / "renamed"
    if name == "hidden_name_not_own":             # a hidden folder of the right name, not a run's
        hidden_run(runs / ".incomplete-run-x", "run-x", own=False)
        return "run-x", runs / ".incomplete-run-x", runs / "run-x"
    if name == "hidden_without_metrics":
        (runs / ".incomplete-run-x").mkdir()
        return "run-x", runs / ".incomplete-run-x", runs / "run-x"
    if name == "hidden_is_a_link":                # a link in the output folder to the user's folder
        hidden_run(victim, "run-x")
        (runs / ".incomplete-run-x").symlink_to(victim, target_is_directory=True)
        return "run-x", runs / ".incomplete-run-x", runs / "run-x"
    if name == "run_id_climbs_out":               # names that climb out of the output folder
        hidden_run(victim, "..")
        return "..", runs / ".incomplete-..", runs / ".."
    if name == "folder_through_dots":
        hidden_run(runs / ".incomplete-run-x", "run-x")
        return "run-x", runs / ".incomplete-run-x", runs / ".." / ".." / "run-x"
    if name == "final_is_taken_by_a_file":       # the target name holds the user's file
        hidden_run(runs / ".incomplete-run-x", "run-x")
        (runs / "run-x").write_text("the user's own file", encoding="utf-8")
        return "run-x", runs / ".incomplete-run-x", runs / "run-x"
    if name == "final_is_a_link_elsewhere":
        hidden_run(runs / ".incomplete-run-x", "run-x")
        victim.mkdir()
        (runs / "run-x").symlink_to(victim, target_is_directory=True)
        return "run-x", runs / ".incomplete-run-x", runs / "run-x"
    raise ValueError(name)


REFUSED = ["staging_anywhere", "folder_anywhere", "both_elsewhere_badly_named", "hidden_name_not_own",
           "hidden_without_metrics", "hidden_is_a_link", "run_id_climbs_out", "folder_through_dots",
           "final_is_taken_by_a_file", "final_is_a_link_elsewhere"]


@pytest.mark.parametrize("name", REFUSED)
def test_a_planted_row_moves_nothing_and_is_named_in_a_note(base, tmp_path, name):
    spec, runs = base
    run_id, staging, folder = planted_case(name, tmp_path, runs)
    plant(runs / "ledger.sqlite", run_id, staging, folder)
    before = tree(tmp_path)
    code, out, err = run_cli(["run", str(spec)])
    assert code == 0, err
    after = tree(tmp_path)
    landed = [line.split(":", 1)[1].strip() for line in out.splitlines() if line.startswith("run folder:")]
    new = str(Path(landed[0]).relative_to(tmp_path))
    assert {k: v for k, v in after.items() if not k.startswith(new)} == {
        k: v for k, v in before.items() if not k.startswith(new)}
    notes = [line for line in out.splitlines() if line.startswith("note:") and repr(run_id) in line]
    assert len(notes) == 1 and "not done" in notes[0], out
    assert state_of(runs / "ledger.sqlite", run_id) == "placing"


def test_a_well_formed_row_of_another_output_folder_is_left_to_that_folder(base, tmp_path):
    """A shared ledger (output.ledger) holds runs of several output folders: a run into one
    folder never moves another folder's files, and says nothing of them."""
    spec, runs = base
    other = tmp_path / "other_runs"
    hidden_run(other / ".incomplete-run-x", "run-x")
    plant(runs / "ledger.sqlite", "run-x", other / ".incomplete-run-x", other / "run-x")
    before = tree(other)
    code, out, err = run_cli(["run", str(spec)])
    assert code == 0, err
    assert tree(other) == before
    assert "run-x" not in out
    assert state_of(runs / "ledger.sqlite", "run-x") == "placing"


def test_the_output_folders_own_unfinished_run_is_still_finished(base, tmp_path):
    """The one move allowed: this output folder's hidden folder, holding its run's metrics.json."""
    spec, runs = base
    hidden = hidden_run(runs / ".incomplete-run-x", "run-x")
    plant(runs / "ledger.sqlite", "run-x", hidden, runs / "run-x")
    code, out, err = run_cli(["run", str(spec)])
    assert code == 0, err
    assert not hidden.exists() and (runs / "run-x" / "keep.txt").is_file()
    assert state_of(runs / "ledger.sqlite", "run-x") == "placed"
    assert "run-x" not in out
