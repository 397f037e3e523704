"""What the check stage lets through, or refuses, because of a driver's or target's feature keys."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from conftest import demo_with_planned_weather

from pipeline.runner import check
from pipeline.stages.check import CheckFailed

SPEC = """\
name: check-features
input:
  file: data.csv
  date_column: month
  series: [region]
target: bags_sold
drivers:
  numeric:
    - column: rainfall_mm
{fill}
    - shelf_price
{top}
validation:
  method: holdout
  last_periods: 12
output:
  folder: out
"""


def write(tmp_path: Path, frame: pd.DataFrame, fill: str = "", top: str = "") -> Path:
    frame.to_csv(tmp_path / "data.csv", index=False)
    path = tmp_path / "spec.yaml"
    path.write_text(SPEC.format(fill=f"      missing: {fill}" if fill else "", top=top), encoding="utf-8")
    return path


@pytest.fixture
def demo() -> pd.DataFrame:
    return demo_with_planned_weather()      # rainfall is given in the months to forecast


def test_a_driver_without_a_fill_may_not_be_missing(tmp_path, demo):
    demo.loc[[5, len(demo) - 1], "rainfall_mm"] = None          # one month of history, one to forecast
    with pytest.raises(CheckFailed) as failed:
        check(write(tmp_path, demo))
    checks = {problem.check for problem in failed.value.problems}
    assert checks == {"driver missing", "driver missing in a month to forecast"}


@pytest.mark.parametrize("fill", ["mean", "median"])
def test_a_driver_the_spec_fills_may_be_missing_in_history_and_in_months_to_forecast(tmp_path, demo, fill):
    demo.loc[[5, len(demo) - 1], "rainfall_mm"] = None
    data = check(write(tmp_path, demo, fill=fill))
    assert data.history["rainfall_mm"].isna().sum() == 1
    assert data.future["rainfall_mm"].isna().sum() == 1


def test_a_target_at_or_below_zero_is_refused_for_a_log(tmp_path, demo):
    demo.loc[9, "bags_sold"] = 0
    path = write(tmp_path, demo, top="target_transform: log")
    with pytest.raises(CheckFailed) as failed:
        check(path)
    (problem,) = failed.value.problems
    assert problem.column == "bags_sold" and problem.row == 11        # the header is line 1
    assert problem.check == "not above 0, as target_transform: log needs"
    check(write(tmp_path, demo, top="target_transform: log1p"))       # log(1 + 0) is defined
