"""Whole runs stay the same, file for file, while castline's code is reorganised.

This is a guard against accidental change, not a check of correctness (the
other tests check the numbers against outside references): two specs over the
demo data, one plain and one that turns on most of castline (a log target,
lags, series slopes, eight models, rolling origin, HAC errors, a scenario),
are run end to end and every file of the run folder, every ledger table and
the console output are compared with the copies stored in
tests/data/same_output/. Run ids, times and the temporary folder are masked;
the report's pictures are masked too (their bytes depend on matplotlib's
version; the tables they draw from are compared).

After an intended change of output, rewrite the stored copies with
    CASTLINE_WRITE_SAME_OUTPUT=1 .venv/bin/python -m pytest tests/runs/test_same_output.py
and review the diff before committing it.
"""

from __future__ import annotations

import os
import re
import sqlite3
import subprocess
import sys
from contextlib import closing
from pathlib import Path

import pandas as pd
import pytest
import yaml
from conftest import ROOT, TEST_DATA

STORED = TEST_DATA / "same_output"
REWRITE = os.environ.get("CASTLINE_WRITE_SAME_OUTPUT") == "1"
SPECS = ["demo", "wide"]

MASKS = [
    (re.compile(r"run-\d{8}T\d{6,12}Z-[0-9a-f]{6}"), "run-ID"),
    (re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(\+00:00|Z)?"), "TIME"),
    # SVG or PNG, whichever is smaller: which one can change with matplotlib's version too.
    (re.compile(r"data:image/(png;base64,[A-Za-z0-9+/=]+|svg\+xml,[^\"]+)"), "data:image/KIND;base64,PICTURE"),
]


def _masked(text: str, folder: Path) -> str:
    text = text.replace(str(folder), "TMP").replace(str(ROOT), "REPO")
    for pattern, replacement in MASKS:
        text = pattern.sub(replacement, text)
    return text


def _ledger_dump(ledger: Path, folder: Path) -> dict[str, str]:
    with closing(sqlite3.connect(ledger)) as conn:
        tables = [row[0] for row in conn.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        dump = {}
        for table in tables:
            frame = pd.read_sql_query(f'SELECT * FROM "{table}"', conn)
            if "spec_hash" in frame:   # a hash of the resolved spec, which holds the temporary paths
                frame["spec_hash"] = "HASH"
            frame = frame.sort_values(list(frame.columns), kind="stable", na_position="first")
            dump[f"ledger.{table}.csv"] = _masked(frame.to_csv(index=False), folder)
    return dump


def _run(name: str, tmp_path: Path, one_process: bool = False) -> dict[str, str]:
    spec = yaml.safe_load((STORED / f"{name}.yaml").read_text())
    spec["input"]["file"] = str((STORED / spec["input"]["file"]).resolve())
    spec["output"]["folder"] = str(tmp_path / "out")
    spec_file = tmp_path / f"{name}.yaml"
    spec_file.write_text(yaml.safe_dump(spec, sort_keys=False))
    env = dict(os.environ, CASTLINE_ONE_PROCESS="1") if one_process else \
        {key: value for key, value in os.environ.items() if key != "CASTLINE_ONE_PROCESS"}
    done = subprocess.run([sys.executable, "-m", "pipeline", "run", str(spec_file)],
                          capture_output=True, text=True, cwd=tmp_path, env=env)
    assert done.returncode == 0, done.stderr
    (run_folder,) = (tmp_path / "out").glob("run-*")
    files = {"console.txt": _masked(done.stdout + done.stderr, tmp_path)}
    for path in sorted(run_folder.iterdir()):
        files[path.name] = _masked(path.read_text(encoding="utf-8"), tmp_path)
    files.update(_ledger_dump(tmp_path / "out" / "ledger.sqlite", tmp_path))
    return files


@pytest.mark.parametrize(("name", "one_process"), [(name, False) for name in SPECS] + [("wide", True)])
def test_a_run_writes_what_it_wrote_before(name, one_process, tmp_path):
    """In a fresh process, which shares work with forked copies of itself where the machine
    allows (core.forked), and once with CASTLINE_ONE_PROCESS=1, which does all of it itself."""
    files = _run(name, tmp_path, one_process)
    stored = STORED / name
    if REWRITE and not one_process:
        stored.mkdir(exist_ok=True)
        for old in stored.iterdir():
            old.unlink()
        for file_name, text in files.items():
            (stored / file_name).write_text(text, encoding="utf-8")
    expected = {path.name: path.read_text(encoding="utf-8") for path in sorted(stored.iterdir())}
    assert sorted(files) == sorted(expected)
    changed = [file_name for file_name in files if files[file_name] != expected[file_name]]
    assert not changed, f"these files of the {name} run changed: {changed}"
