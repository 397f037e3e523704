"""Calendar terms (pipeline.features.calendar): working days against numpy.busday_count,
Fourier terms, month dummies, the trend and quarters.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), or a hand example worked in the comment. The
data are simulated here (tests/features/test_plan.py's make_panel); they are not
reference values themselves.
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
from test_plan import fitted_plan, make_panel

from pipeline.core.columns import PERIOD
from pipeline.core.errors import DataError
from pipeline.features.calendar import FourierTerms, working_days_in_month

# ------------------------------------------------------------------ calendar

def test_working_days_equal_numpy_busday_count_for_every_month_2000_to_2030():
    # Reference library: numpy.busday_count (Monday to Friday, less the holidays given).
    months = pd.period_range("2000-01", "2030-12", freq="M")
    starts = months.start_time.values.astype("datetime64[D]")
    ends = (months + 1).start_time.values.astype("datetime64[D]")
    np.testing.assert_array_equal(working_days_in_month(months.asi8), np.busday_count(starts, ends))
    closures = [date(2000, 1, 3), date(2012, 2, 29), date(2024, 12, 25), date(2024, 12, 25),
                date(2024, 12, 28), date(2030, 12, 31)]       # a repeat and a Saturday among them
    np.testing.assert_array_equal(working_days_in_month(months.asi8, closures),
                                  np.busday_count(starts, ends, holidays=closures))


def test_working_days_through_the_spec_with_closures():
    frame = make_panel(months=24)
    plan = fitted_plan({"calendar": {"working_days": True,
                                     "closures": ["2021-12-24", "2021-12-27", "2021-12-31"]}}, frame)
    table = plan.feature_table(frame)
    december = frame[PERIOD] == pd.Period("2021-12", "M")
    # Reference library: numpy.busday_count for December 2021 with the same closures.
    expected = np.busday_count("2021-12-01", "2022-01-01",
                               holidays=["2021-12-24", "2021-12-27", "2021-12-31"])
    assert (table.loc[december, "working days in the month"] == expected).all()


@pytest.mark.parametrize("harmonics", [1, 3, 6])
def test_fourier_terms_equal_sine_and_cosine_of_the_month(harmonics):
    frame = make_panel(months=24, regions=("East",))
    terms = FourierTerms(harmonics).fit(frame)
    month = frame[PERIOD].dt.month.to_numpy(float)
    # Reference: sin(2πk·month/12) and cos(2πk·month/12) computed directly with numpy.
    expected = []
    for k in range(1, harmonics + 1):
        if k < 6:                        # sin(2π·6·month/12) = sin(π·month) = 0 in every month
            expected.append(np.sin(2 * np.pi * k * month / 12))
        expected.append(np.cos(2 * np.pi * k * month / 12))
    np.testing.assert_allclose(terms.transform(frame), np.column_stack(expected), atol=1e-15)
    assert terms.get_feature_names_out()[:2] == ["sin(2π·month/12)", "cos(2π·month/12)"]
    assert len(terms.get_feature_names_out()) == 2 * harmonics - (harmonics == 6)


def test_month_dummies_trend_and_quarters():
    frame = make_panel(months=14, regions=("East",), start="2020-03")
    plan = fitted_plan({"calendar": {"trend": True, "month_of_year": "dummies"}}, frame)
    table = plan.feature_table(frame)
    assert table.columns[0] == "months since 2020-03"
    assert table.iloc[:, 0].tolist() == list(range(14))
    assert table.columns[1:].tolist() == [f"month: {m}" for m in (
        "February", "March", "April", "May", "June", "July", "August", "September", "October",
        "November", "December")]                           # January is the reference
    march = frame[PERIOD].dt.month.to_numpy() == 3
    assert (table.loc[march, "month: March"] == 1).all() and table["month: March"].sum() == 2
    quarters = fitted_plan({"calendar": {"quarter": True}}, frame).feature_table(frame)
    assert quarters.columns.tolist() == ["quarter: Q2", "quarter: Q3", "quarter: Q4"]


def test_a_month_the_training_window_lacks_has_no_dummy_and_stops():
    frame = make_panel(months=14, regions=("East",))
    plan = fitted_plan({"calendar": {"month_of_year": "dummies"}}, frame.iloc[:6])
    with pytest.raises(DataError, match="month July does not occur in the training window"):
        plan.transform(frame.iloc[6:8])
