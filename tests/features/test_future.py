"""Estimates of drivers nobody knows ahead (pipeline/features/future.py).

References: each rule is recomputed here with plain pandas (groupby means, the value
twelve months earlier looked up by date, the last value by sorting), independently of
castline's lookup tables. Data are simulated with fixed seeds (a seasonal driver plus
noise, three series); no figure here is a reference value of its own.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.errors import ModelFileError
from pipeline.features.future import FutureEstimates, calendar_month
from pipeline.features.plan import FeaturePlan
from pipeline.spec import LaggedColumn, NumericDriver


def _panel(months: int = 40, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frames = []
    for k, name in enumerate(["East", "North", "West"]):
        periods = pd.period_range("2019-01", periods=months, freq="M")
        season = 10 * np.sin(2 * np.pi * (periods.month.to_numpy() - 1) / 12)
        frames.append(pd.DataFrame({
            PERIOD: periods, SERIES: name, "rain": 50 + 20 * k + season + rng.normal(0, 3, months),
            "km": rng.uniform(100, 200, months), "y": rng.normal(100, 5, months)}))
    return pd.concat(frames, ignore_index=True)


def _cut(frame: pd.DataFrame, origin: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    at = pd.Period(origin, "M")
    return frame[frame[PERIOD] <= at].copy(), frame[frame[PERIOD] > at].copy()


def test_calendar_month_of_ordinals():
    # Reference: pandas' own Period.month.
    periods = pd.period_range("1968-11", periods=30, freq="M")
    assert (calendar_month(periods.asi8) == periods.month.to_numpy()).all()


@pytest.mark.parametrize("rule", ["month_mean", "last_year", "last_value", "mean"])
def test_each_rule_matches_a_plain_pandas_computation(rule):
    train, test = _cut(_panel(), "2021-06")
    test = test[test[PERIOD] <= pd.Period("2022-06", "M")]   # up to 12 months ahead
    estimated = FutureEstimates({"rain": rule}, SERIES).fit(train).apply(test)
    if rule == "month_mean":
        means = train.assign(m=train[PERIOD].dt.month).groupby([SERIES, "m"])["rain"].mean()
        expected = [means[(s, p.month)] for s, p in zip(test[SERIES], test[PERIOD])]
    elif rule == "last_year":
        values = train.set_index([SERIES, PERIOD])["rain"]
        expected = [values[(s, p - 12)] for s, p in zip(test[SERIES], test[PERIOD])]
    elif rule == "last_value":
        last = train.sort_values(PERIOD).groupby(SERIES)["rain"].last()
        expected = last.reindex(test[SERIES]).to_numpy()
    else:
        expected = train.groupby(SERIES)["rain"].mean().reindex(test[SERIES]).to_numpy()
    np.testing.assert_allclose(estimated["rain"].to_numpy(), expected, rtol=1e-12)
    # Only the estimated column changes; the other columns stay as they were.
    pd.testing.assert_frame_equal(estimated.drop(columns="rain"), test.drop(columns="rain"))


def test_rows_up_to_the_origin_keep_their_values():
    frame = _panel()
    train, _ = _cut(frame, "2020-12")
    estimated = FutureEstimates({"rain": "month_mean"}, SERIES).fit(train).apply(frame)
    kept = (frame[PERIOD] <= pd.Period("2020-12", "M")).to_numpy()
    np.testing.assert_array_equal(estimated["rain"].to_numpy()[kept], frame["rain"].to_numpy()[kept])
    assert not np.allclose(estimated["rain"].to_numpy()[~kept], frame["rain"].to_numpy()[~kept])


def test_last_year_further_than_a_year_reads_the_latest_same_month():
    # Reference: the value of the same calendar month in the window's last year, by date.
    train, test = _cut(_panel(), "2020-12")
    estimated = FutureEstimates({"rain": "last_year"}, SERIES).fit(train).apply(test)
    values = train.set_index([SERIES, PERIOD])["rain"]
    for s, p, v in zip(test[SERIES], test[PERIOD], estimated["rain"]):
        back = p - 12
        while back > pd.Period("2020-12", "M"):
            back -= 12
        assert v == pytest.approx(values[(s, back)], rel=1e-12)


def test_fallbacks_for_a_month_the_series_lacks_and_a_new_series():
    train, test = _cut(_panel(), "2020-12")
    # East has no March in its window; a series "South" appears only after the origin.
    train = train[~((train[SERIES] == "East") & (train[PERIOD].dt.month == 3))]
    new = test[test[SERIES] == "West"].assign(**{SERIES: "South"})
    test = pd.concat([test, new], ignore_index=True)
    fitted = FutureEstimates({"rain": "month_mean"}, SERIES).fit(train)
    estimated = fitted.apply(test)
    march = (test[SERIES] == "East") & (test[PERIOD].dt.month == 3)
    # Reference: the series' own average over the window (pandas mean).
    assert np.allclose(estimated.loc[march, "rain"], train.loc[train[SERIES] == "East", "rain"].mean())
    south = test[SERIES] == "South"
    by_month = train.assign(m=train[PERIOD].dt.month).groupby("m")["rain"].mean()
    np.testing.assert_allclose(estimated.loc[south, "rain"],
                               by_month.reindex(test.loc[south, PERIOD].dt.month).to_numpy())
    notes = fitted.notes(test)
    assert len(notes) == 1 and f"{int(march.sum() + south.sum())} of {len(test)}" in notes[0]


def test_given_values_in_the_months_to_forecast_are_said_to_be_ignored():
    train, test = _cut(_panel(), "2020-12")
    fitted = FutureEstimates({"rain": "mean", "km": "last_value"}, SERIES).fit(train)
    test.loc[test.index[:5], "km"] = np.nan
    notes = fitted.notes(test, given_ignored=True)
    assert any(f"the {len(test)} values given" in n and n.startswith("rain") for n in notes)
    assert any(f"the {len(test) - 5} values given" in n and n.startswith("km") for n in notes)
    # A file of months to forecast may leave the estimated column out altogether.
    without = fitted.apply(test.drop(columns="rain"))
    assert without["rain"].notna().all()


def test_an_unknown_rule_is_refused():
    with pytest.raises(ValueError, match="no such estimate rule"):
        FutureEstimates({"rain": "guess"}, SERIES)


def _plan() -> FeaturePlan:
    numeric = [NumericDriver(column="rain", future="month_mean"), NumericDriver(column="y2")]
    lags = [LaggedColumn(column="km", lags=[1], future="last_year")]
    return FeaturePlan(numeric, [], SERIES, lags=lags, target="y")


def test_the_plan_estimates_drivers_and_lagged_columns_and_stores_them():
    frame = _panel().assign(y2=lambda f: f["y"] * 0.5)
    train, test = _cut(frame, "2020-12")
    plan = _plan().fit(train)
    assert plan.estimated == {"rain": "month_mean", "km": "last_year"}
    assert plan.unknown_ahead == set()
    stored = FeaturePlan.from_dict(plan.to_dict())
    pd.testing.assert_frame_equal(stored.estimate_future(test), plan.estimate_future(test))
    np.testing.assert_array_equal(stored.transform(stored.estimate_future(test)).matrix,
                                  plan.transform(plan.estimate_future(test)).matrix)
    # A stored table that does not match the plan's settings is refused.
    damaged = plan.to_dict()
    damaged["state"]["future_"]["rules"] = {"__dict__": {"rain": "month_mean", "km": "mean"}}
    with pytest.raises(ModelFileError):
        FeaturePlan.from_dict(damaged)


def test_a_plan_of_format_version_1_reads_without_estimates():
    frame = _panel().assign(y2=lambda f: f["y"] * 0.5)
    train, _ = _cut(frame, "2020-12")
    plan = FeaturePlan([NumericDriver(column="y2")], [], SERIES, target="y").fit(train)
    stored = plan.to_dict()
    del stored["state"]["future_"]
    assert FeaturePlan.from_dict(stored, version=1).future_ is None


def _groupby_tables(rule: str, frame: pd.DataFrame, column: str) -> tuple:
    """The tables as a DataFrame and pandas' groupby make them (castline's former way)."""
    present = frame[frame[column].notna()]
    table = pd.DataFrame({"series": present[SERIES].to_numpy(), "month": present[PERIOD].array.asi8,
                          "moy": present[PERIOD].array.asi8 % 12 + 1,
                          "value": present[column].to_numpy(float)}).sort_values("month", kind="stable")
    latest = rule in ("last_year", "last_value")
    by_series = table.groupby("series")["value"]
    by_month = None
    if rule in ("month_mean", "last_year"):
        grouped = table.groupby(["series", "moy"])["value"]
        by_month = grouped.last() if rule == "last_year" else grouped.mean()
    return (by_month, by_series.last() if latest else by_series.mean(),
            table.groupby("moy")["value"].mean(), float(table["value"].mean()))


@pytest.mark.parametrize("rule", ["month_mean", "last_year", "last_value", "mean"])
@pytest.mark.parametrize("series", [3, 1])
def test_learned_tables_equal_pandas_groupby_to_the_bit(rule, series):
    # Reference: pandas' groupby over a DataFrame of the window (the model file stores these
    # tables, so they must not change by a bit); rows shuffled, some values missing.
    frame = _panel(months=30, seed=5)
    frame = frame[frame[SERIES].isin(["East", "North", "West"][:series])]
    frame = frame.sample(frac=1.0, random_state=4).reset_index(drop=True)
    frame.loc[frame.index % 7 == 3, "rain"] = np.nan
    frame["rain"] = frame["rain"] * 1e6 + 0.1   # large values: summation order shows
    estimates = FutureEstimates({"rain": rule}, SERIES).fit(frame)
    learned = estimates.tables_["rain"]
    expected = _groupby_tables(rule, frame, "rain")
    for found, wanted in zip(learned.tables(), expected[:3]):
        if wanted is None:
            assert found is None
            continue
        pd.testing.assert_series_equal(found, wanted.astype(float), check_exact=True,
                                       check_index_type=False)
    assert learned.overall == expected[3]
    stored = FutureEstimates.from_dict(estimates.to_dict())
    later = _panel(months=40, seed=5).iloc[-20:]
    assert np.array_equal(stored.apply(later)["rain"].to_numpy(), estimates.apply(later)["rain"].to_numpy())
