"""pipeline/record/model_file.py: model files written by earlier versions keep loading.

The reference for each forecast is the forecast.csv the run itself wrote when it wrote
the model file (tests/data/model_files_v1/, made by castline 0.1.0; its README says how).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pipeline import cli

V1 = Path(__file__).resolve().parents[1] / "data" / "model_files_v1"
FIXTURES = ["demo", "wide", "calendar"]


def _keyed(table: pd.DataFrame) -> pd.Series:
    return table.set_index(["period", "series", "model"])["forecast"].sort_index()


def _assert_same_forecasts(written: Path, folder: Path) -> None:
    mine = _keyed(pd.read_csv(written))
    theirs = _keyed(pd.read_csv(folder / "forecast.csv"))      # what the run wrote at the time
    assert list(mine.index) == list(theirs.index)
    np.testing.assert_allclose(mine.to_numpy(), theirs.to_numpy(), rtol=1e-9, atol=0)


@pytest.mark.parametrize("name", FIXTURES)
def test_a_version_1_model_file_forecasts_what_its_run_wrote(name, tmp_path, capsys):
    folder = V1 / name
    output = tmp_path / "forecast.csv"
    code = cli.main(["forecast", str(folder / "model.json"), str(folder / "rows.csv"),
                     "--output", str(output)])
    assert code == 0, capsys.readouterr().err
    _assert_same_forecasts(output, folder)


def test_a_version_1_model_file_forecasts_through_the_command_in_a_subprocess(tmp_path):
    folder = V1 / "wide"
    output = tmp_path / "forecast.csv"
    done = subprocess.run([sys.executable, "-m", "pipeline", "forecast", str(folder / "model.json"),
                           str(folder / "rows.csv"), "--output", str(output)],
                          capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONWARNINGS": "ignore"})
    assert done.returncode == 0, done.stderr
    _assert_same_forecasts(output, folder)
