"""A model file of weekly data (WeekDummies, weekly trend, ISO week labels).

The reference for each forecast is the forecast.csv the run itself wrote when it wrote
the model file (tests/data/model_files_v4/weekly/; its README says how).
"""

from __future__ import annotations

import json

import pandas as pd
import pytest
from test_model_file import V4, _assert_same_forecasts, forecast_as_its_run

from pipeline import cli
from pipeline.features.plan import PART_CLASSES

FOLDER = V4 / "weekly"


@pytest.mark.parametrize("rows", ["rows.csv", "data.csv"])
def test_the_weekly_model_file_forecasts_what_its_run_wrote(rows, tmp_path):
    merged = forecast_as_its_run(FOLDER, rows, tmp_path)
    assert len(merged) == 2 * 6 * 6     # two regions, six weeks, six models
    # 2022-W16 to 2022-W21: the six ISO weeks after the last actual (Wednesday 2022-04-13).
    assert sorted(merged["period"].unique()) == [f"2022-W{week}" for week in range(16, 22)]


def test_the_weekly_parts_read_and_written_again_are_the_same_json():
    document = json.loads((FOLDER / "model.json").read_text(encoding="utf-8"))
    assert document["period"] == "week"
    parts = {part["class"]: part["state"] for part in document["plan"]["parts"]}
    for name in ("WeekDummies", "TrendTerm"):
        part = PART_CLASSES[name].from_dict(parts[name], [], 4)
        assert json.dumps(part.to_dict()) == json.dumps(parts[name]), name
    trend = PART_CLASSES["TrendTerm"].from_dict(parts["TrendTerm"], [], 4)
    assert trend.get_feature_names_out() == ["weeks since 2020-W01"]
    weeks = PART_CLASSES["WeekDummies"].from_dict(parts["WeekDummies"], [], 4)
    assert weeks.get_feature_names_out() == [f"week: {level}" for level in range(2, 53)]


def test_a_weekly_model_file_reads_any_day_of_a_week_as_that_week(tmp_path, capsys):
    # The file's period is week: rows dated on the Sunday of each week (not the Wednesday
    # the run read) are the same weeks and get the same forecasts.
    rows = pd.read_csv(FOLDER / "rows.csv")
    rows["week"] = (pd.to_datetime(rows["week"]) + pd.Timedelta(days=4)).dt.strftime("%Y-%m-%d")
    rows.to_csv(tmp_path / "rows.csv", index=False)
    output = tmp_path / "forecast.csv"
    code = cli.main(["forecast", str(FOLDER / "model.json"), str(tmp_path / "rows.csv"), "--output", str(output)])
    assert code == 0, capsys.readouterr().err
    _assert_same_forecasts(output, FOLDER)
