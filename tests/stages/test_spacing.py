"""The spacing of the dates (pipeline/stages/spacing.py): what it reads, and the check that
refuses data spaced otherwise than input.period in one line.

The dates are invented here; which spacing each set has is stated beside it (days counted
by the calendar: pandas' date_range and timedelta arithmetic).
"""

from __future__ import annotations

from types import SimpleNamespace

import pandas as pd
import pytest

from pipeline.core.errors import DataError
from pipeline.stages.spacing import check_spacing, one_a_period, spacing_of


def spec(period: str, series: list[str] | None = None):
    """The three keys of a spec the check reads."""
    return SimpleNamespace(input=SimpleNamespace(date_column="date", series=series or [], period=period))


def frame(dates, regions=("North",)) -> pd.DataFrame:
    """One row per date and region."""
    dates = pd.to_datetime(pd.Series(list(dates)))
    return pd.DataFrame({"date": [d for d in dates for _ in regions],
                         "region": [r for _ in dates for r in regions]})


MONTHS = pd.date_range("2020-01-01", periods=24, freq="MS")


def test_monthly_dates_with_a_month_missing_pass_as_months():
    dates = MONTHS.delete(4)      # 2020-05 missing: a gap of 61 days among gaps of 28 to 31
    data = frame(dates, ("North", "South"))
    assert spacing_of(data["date"], [data["region"]]).name == "month"
    check_spacing(data, spec("month", ["region"]), "data.csv")


def test_monthly_dates_written_on_varying_days_pass_as_months():
    # day 1, 8, 15, 22, 1, ...: gaps of 10 to 52 days, no month holding two dates
    dates = [d + pd.Timedelta(days=(7 * k) % 28) for k, d in enumerate(MONTHS)]
    assert check_spacing(frame(dates), spec("month"), "data.csv") is None   # no refusal raised
    assert one_a_period(pd.Series(dates), [], "month")    # one date a month, a month apart


@pytest.mark.parametrize("period", ["month", "quarter", "week"])
def test_one_row_per_series_tells_no_spacing_and_passes(period):
    data = pd.DataFrame({"date": pd.to_datetime(["2021-03-01", "2021-03-01", "2021-06-01"]),
                         "region": ["North", "South", "East"]})
    assert spacing_of(data["date"], [data["region"]]).days is None
    check_spacing(data, spec(period, ["region"]), "data.csv")


def test_weekly_rows_declared_monthly_are_refused_naming_file_column_and_the_period():
    weeks = pd.date_range("2021-01-04", periods=30, freq="7D")   # Mondays
    data = frame(weeks, ("North", "South"))
    with pytest.raises(DataError) as caught:
        check_spacing(data, spec("month", ["region"]), "data.csv")
    assert str(caught.value) == ("data.csv: column 'date': the dates are about 7 days apart, so the "
                                 "data look weekly, but input.period is month; set input.period: week")


def test_series_whose_weeks_start_on_other_days_are_still_read_as_weekly():
    # North's rows on Mondays, South's on Thursdays: across the file the dates are 3 and 4
    # days apart, within each series 7.
    mondays = pd.date_range("2021-01-04", periods=20, freq="7D")
    data = pd.DataFrame({"date": list(mondays) + list(mondays + pd.Timedelta(days=3)),
                         "region": ["North"] * 20 + ["South"] * 20})
    assert spacing_of(data["date"]).name is None    # 3 or 4 days: no spacing castline knows
    assert spacing_of(data["date"], [data["region"]]).name == "week"
    with pytest.raises(DataError, match="set input.period: week"):
        check_spacing(data, spec("quarter", ["region"]), "data.csv")


def test_monthly_rows_declared_weekly_or_quarterly_are_refused():
    for period in ("week", "quarter"):
        with pytest.raises(DataError, match=f"look monthly, but input.period is {period}; "
                                            "set input.period: month"):
            check_spacing(frame(MONTHS), spec(period), "data.csv")


def test_yearly_rows_are_refused_as_too_coarse():
    years = pd.date_range("2001-01-01", periods=20, freq="YS")
    with pytest.raises(DataError, match="about 365 days apart, so the data look yearly, but "
                                        "input.period is month; castline forecasts weekly"):
        check_spacing(frame(years), spec("month"), "data.csv")


def test_daily_rows_are_left_to_the_calendar_checks():
    # Day-first dates read month first look daily as well; the check of a month given
    # twice says how the dates were read, so the spacing check stays silent.
    days = pd.date_range("2020-01-01", periods=12, freq="D")
    assert spacing_of(frame(days)["date"]).name == "day"
    check_spacing(frame(days), spec("month"), "data.csv")


def test_iso_weeks_of_a_53_week_year_pass_as_weeks():
    # ISO 2020 has 53 weeks (it starts on Thursday 2020-01-02's week): 2019-12-30 to 2021-01-03.
    weeks = pd.date_range("2019-12-30", periods=60, freq="7D")
    assert weeks[52].isocalendar()[:2] == (2020, 53)
    check_spacing(frame(weeks), spec("week"), "data.csv")


def test_quarterly_rows_with_a_quarter_missing_pass_as_quarters():
    quarters = pd.date_range("2015-01-01", periods=20, freq="QS").delete(7)
    check_spacing(frame(quarters), spec("quarter"), "data.csv")
    with pytest.raises(DataError, match="look quarterly, but input.period is month"):
        check_spacing(frame(quarters), spec("month"), "data.csv")


def test_one_date_a_period_is_told_where_the_gaps_vary():
    # The n-th month's date on day 1 + n: 32 days apart mostly, one date in each month.
    drifting = pd.Series([d + pd.Timedelta(days=k % 28) for k, d in enumerate(MONTHS)])
    assert spacing_of(drifting).name is None
    assert one_a_period(drifting, [], "month")
    assert not one_a_period(drifting, [], "quarter")      # three dates in each quarter
    assert not one_a_period(drifting, [], "week")         # four or five weeks between dates
    days = pd.Series(pd.date_range("2020-01-01", periods=40, freq="D"))
    assert not any(one_a_period(days, [], period) for period in ("week", "month", "quarter"))
