"""The baselines (pipeline/models/baselines.py), each against an independent computation.

References: pandas groupby for the mean and the last value per series, for the
calendar-month average (groupby series and month of the year) and for the trailing
12-month mean (groupby series, tail(12) of months in order); pandas shift(12)
within each series for the seasonal naive forecast; and, for drift, the
formula in Hyndman & Athanasopoulos, "Forecasting: Principles and Practice",
§5.2 (recalled from memory): ŷ(T+h) = y(T) + h · (y(T) − y(1)) / (T − 1).

The data are simulated (numpy.random.default_rng(11)): three series of 40
months each, a level per series, a trend and noise, with the rows shuffled so
that no baseline can rely on the rows being in time order.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from pipeline.core.design import Design
from pipeline.models.baselines import (
    CalendarMonthMean,
    Drift,
    LastValue,
    MeanBaseline,
    SeasonalNaive,
    TrailingMean,
)

START = pd.Period("2018-01", freq="M").ordinal   # months since 1970-01, as Design.period holds them
MONTHS, TRAIN = 40, 30


@pytest.fixture(scope="module")
def panel() -> pd.DataFrame:
    rng = np.random.default_rng(11)
    rows = [(s, START + t, level + 0.8 * t + rng.normal(0, 3))
            for s, level in (("A", 50.0), ("B", 120.0), ("C", 10.0)) for t in range(MONTHS)]
    frame = pd.DataFrame(rows, columns=["series", "period", "y"])
    return frame.sample(frac=1.0, random_state=5).reset_index(drop=True)


def design_of(frame: pd.DataFrame) -> Design:
    return Design(np.empty((len(frame), 0)), [], frame["series"].to_numpy(object),
                  frame["period"].to_numpy(np.int64))


def split(panel):
    train = panel[panel["period"] < START + TRAIN]
    test = panel[panel["period"] >= START + TRAIN]
    return train, test


def test_mean_per_series_equals_pandas_groupby_mean(panel):
    train, test = split(panel)
    model = MeanBaseline().fit(design_of(train), train["y"])
    expected = test["series"].map(train.groupby("series")["y"].mean())
    np.testing.assert_allclose(model.predict(design_of(test)), expected, rtol=1e-13)


def test_mean_of_a_series_not_in_training_is_the_overall_mean(panel):
    train, _ = split(panel)
    model = MeanBaseline().fit(design_of(train), train["y"])
    unseen = pd.DataFrame({"series": ["Z"], "period": [START + TRAIN]})
    np.testing.assert_allclose(model.predict(design_of(unseen)), [train["y"].mean()], rtol=1e-13)


def test_last_value_is_the_latest_month_of_each_series(panel):
    train, test = split(panel)
    model = LastValue().fit(design_of(train), train["y"])
    latest = train.sort_values("period").groupby("series")["y"].last()
    np.testing.assert_array_equal(model.predict(design_of(test)), test["series"].map(latest))
    # and that value is the one at the training window's last month
    assert latest["B"] == train.loc[(train["series"] == "B") & (train["period"] == START + TRAIN - 1), "y"].item()


def test_seasonal_naive_is_the_value_twelve_months_earlier(panel):
    train, test = split(panel)
    model = SeasonalNaive().fit(design_of(train), train["y"])
    # the test months are 1..10 months past the training window, so 12 months earlier is in it
    ordered = panel.sort_values(["series", "period"])
    earlier = ordered.groupby("series")["y"].shift(12)
    expected = earlier.loc[test.index]
    assert expected.notna().all()
    np.testing.assert_array_equal(model.predict(design_of(test)), expected.to_numpy())


def test_seasonal_naive_falls_back_to_the_series_mean_for_a_month_it_has_not_seen(panel):
    train = panel[(panel["period"] >= START) & (panel["period"] < START + 6)]   # January to June only
    model = SeasonalNaive().fit(design_of(train), train["y"])
    september = pd.DataFrame({"series": ["A"], "period": [START + 8]})
    mean_a = train.loc[train["series"] == "A", "y"].mean()
    np.testing.assert_allclose(model.predict(design_of(september)), [mean_a], rtol=1e-13)


def test_calendar_month_mean_equals_pandas_groupby_by_series_and_month(panel):
    """Reference: pandas groupby over (series, month of the year) of the training rows; the
    30 training months hold each month of the year two or three times."""
    train, test = split(panel)
    model = CalendarMonthMean().fit(design_of(train), train["y"])
    month = pd.PeriodIndex.from_ordinals(train["period"], freq="M").month
    means = train.groupby([train["series"], month])["y"].mean()
    test_month = pd.PeriodIndex.from_ordinals(test["period"], freq="M").month
    expected = means.reindex(pd.MultiIndex.from_arrays([test["series"], test_month])).to_numpy()
    assert not np.isnan(expected).any()
    np.testing.assert_allclose(model.predict(design_of(test)), expected, rtol=1e-13)


def test_calendar_month_mean_falls_back_to_the_series_mean_then_the_overall_mean(panel):
    """Reference: pandas means of the training rows (a series' own, then all of them)."""
    train = panel[(panel["period"] >= START) & (panel["period"] < START + 6)]   # January to June only
    model = CalendarMonthMean().fit(design_of(train), train["y"])
    rows = pd.DataFrame({"series": ["A", "Z"], "period": [START + 8, START + 1]})   # A in September; Z unseen
    expected = [train.loc[train["series"] == "A", "y"].mean(), train["y"].mean()]
    np.testing.assert_allclose(model.predict(design_of(rows)), expected, rtol=1e-13)


def ragged(panel) -> pd.DataFrame:
    """The training window with series C ending five months early and a series D of only five
    months, so the series' last months differ and one series is shorter than a year."""
    train, _ = split(panel)
    train = train[(train["series"] != "C") | (train["period"] < START + TRAIN - 5)]
    short = pd.DataFrame({"series": "D", "period": START + np.arange(TRAIN - 5, TRAIN),
                          "y": [3.0, 5.0, 4.0, 8.0, 6.0]})
    return pd.concat([train, short], ignore_index=True).sample(frac=1.0, random_state=2)


def test_trailing_mean_is_each_series_mean_over_its_own_last_twelve_months(panel):
    """Reference: pandas, each series' rows sorted by month and its last 12 rows (tail(12)),
    then groupby mean; every series' months are consecutive, so 12 rows are 12 months."""
    train = ragged(panel)
    model = TrailingMean().fit(design_of(train), train["y"])
    trailing = train.sort_values("period").groupby("series").tail(12)
    expected = trailing.groupby("series")["y"].mean()
    assert expected["D"] == pytest.approx(np.mean([3.0, 5.0, 4.0, 8.0, 6.0]))   # by hand: a short series
    rows = pd.DataFrame({"series": ["A", "B", "C", "D"], "period": START + TRAIN})
    np.testing.assert_allclose(model.predict(design_of(rows)), expected[rows["series"]].to_numpy(),
                               rtol=1e-13)


def test_trailing_mean_of_a_series_not_in_training_is_the_mean_of_all_trailing_months(panel):
    """Reference: pandas, the mean of every series' last 12 rows taken together."""
    train = ragged(panel)
    model = TrailingMean().fit(design_of(train), train["y"])
    trailing = train.sort_values("period").groupby("series").tail(12)
    unseen = pd.DataFrame({"series": ["Z"], "period": [START + TRAIN]})
    np.testing.assert_allclose(model.predict(design_of(unseen)), [trailing["y"].mean()], rtol=1e-13)


def test_drift_is_last_plus_slope_times_months_ahead(panel):
    train, test = split(panel)
    model = Drift().fit(design_of(train), train["y"])
    predicted = model.predict(design_of(test))
    for series in ("A", "B", "C"):
        y = train[train["series"] == series].sort_values("period")["y"].to_numpy()
        n = len(y)
        slope = (y[-1] - y[0]) / (n - 1)          # Hyndman & Athanasopoulos §5.2 (from memory)
        rows = (test["series"] == series).to_numpy()
        h = test.loc[rows, "period"].to_numpy() - (START + TRAIN - 1)
        np.testing.assert_allclose(predicted[rows], y[-1] + slope * h, rtol=1e-12)


def test_drift_of_a_single_month_series_is_flat():
    design = Design(np.empty((1, 0)), [], np.array(["A"], dtype=object), np.array([START]))
    model = Drift().fit(design, [7.0])
    ahead = Design(np.empty((2, 0)), [], np.array(["A", "A"], dtype=object), np.array([START + 1, START + 5]))
    np.testing.assert_array_equal(model.predict(ahead), [7.0, 7.0])


@pytest.mark.parametrize("cls", [MeanBaseline, CalendarMonthMean, TrailingMean, LastValue, SeasonalNaive, Drift])
def test_a_stored_baseline_predicts_the_same(cls, panel):
    train, test = split(panel)
    model = cls().fit(design_of(train), train["y"])
    again = cls.from_dict(json.loads(json.dumps(model.to_dict(), allow_nan=False)))
    np.testing.assert_array_equal(again.predict(design_of(test)), model.predict(design_of(test)))


@pytest.mark.parametrize("series", [["A", "B", "C"], ["B"]])
def test_trailing_mean_and_last_value_equal_pandas_groupby_to_the_bit(panel, series):
    """Reference: pandas' groupby over a DataFrame of the rows (castline's former way), to the
    bit: the last value per series in month order, and the mean of each series' rows within
    12 months of its own last one (one series: rows in group order, which pandas may sum
    another way)."""
    train = panel[panel["series"].isin(series)].copy()
    train["y"] = train["y"] * 1e7 + 1 / 3   # large values: the order of summation shows
    frame = pd.DataFrame({"series": train["series"].to_numpy(object), "y": train["y"].to_numpy(float),
                          "period": train["period"].to_numpy(np.int64)})
    last = frame.groupby("series")["period"].transform("max")
    recent = frame[frame["period"] > last - 12]
    trailing = TrailingMean().fit(design_of(train), train["y"])
    assert trailing.values_ == recent.groupby("series")["y"].mean().to_dict()
    assert list(trailing.values_) == sorted(series)
    assert trailing.fallback_ == float(recent["y"].mean())
    ordered = frame.sort_values("period", kind="stable")
    latest = LastValue().fit(design_of(train), train["y"])
    assert latest.values_ == ordered.groupby("series")["y"].last().to_dict()
    assert latest.fallback_ == float(ordered["y"].iloc[-1])
