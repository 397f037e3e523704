"""pipeline/present/run_files.py: a run folder's files read back for the pages.

A run folder made by pipeline.run on the tiny invented data (plumbing only); the references are
the folder's own files read with json and pandas, and README's list of a run folder's files.
"""

from __future__ import annotations

import json
import shutil

import pandas as pd
import pytest
from conftest import tiny_data, write_tiny_spec

import pipeline
from pipeline.core.errors import UserError
from pipeline.present.run_files import REQUIRED, load_run_files


@pytest.fixture
def folder_copy(tiny_runs, tmp_path):
    """A copy of the second tiny run's folder, free to damage."""
    copy = tmp_path / "run-copy"
    shutil.copytree(tiny_runs[2][1][0].folder.path, copy)  # the second run
    return copy


def test_a_complete_folder_is_read_back(tiny_runs):
    folder = tiny_runs[2][1][0].folder.path  # the second run
    files = load_run_files(folder)
    assert files.metrics == json.loads((folder / "metrics.json").read_text(encoding="utf-8"))
    assert files.fingerprint == json.loads((folder / "fingerprint.json").read_text(encoding="utf-8"))
    assert files.track == json.loads((folder / "track_record.json").read_text(encoding="utf-8"))
    assert files.spec_text == (folder / "spec.yaml").read_text(encoding="utf-8")
    forecast = files.table("forecast.csv")
    pd.testing.assert_frame_equal(forecast.drop(columns=["series", "period", "model"]),
                                  pd.read_csv(folder / "forecast.csv").drop(columns=["series", "period",
                                                                                     "model"]))
    assert files.table("scenarios.csv") is None          # the spec has no scenarios: no file


def test_an_empty_table_file_reads_as_none(folder_copy):
    (folder_copy / "vif.csv").write_text("", encoding="utf-8")
    assert load_run_files(folder_copy).table("vif.csv") is None


@pytest.mark.parametrize("gone", [["metrics.json"], ["forecast.csv", "history.csv"]])
def test_an_incomplete_folder_is_refused_with_one_line_naming_it_and_what_is_missing(folder_copy, gone):
    for name in gone:
        (folder_copy / name).unlink()
    with pytest.raises(UserError) as error:
        load_run_files(folder_copy)
    assert str(error.value) == (f"{folder_copy}: not a complete castline run folder "
                                f"(missing {', '.join(gone)})")


def test_every_required_file_is_one_a_run_writes(tiny_runs):
    written = {p.name for p in tiny_runs[2][0][0].folder.path.iterdir()}
    assert set(REQUIRED) <= written


def test_no_folder_or_an_unreadable_file_is_one_line(folder_copy, tmp_path):
    with pytest.raises(UserError, match="no such run folder"):
        load_run_files(tmp_path / "run-missing")
    (folder_copy / "metrics.json").write_text("{ not json", encoding="utf-8")
    with pytest.raises(UserError, match="cannot be read as JSON") as error:
        load_run_files(folder_copy)
    assert str(error.value).startswith(f"{folder_copy / 'metrics.json'}: ") and "\n" not in str(error.value)


@pytest.fixture(scope="module")
def coded_series_run(tmp_path_factory):
    """A run whose two series are named by codes with leading zeros, as store codes often are."""
    spec = write_tiny_spec(tmp_path_factory.mktemp("codes"), tiny_data(regions=("007", "010")),
                           actuals_to="2021-12")
    return pipeline.run(spec)


def test_series_names_are_read_back_as_written(coded_series_run):
    files = load_run_files(coded_series_run.folder.path)
    assert sorted(files.table("forecast.csv")["series"].unique()) == ["007", "010"]
