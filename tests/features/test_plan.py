"""The feature plan (pipeline.features.plan): everything learned from the training window
only, nothing after the origin read, every term named; and the helpers the tests of
tests/features/ share (make_panel, make_spec, fitted_plan). The tests of each kind of
term are in the test file named for its module.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), or a hand example worked in the comment. The
data are simulated here (tests/features/test_plan.py's make_panel); they are not
reference values themselves.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import DEMO_DATA, DEMO_SPEC
from hypothesis import given, settings
from hypothesis import strategies as st

from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.features.plan import plan_features
from pipeline.models import make_model
from pipeline.spec import Spec
from pipeline.stages.backtest import run_backtest
from pipeline.stages.check import CheckedData

REGIONS = ("East", "North", "West")


def make_panel(months: int = 30, regions=REGIONS, seed: int = 0, start: str = "2020-01") -> pd.DataFrame:
    """Return rows shaped as the check stage hands them on: one per region and month."""
    rng = np.random.default_rng(seed)
    rows = []
    for number, region in enumerate(regions):
        for index, period in enumerate(pd.period_range(start, periods=months, freq="M")):
            price = 5 + rng.normal(0, 0.5)
            temp = max(0.5, 10 + 6 * np.sin(2 * np.pi * period.month / 12) + rng.normal(0, 1))
            rows.append({
                "month": period.to_timestamp(), "region": region,
                "store": rng.choice(["a", "b", "c", "d"], p=[0.4, 0.3, 0.2, 0.1]),
                "price": price, "temp": temp,
                "sales": float(np.exp(4 + 0.1 * number + 0.01 * index - 0.1 * price
                                      + 0.02 * temp + rng.normal(0, 0.1))),
            })
    frame = pd.DataFrame(rows)
    frame[PERIOD] = frame["month"].dt.to_period("M")
    frame[SERIES] = frame["region"]
    frame[ROW] = np.arange(len(frame)) + 2
    return frame


def make_spec(drivers: dict | None = None, **top) -> Spec:
    """Return a spec built in memory (no file: cross-key rules are tested in tests/spec/)."""
    drivers = dict(drivers or {})
    # These tests are about the drivers' own terms: no series levels unless a test asks.
    drivers.setdefault("series_effects", {"intercepts": False})
    data = {"name": "features-test", "target": "sales",
            "input": {"file": "data.csv", "date_column": "month", "series": ["region"]},
            "drivers": drivers, "validation": {"method": "holdout", "last_periods": 6},
            "output": {"folder": "out"}, **top}
    return Spec.model_validate(data)


def fitted_plan(drivers: dict, frame: pd.DataFrame, **top):
    return plan_features(make_spec(drivers, **top), SERIES).fit(frame)


# ------------------------------------------------------------------ leakage

LEAKAGE_DRIVERS = {
    "numeric": [{"column": "price", "clip_quantiles": [0.05, 0.95], "standardise": True, "degree": 2},
                {"column": "temp", "missing": "median", "transform": "log1p"}],
    "categorical": [{"column": "store", "encoding": "target_mean", "smoothing": 3, "group_below": 4,
                     "unseen": "use_reference"},
                    {"column": "region", "unseen": "use_reference"}],
    "interactions": [["price", "region"]],
    "calendar": {"trend": True, "month_of_year": "fourier", "harmonics": 2, "working_days": True},
    "lags": [{"column": "sales", "lags": [6, 7], "rolling_means": [3], "differences": [1],
              "start_lag": 6},
             {"column": "price", "lags": [1, 2], "rolling_means": [2]}],
}
LEAKAGE_SPEC = make_spec(LEAKAGE_DRIVERS, target_transform="log")
LEAKAGE_PANEL = make_panel(months=30, seed=11)
LEAKAGE_PANEL.loc[LEAKAGE_PANEL.index[::7], "temp"] = np.nan   # some months lack a temperature
HORIZON = 6


def _outputs_at(frame: pd.DataFrame, origin: pd.Period):
    """Return what the origin's backtest is made of: training design, coefficients,
    the predicted rows' features and the predictions."""
    train = frame[frame[PERIOD] <= origin]
    test = frame[(frame[PERIOD] > origin) & (frame[PERIOD] <= origin + HORIZON)]
    plan = plan_features(LEAKAGE_SPEC, SERIES).fit(train)
    design, y = plan.training_design(train)
    model = make_model("ols", target=plan.target_scale).fit(design, y)
    table = plan.feature_table(test)
    return design.matrix, model.model.coef_, table, model.predict(plan.transform(test)), test


