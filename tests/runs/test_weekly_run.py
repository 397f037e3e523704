"""A weekly forecast over years with 53 ISO weeks, whole runs checked by hand and by pandas.

The data is generated (design stated in ``weekly_frame``): one value per ISO week from
2014-W02 to 2022-W52, so the history holds 2015-W53 and 2020-W53 (2015 began on a Thursday
and 2020, a leap year, on a Wednesday: both have 53 ISO weeks). Weeks are given by a
Wednesday, any day within the week. References: Python's ``datetime.date.isocalendar``
(ISO 8601) for the weeks, a pandas date shift for the same week last year, and ``math``
for the Fourier terms.
"""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from conftest import run_spec

from pipeline.core.cadence import WEEK
from pipeline.core.columns import PERIOD
from pipeline.features.calendar import FourierTerms, QuarterDummies, WeekDummies

HORIZON, ORIGINS = 13, 10


def weekly_frame() -> pd.DataFrame:
    """A weekly series: 500 + 0.2·week + 40·sin(2π·day/365.25) + 15·cos(4π·day/365.25) +
    N(0, 5²) noise (seed 3), day = the week's Wednesday in days since 1970-01-01."""
    wednesdays = pd.date_range("2014-01-08", "2022-12-28", freq="7D")
    day = (wednesdays - pd.Timestamp("1970-01-01")).days.to_numpy(float)
    rng = np.random.default_rng(3)
    y = (500 + 0.2 * np.arange(len(day)) + 40 * np.sin(2 * np.pi * day / 365.25)
         + 15 * np.cos(4 * np.pi * day / 365.25) + rng.normal(0, 5, len(day)))
    return pd.DataFrame({"week_of": wednesdays.strftime("%Y-%m-%d"), "orders": np.round(y, 3)})


@pytest.fixture(scope="module")
def weekly_run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("weekly")
    weekly_frame().to_csv(folder / "orders.csv", index=False)
    spec = {"name": "orders-by-week",
            "input": {"file": "orders.csv", "date_column": "week_of", "period": "week"},
            "target": "orders",
            "drivers": {"calendar": {"trend": True, "season": "fourier", "harmonics": 2}},
            "models": ["ols"],
            "validation": {"method": "rolling_origin", "horizon": HORIZON, "origins": ORIGINS},
            "forecast": {"periods": HORIZON},
            "output": {"folder": "out"}}
    return run_spec(folder, spec)


def iso_label(day: pd.Timestamp) -> str:
    year, week, _ = day.date().isocalendar()   # Python's ISO 8601 calendar
    return f"{year}-W{week:02d}"


def test_the_weeks_are_iso_weeks_with_both_53rd_weeks(weekly_run):
    frame = weekly_frame()
    expected = [iso_label(pd.Timestamp(day)) for day in frame["week_of"]]
    assert "2015-W53" in expected and "2020-W53" in expected
    predictions = pd.read_csv(weekly_run / "predictions.csv", dtype={"origin": str, "period": str})
    assert set(predictions["period"]) <= set(expected)
    forecast = pd.read_csv(weekly_run / "forecast.csv", dtype={"period": str})
    last = pd.Timestamp(frame["week_of"].iloc[-1])
    ahead = [iso_label(last + pd.Timedelta(weeks=k)) for k in range(1, HORIZON + 1)]
    assert forecast.loc[forecast["model"] == "ols", "period"].tolist() == ahead
    assert ahead[0] == "2023-W01"


def test_same_week_last_year_is_the_value_364_days_earlier(weekly_run):
    # The reference: the series shifted forward by 364 days with pandas, read at each
    # predicted week (every horizon here is under 52 weeks, so a year back is in training).
    frame = weekly_frame()
    dates = pd.to_datetime(frame["week_of"])
    shifted = pd.Series(frame["orders"].to_numpy(float), index=dates + pd.Timedelta(days=364))
    labels = {iso_label(day): day for day in dates}
    predictions = pd.read_csv(weekly_run / "predictions.csv", dtype={"origin": str, "period": str})
    naive = predictions[predictions["model"] == "seasonal_naive"]
    assert len(naive) == HORIZON * ORIGINS
    expected = shifted.reindex([labels[p] for p in naive["period"]]).to_numpy()
    assert not np.isnan(expected).any()
    np.testing.assert_array_equal(naive["prediction"].to_numpy(float), expected)


def test_the_fourier_terms_are_the_hand_computation():
    # ISO week 2020-W53 runs from Monday 28 December 2020; its Thursday, 31 December 2020,
    # is day 18627 after 1970-01-01. The terms are sin/cos(2π·k·day/7 / (365.25/7)).
    frame = pd.DataFrame({PERIOD: pd.PeriodIndex([pd.Period("2020-12-30", "W-SUN"),
                                                  pd.Period("2021-01-06", "W-SUN")])})
    terms = FourierTerms(3).fit(frame)
    assert terms.get_feature_names_out() == ["sin(2π·week/52.18)", "cos(2π·week/52.18)",
                                             "sin(2π·2·week/52.18)", "cos(2π·2·week/52.18)",
                                             "sin(2π·3·week/52.18)", "cos(2π·3·week/52.18)"]
    assert (dt.date(2020, 12, 31) - dt.date(1970, 1, 1)).days == 18627
    expected = [[f(2 * math.pi * k * day / 365.25) for k in (1, 2, 3) for f in (math.sin, math.cos)]
                for day in (18627, 18634)]
    np.testing.assert_allclose(terms.transform(frame), expected, rtol=0, atol=1e-12)


