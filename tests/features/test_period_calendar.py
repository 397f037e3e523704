"""Calendar terms counted in quarters and ISO weeks, checked by hand.

References: the calendar (counted by hand below: 2024 is a leap year beginning on a Monday)
and ``math`` for the Fourier terms.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from pipeline.core.columns import PERIOD
from pipeline.features.calendar import FourierTerms, TrendTerm, WorkingDays


def frame_of(freq: str, dates: list[str]) -> pd.DataFrame:
    return pd.DataFrame({PERIOD: pd.PeriodIndex([pd.Period(day, freq) for day in dates])})


def test_working_days_are_counted_per_quarter_and_per_week():
    # 2024Q1: January 23 weekdays, February (29 days from a Thursday) 21, March 21 = 65;
    # 2024Q2: April 22, May 23, June 20 = 65. Less a closure on Monday 1 April: 64.
    quarters = frame_of("Q-DEC", ["2024-02-10", "2024-05-01"])
    days = WorkingDays([pd.Timestamp("2024-04-01").date()]).fit(quarters)
    np.testing.assert_array_equal(days.transform(quarters)[:, 0], [65, 64])
    assert days.get_feature_names_out() == ["working days in the quarter"]
    # An ISO week has five weekdays; the week of Monday 1 April 2024 loses one to the closure.
    weeks = frame_of("W-SUN", ["2024-03-27", "2024-04-03"])
    days = WorkingDays([pd.Timestamp("2024-04-01").date()]).fit(weeks)
    np.testing.assert_array_equal(days.transform(weeks)[:, 0], [5, 4])
    assert days.get_feature_names_out() == ["working days in the week"]
    # Stored and read back, the term keeps its period.
    again = WorkingDays.from_dict(days.to_dict())
    np.testing.assert_array_equal(again.transform(weeks)[:, 0], [5, 4])
    assert again.get_feature_names_out() == ["working days in the week"]


def test_the_trend_counts_quarters_and_weeks():
    quarters = frame_of("Q-DEC", ["2023-11-30", "2024-01-01", "2025-12-31"])
    trend = TrendTerm().fit(quarters)
    np.testing.assert_array_equal(trend.transform(quarters)[:, 0], [0, 1, 8])
    assert trend.get_feature_names_out() == ["quarters since 2023Q4"]
    weeks = frame_of("W-SUN", ["2020-12-28", "2021-01-04", "2021-12-27"])   # 2020-W53, 2021-W01, 2021-W52
    trend = TrendTerm().fit(weeks)
    np.testing.assert_array_equal(trend.transform(weeks)[:, 0], [0, 1, 52])
    assert trend.get_feature_names_out() == ["weeks since 2020-W53"]


def test_quarterly_fourier_terms_by_hand():
    # 2π·k·quarter/4: at k = 2 the sine is 0 in every quarter and is left out.
    quarters = frame_of("Q-DEC", ["2024-01-15", "2024-04-15", "2024-07-15", "2024-10-15"])
    terms = FourierTerms(2).fit(quarters)
    assert terms.get_feature_names_out() == ["sin(2π·quarter/4)", "cos(2π·quarter/4)", "cos(2π·2·quarter/4)"]
    expected = [[math.sin(math.pi * q / 2), math.cos(math.pi * q / 2), math.cos(math.pi * q)] for q in (1, 2, 3, 4)]
    np.testing.assert_allclose(terms.transform(quarters), expected, rtol=0, atol=1e-15)
    again = FourierTerms.from_dict(terms.to_dict())
    np.testing.assert_array_equal(again.transform(quarters), terms.transform(quarters))
