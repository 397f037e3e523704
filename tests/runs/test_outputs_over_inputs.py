"""An option's output file is never written over what a command reads or records into.

``castline check SPEC --problems FILE`` and ``castline forecast MODEL DATA --output FILE``
refuse, with one line naming the option and the file and exit 2, a FILE that is the spec,
the data file, the model file, the ledger (or any SQLite file), a file of a run folder, or
a folder; and any other file already there unless ``--overwrite`` is given. A refused
command has changed nothing: every byte under the test's folder is compared.

Plumbing tests on the tiny invented run of tests/conftest.py: no figure here is a
reference value.
"""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pytest
from conftest import run_cli, tiny_data, write_tiny_spec


def snapshot(root: Path) -> dict[str, bytes | str]:
    return {str(p.relative_to(root)): ("link" if p.is_symlink() else p.read_bytes() if p.is_file() else "dir")
            for p in sorted(root.rglob("*"))}


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    """A spec with one run made (a ledger, a run folder and its model file)."""
    root = tmp_path_factory.mktemp("outputs")
    spec = write_tiny_spec(root, tiny_data(), actuals_to="2021-12")
    code, _, err = run_cli(["run", str(spec)])
    assert code == 0, err
    (folder,) = [p for p in (root / "runs").iterdir() if p.is_dir()]
    return root, spec, folder


def one_line_refusal(code, out, err, option: str, target) -> None:
    assert code == 2, (out, err)
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"castline: {option} ") and str(target) in lines[0], err
    assert "Traceback" not in err


def check_targets(root: Path, spec: Path, folder: Path) -> dict[str, Path]:
    (root / "link_to_data.csv").unlink(missing_ok=True)
    (root / "link_to_data.csv").symlink_to(root / "data.csv")
    (root / "hard_to_spec.yaml").unlink(missing_ok=True)
    os.link(spec, root / "hard_to_spec.yaml")
    return {"the spec": spec, "the data file": root / "data.csv", "the ledger": root / "runs" / "ledger.sqlite",
            "a link to the data": root / "link_to_data.csv", "a hard link to the spec": root / "hard_to_spec.yaml",
            "the data by a path with dots": root / "runs" / ".." / "data.csv",
            "a run folder's file": folder / "forecast.csv", "the model file": folder / "model.json",
            "a folder": root / "runs"}


@pytest.mark.parametrize("name", ["the spec", "the data file", "the ledger", "a link to the data",
                                  "a hard link to the spec", "the data by a path with dots",
                                  "a run folder's file", "the model file", "a folder"])
@pytest.mark.parametrize("overwrite", [False, True])
def test_check_problems_never_goes_onto_an_input(project, name, overwrite):
    root, spec, folder = project
    target = check_targets(root, spec, folder)[name]
    before = snapshot(root)
    code, out, err = run_cli(["check", str(spec), "--problems", str(target), *(["--overwrite"] * overwrite)])
    one_line_refusal(code, out, err, "--problems", target)
    assert snapshot(root) == before


@pytest.mark.parametrize("name", ["the model file", "the data file", "a run folder's file", "the ledger",
                                  "a link to the data", "a folder"])
@pytest.mark.parametrize("overwrite", [False, True])
def test_forecast_output_never_goes_onto_an_input(project, name, overwrite):
    root, spec, folder = project
    target = check_targets(root, spec, folder)[name]
    before = snapshot(root)
    code, out, err = run_cli(["forecast", str(folder / "model.json"), str(root / "data.csv"),
                              "--output", str(target), *(["--overwrite"] * overwrite)])
    one_line_refusal(code, out, err, "--output", target)
    assert snapshot(root) == before


@pytest.mark.parametrize("command", ["check", "forecast"])
def test_an_existing_file_is_replaced_only_with_overwrite(project, tmp_path, command):
    root, spec, folder = project
    target = tmp_path / "mine.csv"
    target.write_text("the user's own notes\n", encoding="utf-8")
    if command == "check":
        args, option = ["check", str(spec), "--problems", str(target)], "--problems"
    else:
        args, option = ["forecast", str(folder / "model.json"), str(root / "data.csv"), "--output",
                        str(target)], "--output"
    code, out, err = run_cli(args)
    one_line_refusal(code, out, err, option, target)
    assert "--overwrite" in err
    assert target.read_text(encoding="utf-8") == "the user's own notes\n"
    code, out, err = run_cli([*args, "--overwrite"])
    assert code == 0, err
    table = pd.read_csv(target)
    assert ("forecast" in table.columns) if command == "forecast" else ("check" in table.columns)
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".mine.csv.")]   # no part file left


def test_a_new_file_is_written_and_a_missing_folder_refused(project, tmp_path):
    root, spec, folder = project
    new = tmp_path / "forecasts.csv"
    code, _, err = run_cli(["forecast", str(folder / "model.json"), str(root / "data.csv"), "--output", str(new)])
    assert code == 0, err and new.is_file()
    missing = tmp_path / "no_such_folder" / "f.csv"
    code, out, err = run_cli(["check", str(spec), "--problems", str(missing)])
    one_line_refusal(code, out, err, "--problems", missing)
    assert not missing.parent.exists()


@pytest.mark.parametrize("name", ["the ledger", "a run folder's file", "the model file", "the spec", "a folder"])
@pytest.mark.parametrize("overwrite", [False, True])
def test_compare_revisions_never_goes_onto_the_ledger_or_a_run(project, name, overwrite):
    """``castline compare A B --revisions FILE``: the ledger it reads and the run folders' files
    are refused with or without --overwrite; the spec, being a file already there, without it."""
    root, spec, folder = project
    target = check_targets(root, spec, folder)[name]
    before = snapshot(root)
    code, out, err = run_cli(["compare", str(folder), str(folder), "--revisions", str(target),
                              *(["--overwrite"] * overwrite)])
    if name == "the spec" and overwrite:   # not an input of compare: replaced, as asked
        assert code == 0, err
        spec.write_bytes(before["spec.yaml"])
        return
    one_line_refusal(code, out, err, "--revisions", target)
    assert snapshot(root) == before