@settings(max_examples=40, deadline=None, database=None)
@given(origin_month=st.integers(min_value=14, max_value=22), after=st.integers(min_value=1, max_value=8),
       regions=st.sets(st.sampled_from(REGIONS), min_size=1),
       column=st.sampled_from(["sales", "price", "temp", "store"]),
       scale=st.floats(min_value=0.05, max_value=40.0), level=st.sampled_from(["a", "d", "new"]))
def test_changing_any_value_after_the_origin_changes_nothing_known_at_the_origin(
        origin_month, after, regions, column, scale, level):
    periods = pd.period_range("2020-01", periods=30, freq="M")
    origin = periods[origin_month]
    changed_from = origin + after
    before = _outputs_at(LEAKAGE_PANEL, origin)
    frame = LEAKAGE_PANEL.copy()
    # Every value of the column from that month on, in the chosen series, is changed.
    where = (frame[PERIOD] >= changed_from) & frame["region"].isin(regions)
    frame.loc[where, column] = level if column == "store" else frame.loc[where, column] * scale
    now = _outputs_at(frame, origin)

    np.testing.assert_array_equal(now[0], before[0])       # training design
    np.testing.assert_array_equal(now[1], before[1])       # coefficients
    test = before[4]
    # Changed targets after the origin change no prediction; changed drivers, only
    # the rows of their own months (whose inputs they are).
    unaffected = (np.ones(len(test), bool) if column == "sales"
                  else (test[PERIOD] < changed_from).to_numpy())
    np.testing.assert_array_equal(now[2].to_numpy()[unaffected], before[2].to_numpy()[unaffected])
    np.testing.assert_array_equal(now[3][unaffected], before[3][unaffected])


def test_backtest_predictions_do_not_move_when_the_held_out_actuals_change():
    spec = make_spec(LEAKAGE_DRIVERS, target_transform="log", models=["ols"])
    history = LEAKAGE_PANEL.copy()
    before = run_backtest(spec, CheckedData(history=history, future=history.iloc[:0], raw=None))
    held_out = history[PERIOD] > history[PERIOD].max() - HORIZON
    history.loc[held_out, "sales"] *= np.random.default_rng(5).uniform(0.2, 5.0, held_out.sum())
    after = run_backtest(spec, CheckedData(history=history, future=history.iloc[:0], raw=None))
    np.testing.assert_array_equal(after.predictions["prediction"], before.predictions["prediction"])
    assert not np.array_equal(after.predictions["actual"], before.predictions["actual"])


def test_everything_learned_comes_from_the_training_window():
    frame = make_panel(months=30)
    window = frame[frame[PERIOD] <= pd.Period("2021-06", "M")]
    drivers = {"numeric": [{"column": "price", "missing": "mean", "clip_quantiles": [0.1, 0.9],
                            "standardise": True}],
               "categorical": [{"column": "store", "encoding": "target_mean"}],
               "calendar": {"trend": True}}
    plan = fitted_plan(drivers, window)
    price, store, trend = plan.parts_
    # Reference library: numpy's mean, quantile and standard deviation of the window only.
    assert price.fill_value_ == pytest.approx(window["price"].mean())
    assert price.clip_bounds_ == pytest.approx(tuple(np.quantile(window["price"], [0.1, 0.9])))
    clipped = np.clip(window["price"], *price.clip_bounds_)
    assert price.centre_ == pytest.approx(clipped.mean())
    assert price.scale_ == pytest.approx(clipped.std(ddof=0))
    assert store.overall_mean_ == pytest.approx(window["sales"].mean())
    assert str(trend.first_month_) == "2020-01"
    # Applied to later rows alone, each step uses what the window taught it, not the rows.
    later = frame[frame[PERIOD] == pd.Period("2022-03", "M")]
    table = plan.feature_table(later)
    assert (table["months since 2020-01"] == 26).all()
    expected_price = (np.clip(later["price"], *price.clip_bounds_) - price.centre_) / price.scale_
    np.testing.assert_allclose(table["standardised price"], expected_price)


