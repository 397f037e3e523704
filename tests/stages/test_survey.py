"""Surveying a data file for a starter spec (pipeline/stages/survey.py).

Small CSVs are written here by hand; what each should be found to hold (its date
column, its spacing, its column types, its series and target) is stated beside it.
"""

from __future__ import annotations

import pandas as pd
import pytest
from conftest import invented_shops
from scipy.stats import pearsonr

from pipeline.core.errors import DataError
from pipeline.stages.survey import infer


def write(path, frame: pd.DataFrame, sep: str = ",") -> object:
    frame.to_csv(path, index=False, sep=sep)
    return path


def monthly(n: int = 15, regions=("North", "South")) -> pd.DataFrame:
    months = pd.date_range("2022-01-01", periods=n, freq="MS")
    rows = []
    for k, month in enumerate(months):
        for j, region in enumerate(regions):
            rows.append({"region": region, "sold_on": month.strftime("%Y-%m-%d"), "units": 100 + 3 * k + j,
                         "price": round(2.5 + 0.01 * k + 0.3 * j, 2), "promo": "yes" if k % 3 == 0 else "no"})
    return pd.DataFrame(rows)


def test_the_date_column_and_monthly_spacing_are_found(tmp_path):
    # the date column is not first and its name has no date word: found by its values
    found = infer(write(tmp_path / "data.csv", monthly()))
    assert found.date_column == "sold_on"
    assert found.frequency == "month"
    assert found.periods == 15
    assert found.rows == 30
    assert found.notes == []


def test_numbers_whole_numbers_and_categories_are_told_apart(tmp_path):
    found = infer(write(tmp_path / "data.csv", monthly()))
    assert found.types == {"region": "category", "sold_on": "date", "units": "whole_number",
                           "price": "number", "promo": "category"}
    assert found.levels["promo"] == ["no", "yes"]


def test_the_series_key_is_the_column_that_with_the_month_names_each_row(tmp_path):
    found = infer(write(tmp_path / "data.csv", monthly()))
    assert found.series == ["region"]
    assert found.categorical_drivers == ["promo"]


def test_a_single_series_has_no_series_key(tmp_path):
    found = infer(write(tmp_path / "data.csv", monthly(regions=("North",))))
    assert found.series == []


def test_the_target_is_the_number_empty_in_the_latest_months(tmp_path):
    frame = monthly()
    latest = frame["sold_on"] >= "2023-02-01"       # the last two months: to forecast
    frame.loc[latest, "price"] = None
    found = infer(write(tmp_path / "data.csv", frame))
    assert found.target == "price"
    assert "units" in found.numeric_drivers and "price" not in found.numeric_drivers


def test_a_semicolon_file_is_sniffed(tmp_path):
    found = infer(write(tmp_path / "data.csv", monthly(), sep=";"))
    assert found.csv.delimiter == ";"
    assert found.date_column == "sold_on"


def test_weekly_dates_are_read_as_weeks_and_said_so(tmp_path):
    frame = pd.DataFrame({"week": pd.date_range("2023-01-02", periods=10, freq="7D").strftime("%Y-%m-%d"),
                          "units": range(10)})
    found = infer(write(tmp_path / "data.csv", frame))
    assert found.frequency == "week"
    assert found.periods == 10          # ten Mondays: ten ISO weeks, not three months
    assert found.spacing == "dates about 7 days apart: weekly data"
    assert found.notes == []            # weekly data are forecast as weeks: nothing to warn of


def test_a_file_without_dates_is_refused(tmp_path):
    frame = pd.DataFrame({"region": ["a", "b"], "units": [1, 2]})
    path = write(tmp_path / "data.csv", frame)
    with pytest.raises(DataError, match="no column holds dates"):
        infer(path)


def shop(history: int, future: int = 3, *, weather_ahead: bool = True) -> pd.DataFrame:
    """The invented shops of conftest (seed 7)."""
    return invented_shops(history, future, weather_ahead=weather_ahead, seed=7)


def test_an_outcome_measured_with_the_target_is_not_a_driver(tmp_path):
    frame = shop(30)
    found = infer(write(tmp_path / "data.csv", frame))
    history = frame[frame["sales"].notna()]
    r = pearsonr(history["sales"], history["visits"]).statistic   # reference: scipy.stats.pearsonr
    assert abs(r) > 0.9     # the generated column is the target plus small noise
    assert found.target == "sales"
    assert "visits" not in found.numeric_drivers
    assert found.target_lookalikes.keys() == {"visits"}
    assert found.target_lookalikes["visits"] == pytest.approx(r, rel=1e-12)


def test_a_driver_planned_in_every_month_to_forecast_is_given(tmp_path):
    found = infer(write(tmp_path / "data.csv", shop(30)))
    # 3 months to forecast × 2 shops, price and weather filled in each (see shop()).
    assert found.future_rows == 6
    assert found.numeric_drivers == ["price", "weather"]
    assert found.driver_future == {"price": "given", "weather": "given"}


def test_a_driver_empty_in_the_months_to_forecast_is_estimated(tmp_path):
    found = infer(write(tmp_path / "data.csv", shop(30, weather_ahead=False)))
    assert found.driver_future == {"price": "given", "weather": "month_mean"}
    assert found.future_missing == {"price": 0, "weather": 6}   # 3 months × 2 shops (see shop())


def test_without_months_to_forecast_every_driver_is_estimated(tmp_path):
    # No row lacks the target, so nothing says which drivers are known in advance.
    found = infer(write(tmp_path / "data.csv", shop(30, future=0)))
    assert found.future_rows == 0
    assert found.driver_future == {"price": "month_mean", "weather": "month_mean"}
    assert "visits" in found.target_lookalikes


def test_months_of_history_leave_out_the_months_to_forecast(tmp_path):
    found = infer(write(tmp_path / "data.csv", shop(18, future=4)))
    assert (found.periods, found.history_periods) == (22, 18)   # 18 + 4 months (see shop())