def test_a_week_is_in_the_quarter_that_holds_its_thursday():
    # Monday 27 March to Sunday 2 April 2023: four days in March, so the first quarter.
    frame = pd.DataFrame({PERIOD: pd.PeriodIndex([pd.Period(day, "W-SUN") for day in
                                                  ("2023-03-28", "2023-04-04", "2024-12-31")])})
    np.testing.assert_array_equal(QuarterDummies()._level(frame), [1, 2, 1])


def test_week_53_shares_week_52s_dummy():
    periods = pd.PeriodIndex([pd.Period(day, "W-SUN") for day in
                              ("2020-01-01", "2020-12-23", "2020-12-30", "2021-01-06")])
    frame = pd.DataFrame({PERIOD: periods})
    assert WEEK.labels(periods.asi8) == ["2020-W01", "2020-W52", "2020-W53", "2021-W01"]
    dummies = WeekDummies().fit(frame)
    assert dummies.get_feature_names_out() == ["week: 52"]
    np.testing.assert_array_equal(dummies.transform(frame)[:, 0], [0, 1, 1, 0])


def test_the_final_fit_is_statsmodels_on_the_hand_made_design(weekly_run):
    frame = weekly_frame()
    thursday = (pd.to_datetime(frame["week_of"]) + pd.Timedelta(days=1) - pd.Timestamp("1970-01-01")).dt.days
    angle = 2 * np.pi * thursday.to_numpy(float) / 365.25
    design = np.column_stack([np.ones(len(frame)), np.arange(len(frame), dtype=float),
                              np.sin(angle), np.cos(angle), np.sin(2 * angle), np.cos(2 * angle)])
    reference = sm.OLS(frame["orders"].to_numpy(float), design).fit()
    terms = pd.read_csv(weekly_run / "coefficients.csv")
    ols = terms[terms["model"] == "ols"]
    assert ols["term"].tolist() == ["intercept", "weeks since 2014-W02", "sin(2π·week/52.18)",
                                    "cos(2π·week/52.18)", "sin(2π·2·week/52.18)", "cos(2π·2·week/52.18)"]
    np.testing.assert_allclose(ols["estimate"].to_numpy(float), reference.params, rtol=1e-9)
    # The generating amplitudes come back within a few standard errors (40 and 15).
    assert abs(reference.params[2] - 40) < 4 * reference.bse[2]
    assert abs(reference.params[5] - 15) < 4 * reference.bse[5]


# ------------------------------------------------------------------ real data: statsmodels co2

def test_weekly_co2_with_its_gaps_filled_equals_statsmodels_on_pandas_interpolation(tmp_path):
    # statsmodels.datasets.co2 (Scripps/NOAA): weekly CO2 at Mauna Loa, 1958-03-29 to
    # 2001-12-29, each week given by its Saturday, with 59 weeks missing; 1959, 1964, 1970,
    # 1976, 1981, 1987, 1992 and 1998 have 53 ISO weeks. The reference fills the missing
    # weeks with pandas' linear interpolation and fits statsmodels OLS on a design built here.
    weekly = sm.datasets.co2.load_pandas().data
    frame = pd.DataFrame({"saturday": weekly.index.strftime("%Y-%m-%d"), "co2": weekly["co2"].to_numpy()})
    frame.to_csv(tmp_path / "co2.csv", index=False)
    spec = {"name": "co2-by-week",
            "input": {"file": "co2.csv", "date_column": "saturday", "period": "week", "gaps": "fill"},
            "target": "co2",
            "drivers": {"calendar": {"trend": True, "season": "fourier", "harmonics": 3}},
            "models": ["ols"],
            "validation": {"method": "rolling_origin", "horizon": 13, "origins": 12, "step": 4},
            "output": {"folder": "out"}}
    run = run_spec(tmp_path, spec)

    filled = weekly["co2"].interpolate(method="linear", limit_area="inside").to_numpy(float)
    thursday = (weekly.index - pd.Timedelta(days=2) - pd.Timestamp("1970-01-01")).days.to_numpy(float)
    angle = 2 * np.pi * thursday / 365.25
    design = np.column_stack([np.ones(len(filled)), np.arange(len(filled), dtype=float),
                              *[f(k * angle) for k in (1, 2, 3) for f in (np.sin, np.cos)]])
    reference = sm.OLS(filled, design).fit()
    terms = pd.read_csv(run / "coefficients.csv")
    ols = terms[terms["model"] == "ols"]
    assert ols["term"].iloc[1] == "weeks since 1958-W13"
    np.testing.assert_allclose(ols["estimate"].to_numpy(float), reference.params, rtol=1e-9)
    np.testing.assert_allclose(ols["std_error"].to_numpy(float), reference.bse, rtol=1e-8)
