"""The spacings of periods, checked against Python's own ISO calendar and pandas."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from pipeline.core.cadence import MONTH, QUARTER, WEEK, cadence_of_freq, cadence_of_label, parse_label


def test_weeks_follow_the_iso_calendar_across_53_week_years():
    # Reference: datetime.date.isocalendar (Python's standard library, ISO 8601).
    days = pd.date_range("2014-12-01", "2027-01-31", freq="D")
    periods = pd.Series(days).dt.to_period(WEEK.freq)
    ordinals = periods.array.asi8
    expected = [f"{d.isocalendar()[0]}-W{d.isocalendar()[1]:02d}" for d in days.date]
    assert WEEK.labels(ordinals) == expected
    assert WEEK.of_year(ordinals).tolist() == [d.isocalendar()[1] for d in days.date]
    # 2015, 2020 and 2026 have 53 ISO weeks (each holds a Thursday 1 January or is a leap year
    # starting on a Wednesday or Thursday): week 53 is a period of its own.
    for year in (2015, 2020, 2026):
        assert dt.date(year, 12, 28).isocalendar()[1] == 53
        assert WEEK.label(WEEK.parse(f"{year}-W53")) == f"{year}-W53"
    assert np.all(np.diff(np.unique(ordinals)) == 1)   # consecutive weeks are consecutive ordinals


def test_each_period_starts_where_pandas_says_and_labels_read_back():
    for cadence, dates in ((MONTH, ["2024-02-29", "1999-12-31"]), (QUARTER, ["2024-05-17", "1970-01-01"]),
                           (WEEK, ["2024-01-07", "2021-01-03"])):
        periods = pd.Series(pd.to_datetime(dates)).dt.to_period(cadence.freq)
        for period in periods:
            assert cadence.parse(cadence.label(period)) == period
            assert parse_label(cadence.label(period)) == period
            assert cadence_of_label(cadence.label(period)) is cadence
            days = cadence.days_in(period.ordinal)
            assert days[0] == np.datetime64(period.start_time.date())
            assert days[-1] == np.datetime64(period.end_time.date())
        assert cadence_of_freq(periods.dtype) is cadence


def test_seasons():
    assert (MONTH.season_lag, QUARTER.season_lag, WEEK.season_lag) == (12, 4, 52)
    assert WEEK.per_year == pytest.approx(52.1786, abs=1e-4)
    # Ordinal 0 is January 1970 and 1970Q1, so a month's or quarter's place in its year is the
    # ordinal modulo its season (the baselines rely on it).
    ordinals = np.arange(-30, 300)
    assert np.array_equal(MONTH.of_year(ordinals) - 1, ordinals % 12)
    assert np.array_equal(QUARTER.of_year(ordinals) - 1, ordinals % 4)


def test_labels_of_another_spacing_are_refused():
    with pytest.raises(ValueError):
        MONTH.parse("2024Q1")
    with pytest.raises(ValueError):
        cadence_of_label("2024/03")
