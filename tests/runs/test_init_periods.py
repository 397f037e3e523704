"""`castline init` reads the period from the spacing of the dates (week, month or quarter),
writes the starter spec for it, and refuses dates spaced by no period castline forecasts.

The CSVs are invented here (their numbers are plumbing only); the dates are built with
pandas' date_range, and which spacing each file has is stated beside it. The ISO weeks are
checked against Python's date.isocalendar (the reference for ISO 8601 weeks). Each file is
run through ``castline init`` in this process (conftest.run_cli) and the spec it writes is
read back both as YAML and with the spec loader.
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import TEST_DATA, run_cli

from pipeline.spec import load_spec


def write(tmp_path, name: str, dates, *, stores=("North", "South"), future: int = 0) -> object:
    """Write a CSV of invented units per store on the dates (the last ``future`` dates with
    no units: periods to forecast) and return its path."""
    dates = list(dates)
    rows = []
    for j, store in enumerate(stores):
        for k, day in enumerate(dates):
            rows.append({"date": pd.Timestamp(day).strftime("%Y-%m-%d"), "store": store,
                         "units": None if k >= len(dates) - future else 100 + 3 * k + 7 * j + k % 5,
                         "price": round(2.5 + 0.01 * k + 0.2 * j, 2)})
    path = tmp_path / name
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def init(tmp_path, data) -> tuple[int, str, str, dict | None, object]:
    """Run castline init on a data file; return the exit code, stdout, stderr, the spec's
    YAML (None when none was written) and its path."""
    spec = tmp_path / "data.spec.yaml"
    code, out, err = run_cli(["init", str(data), "--spec-file", str(spec)])
    return code, out, err, (yaml.safe_load(spec.read_text(encoding="utf-8")) if spec.exists() else None), spec


# 2019-12-30 is the Monday of ISO week 1 of 2020, a year of 53 ISO weeks (it starts on a
# Thursday); 160 Mondays from there reach into 2022.
MONDAYS = pd.date_range("2019-12-30", periods=160, freq="7D")


def test_weekly_data_of_a_53_week_year_get_a_weekly_spec(tmp_path):
    assert date(2020, 12, 28).isocalendar()[:2] == (2020, 53)      # reference: ISO 8601 calendar
    assert pd.Timestamp("2020-12-28") in MONDAYS
    code, out, err, spec, path = init(tmp_path, write(tmp_path, "weekly.csv", MONDAYS, future=10))
    assert code == 0, err
    assert "(weekly, 160 weeks)" in out
    assert "period: dates about 7 days apart: weekly data" in out.splitlines()
    text = path.read_text(encoding="utf-8")
    assert "  period: week            # dates about 7 days apart: weekly data" in text.splitlines()
    assert spec["input"]["period"] == "week"
    assert spec["input"]["series"] == ["store"]
    # 150 weeks of history: two years and more, so a trend and the season as four pairs
    assert spec["drivers"]["calendar"] == {"trend": True, "season": "fourier", "harmonics": 4}
    # A quarter of weeks ahead; the first window 150 - 13 - 23 = 114 weeks: 24 origins.
    assert spec["validation"] == {"method": "rolling_origin", "horizon": 13, "min_train_periods": 114}
    assert "forecast" not in spec                 # the file has its ten weeks to forecast
    assert "month_of_year" not in text and "months" not in text
    assert load_spec(path).input.period == "week"


def test_quarterly_data_get_a_quarterly_spec_with_season_dummies(tmp_path):
    quarters = pd.date_range("2012-01-01", periods=40, freq="QS")   # 2012Q1 to 2021Q4
    code, out, err, spec, path = init(tmp_path, write(tmp_path, "quarterly.csv", quarters, stores=("All",)))
    assert code == 0, err
    assert "(quarterly, 40 quarters)" in out
    assert "period: dates about 91 days apart: quarterly data" in out.splitlines()
    assert spec["input"]["period"] == "quarter"
    assert spec["input"]["series"] == []
    assert spec["drivers"]["calendar"] == {"trend": True, "season": "dummies"}
    # A year of quarters ahead; the first window max(8, 40 - 4 - 23) = 13 quarters.
    assert spec["validation"] == {"method": "rolling_origin", "horizon": 4, "min_train_periods": 13}
    assert spec["forecast"] == {"periods": 4}     # no quarters to forecast in the file: four added
    assert "The file has no quarters to forecast" in path.read_text(encoding="utf-8")
    assert load_spec(path).input.period == "quarter"


def test_few_quarters_leave_the_season_out_and_hold_out_a_fifth(tmp_path):
    quarters = pd.date_range("2019-01-01", periods=7, freq="QS")    # under two years
    code, out, err, spec, path = init(tmp_path, write(tmp_path, "quarterly.csv", quarters))
    assert code == 0, err
    assert "calendar" not in spec["drivers"]
    text = path.read_text(encoding="utf-8")
    assert "# calendar (trend, season) left out: 7 quarters of history are too few" in text
    assert "once there are 8 (each quarter of the year seen twice)" in text
    assert spec["validation"] == {"method": "holdout", "last_periods": 1}    # 7 // 5
    assert load_spec(path).input.period == "quarter"


def test_monthly_data_keep_the_monthly_spec(tmp_path):
    months = pd.date_range("2019-01-01", periods=36, freq="MS")
    code, out, err, spec, path = init(tmp_path, write(tmp_path, "monthly.csv", months, future=3))
    assert code == 0, err
    assert "(monthly, 36 months)" in out
    assert "period: dates about 31 days apart: monthly data" in out.splitlines()
    assert "  period: month" in path.read_text(encoding="utf-8").splitlines()   # no comment
    assert spec["drivers"]["calendar"] == {"trend": True, "month_of_year": "fourier"}
    assert spec["validation"] == {"method": "holdout", "last_periods": 6}       # 33 // 5
    assert load_spec(path).input.period == "month"


def test_monthly_dates_on_varying_days_are_read_as_months(tmp_path):
    # The n-th month's date on day 1 + n (1 to 28): 32 days apart mostly, no spacing by
    # the gap, but one date in each month, one month after the other.
    months = [day + pd.Timedelta(days=k % 28) for k, day in
              enumerate(pd.date_range("2019-01-01", periods=30, freq="MS"))]
    code, out, err, spec, path = init(tmp_path, write(tmp_path, "monthly.csv", months))
    assert code == 0, err
    assert spec["input"]["period"] == "month"
    assert "# dates about 32 days apart, one in each month: monthly data" in path.read_text(encoding="utf-8")


def test_series_that_take_turns_are_read_across_the_file(tmp_path):
    # North on the even Mondays, South on the odd ones: each series' dates 14 days apart,
    # the file's 7; read as weeks (the check then finds the weeks each series lacks).
    weeks = pd.DataFrame({"date": MONDAYS[:60].strftime("%Y-%m-%d"),
                          "store": ["North", "South"] * 30, "units": np.arange(60) + 100.0})
    weeks.to_csv(tmp_path / "turns.csv", index=False)
    code, out, err, spec, path = init(tmp_path, tmp_path / "turns.csv")
    assert code == 0, err
    assert spec["input"]["period"] == "week"


def test_one_date_per_series_tells_no_spacing_and_months_are_assumed(tmp_path):
    code, out, err, spec, path = init(tmp_path, write(tmp_path, "once.csv", ["2024-03-01"],
                                                      stores=("North", "South", "East")))
    assert code == 0, err
    assert spec["input"]["period"] == "month"
    assert "# no series has two dates to tell the spacing by: monthly data assumed" in \
        path.read_text(encoding="utf-8")


def test_dates_that_read_either_way_keep_the_note_and_months(tmp_path):
    # tests/data/broken_inputs/day_first.csv: 01/01/2020 to 01/07/2020, read month first as
    # seven days in January; the note on the dates says how to read them day first.
    code, out, err, spec, path = init(tmp_path, TEST_DATA / "broken_inputs" / "day_first.csv")
    assert code == 0, err
    assert spec["input"]["period"] == "month"
    assert "# dates about 1 day apart as read: no period castline forecasts" in path.read_text(encoding="utf-8")
    assert any(line.startswith("note: ") and "could be read either way" in line for line in out.splitlines())


@pytest.mark.parametrize(("dates", "expected"), [
    (pd.date_range("2023-01-01", periods=90, freq="D"),
     "the dates are about 1 day apart (daily data); castline forecasts weekly (6 to 8 days apart), "
     "monthly (28 to 31) or quarterly (89 to 92) data: add the rows up to weeks, months or quarters first"),
    (pd.date_range("2000-01-01", periods=20, freq="YS"),     # 365 days apart but in 5 leap years
     "the dates are about 365 days apart (yearly data); castline forecasts weekly (6 to 8 days apart), "
     "monthly (28 to 31) or quarterly (89 to 92) data: yearly data are too coarse for it"),
    (pd.date_range("2023-01-02", periods=40, freq="14D"),
     "the dates are about 14 days apart (irregular data); castline forecasts weekly (6 to 8 days "
     "apart), monthly (28 to 31) or quarterly (89 to 92) data: add the rows up to weeks, months or "
     "quarters first"),
], ids=["daily", "yearly", "fortnightly"])
def test_dates_spaced_by_no_period_are_refused_in_one_line_and_no_spec_is_written(tmp_path, dates, expected):
    data = write(tmp_path, "data.csv", dates)
    code, out, err, spec, path = init(tmp_path, data)
    assert code == 2
    assert err == f"castline: {data}: column 'date': {expected}\n"
    assert spec is None and not path.exists()
