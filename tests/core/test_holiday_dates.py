"""Moving holidays and dated events per period (pipeline.core.holidays).

Every reference value names its source beside it: the published table of Western
Easter dates (typed in from memory, not computed here), or a hand count worked in the
comment from the calendar of the year.
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest

from pipeline.core.cadence import MONTH, QUARTER, WEEK
from pipeline.core.holidays import HOLIDAYS, dates_in_periods, easter_sunday, holiday_shares

# From memory of the published table of Western Easter dates (Easter Sunday, Gregorian
# calendar), 2000 to 2035: (month, day).
EASTER_SUNDAYS = {
    2000: (4, 23), 2001: (4, 15), 2002: (3, 31), 2003: (4, 20), 2004: (4, 11), 2005: (3, 27),
    2006: (4, 16), 2007: (4, 8), 2008: (3, 23), 2009: (4, 12), 2010: (4, 4), 2011: (4, 24),
    2012: (4, 8), 2013: (3, 31), 2014: (4, 20), 2015: (4, 5), 2016: (3, 27), 2017: (4, 16),
    2018: (4, 1), 2019: (4, 21), 2020: (4, 12), 2021: (4, 4), 2022: (4, 17), 2023: (4, 9),
    2024: (3, 31), 2025: (4, 20), 2026: (4, 5), 2027: (3, 28), 2028: (4, 16), 2029: (4, 1),
    2030: (4, 21), 2031: (4, 13), 2032: (3, 28), 2033: (4, 17), 2034: (4, 9), 2035: (3, 25),
}


def _shares(name: str, first: str, last: str, cadence) -> dict[str, float]:
    """Return the nonzero shares of a holiday over a range of periods, by label."""
    ordinals = pd.period_range(first, last, freq=cadence.freq).asi8
    shares = holiday_shares(name, ordinals, cadence)
    return {cadence.label(ordinal): share for ordinal, share in zip(ordinals, shares, strict=True) if share}


@pytest.mark.parametrize("year", sorted(EASTER_SUNDAYS))
def test_easter_sunday_is_the_published_date(year):
    assert easter_sunday(year) == date(year, *EASTER_SUNDAYS[year])


def test_easter_2024_falls_three_quarters_in_march_and_a_quarter_in_april():
    # By hand: Easter Sunday 2024 is 31 March, so Good Friday 29 March, Saturday 30 and
    # Sunday 31 March fall in March and Easter Monday 1 April in April: 3/4 and 1/4.
    assert _shares("easter", "2023-06", "2024-12", MONTH) == {"2024-03": 0.75, "2024-04": 0.25}
    # 2025: Easter Sunday 20 April, Good Friday 18 April to Easter Monday 21 April: all April.
    assert _shares("easter", "2025-01", "2025-12", MONTH) == {"2025-04": 1.0}
    # One day each: Good Friday 29 March, Easter Monday 1 April.
    assert _shares("good_friday", "2024-01", "2024-12", MONTH) == {"2024-03": 1.0}
    assert _shares("easter_monday", "2024-01", "2024-12", MONTH) == {"2024-04": 1.0}


def test_the_single_days_of_2024_fall_in_their_months():
    # By hand from Easter Sunday 31 March 2024: Shrove Tuesday 47 days before, 13 February;
    # Mothering Sunday 21 days before, 10 March; Ascension Day 39 days after, Thursday
    # 9 May; Whit Monday 50 days after, 20 May.
    assert _shares("shrove_tuesday", "2024-01", "2024-12", MONTH) == {"2024-02": 1.0}
    assert _shares("mothering_sunday", "2024-01", "2024-12", MONTH) == {"2024-03": 1.0}
    assert _shares("ascension", "2024-01", "2024-12", MONTH) == {"2024-05": 1.0}
    assert _shares("whit_monday", "2024-01", "2024-12", MONTH) == {"2024-05": 1.0}
    days = {name: holiday.days(2024).tolist() for name, holiday in HOLIDAYS.items()}
    assert days["shrove_tuesday"] == [date(2024, 2, 13)]
    assert days["mothering_sunday"] == [date(2024, 3, 10)]
    assert days["ascension"] == [date(2024, 5, 9)]
    assert days["whit_monday"] == [date(2024, 5, 20)]
    assert days["easter"] == [date(2024, 3, 29), date(2024, 3, 30), date(2024, 3, 31), date(2024, 4, 1)]


def test_easter_by_quarter():
    # By hand: 2024 as by month (three days in Q1, Easter Monday 1 April in Q2); 2018, Easter
    # Sunday 1 April: Good Friday 30 and Saturday 31 March in Q1, Sunday and Monday in Q2;
    # 2019, Easter Sunday 21 April: all four days in Q2.
    assert _shares("easter", "2018Q1", "2024Q4", QUARTER) == {
        "2018Q1": 0.5, "2018Q2": 0.5, "2019Q2": 1.0, "2020Q2": 1.0, "2021Q2": 1.0, "2022Q2": 1.0,
        "2023Q2": 1.0, "2024Q1": 0.75, "2024Q2": 0.25}


def test_easter_by_iso_week():
    # By hand: 1 January 2024 is a Monday, so ISO week 1 is 1 to 7 January and week 13 is
    # 84 days on, Monday 25 to Sunday 31 March: Good Friday, Saturday and Easter Sunday are
    # in week 13, Easter Monday 1 April opens week 14.
    assert _shares("easter", "2024-01-01", "2024-12-29", WEEK) == {"2024-W13": 0.75, "2024-W14": 0.25}
    # Ascension Day, Thursday 9 May 2024, is in week 19 (Monday 6 to Sunday 12 May).
    assert _shares("ascension", "2024-01-01", "2024-12-29", WEEK) == {"2024-W19": 1.0}


@pytest.mark.parametrize("cadence", [MONTH, QUARTER, WEEK], ids=lambda cadence: cadence.name)
@pytest.mark.parametrize("name", sorted(HOLIDAYS))
def test_each_years_shares_sum_to_one(name, cadence):
    # By construction of a share: a year's holiday days are spread over the periods holding them.
    ordinals = pd.period_range("2000-01-01", "2035-12-31", freq=cadence.freq).asi8
    shares = holiday_shares(name, ordinals, cadence)
    assert shares.sum() == pytest.approx(36)
    assert ((shares >= 0) & (shares <= 1)).all()
    if len(HOLIDAYS[name].offsets) == 1:
        assert set(shares.tolist()) == {0.0, 1.0}


def test_an_unknown_holiday_is_a_key_error():
    with pytest.raises(KeyError):
        holiday_shares("midsummer", [600], MONTH)


def test_events_counted_per_period():
    # By hand: 31 March and 1 April 2024 fall in March and in April; the date given twice
    # counts once; 31 December 2024 is outside January to May.
    dates = [date(2024, 3, 31), date(2024, 3, 31), date(2024, 4, 1), date(2024, 12, 31)]
    months = pd.period_range("2024-01", "2024-05", freq="M").asi8
    np.testing.assert_array_equal(dates_in_periods(dates, months, MONTH), [0, 0, 1, 1, 0])
    quarters = pd.period_range("2024Q1", "2024Q4", freq="Q-DEC").asi8
    np.testing.assert_array_equal(dates_in_periods(dates, quarters, QUARTER), [1, 1, 0, 1])
    # ISO week 1 of 2026 runs from Monday 29 December 2025 to Sunday 4 January 2026 (1 January
    # 2026 is a Thursday): both dates are in it, across the turn of the year.
    weeks = [WEEK.parse("2025-W52").ordinal, WEEK.parse("2026-W01").ordinal, WEEK.parse("2026-W02").ordinal]
    np.testing.assert_array_equal(dates_in_periods([date(2025, 12, 29), date(2026, 1, 4)], weeks, WEEK),
                                  [0, 2, 0])
    assert dates_in_periods([], months, MONTH).tolist() == [0.0] * 5