# ------------------------------------------------------------------ names

def test_every_feature_has_a_name_read_without_a_legend():
    frame = make_panel(months=30)
    drivers = {"numeric": [{"column": "price", "degree": 2}, {"column": "temp", "transform": "log"}],
               "categorical": [{"column": "region", "reference": "North"}],
               "interactions": [["price", "region"]],
               "calendar": {"trend": True, "month_of_year": "fourier", "harmonics": 1,
                            "working_days": True},
               "lags": [{"column": "sales", "lags": [12], "rolling_means": [3]}]}
    assert fitted_plan(drivers, frame).get_feature_names_out() == [
        "price", "price^2", "log(temp)", "region: East", "region: West",
        "price × region: East", "price × region: West",
        "months since 2020-01", "sin(2π·month/12)", "cos(2π·month/12)", "working days in the month",
        "sales, 12 months earlier", "sales, mean of the 3 months before"]


def test_a_term_too_large_to_fit_stops_with_its_name_and_row(tmp_path):
    """A driver of 1e60 raised to a power overflows the fit (1e150 bound: a square of a larger
    term, summed over rows, exceeds the largest float, about 1.8e308 — IEEE 754 double)."""
    import pipeline
    from pipeline.core.errors import DataError

    data = pd.read_csv(DEMO_DATA)
    data.loc[5, "rainfall_mm"] = 1e60
    data.to_csv(tmp_path / "big.csv", index=False)
    spec = DEMO_SPEC.read_text(encoding="utf-8")
    spec = spec.replace("../data_samples/compost_sales.csv", "big.csv").replace(
        "    - column: rainfall_mm\n", "    - column: rainfall_mm\n      degree: 6\n")
    (tmp_path / "spec.yaml").write_text(spec, encoding="utf-8")
    with pytest.raises(DataError) as stopped:
        pipeline.run(tmp_path / "spec.yaml", output_folder=tmp_path / "out")
    message = str(stopped.value)
    assert "big.csv:7:" in message and "'rainfall_mm^3'" in message and "too large to fit" in message


# ------------------------------------------------------------------ groups of terms

def test_the_design_names_each_columns_group_of_terms():
    # The generalised VIF (models/inference.py) takes a driver's columns as one group.
    drivers = {**LEAKAGE_DRIVERS, "series_effects": {"intercepts": True, "slopes": ["price"]}}
    plan = plan_features(make_spec(drivers), SERIES).fit(make_panel(months=30, seed=11))
    design, _ = plan.training_design(make_panel(months=30, seed=11))
    groups = dict(zip(design.names, design.term_groups, strict=True))
    assert len(design.term_groups) == len(design.names)
    assert groups["standardised price"] == groups["(standardised price)^2"] == "price"
    assert groups["region: North"] == groups["region: West"] == "region"
    fourier = [name for name in design.names if name.startswith(("sin(", "cos("))]
    assert len(fourier) == 4 and {groups[name] for name in fourier} == {"month of year (sine and cosine)"}
    assert {groups[name] for name in design.names if " × region: " in name} == {"price × region"}
    assert groups["standardised price × series: West"] == "price × series"
    assert groups["log(1 + temp)"] == "log(1 + temp)"   # a single column is a group by its name
    lags = [name for name in design.names if name.startswith("sales, ")]
    assert lags and all(groups[name] == name for name in lags)    # each lag its own term
    assert design.rows(slice(0, 5)).term_groups == design.term_groups
