"""Multi-step forecasts with lags of the target: neither strategy reads an actual after the origin.

References: statsmodels OLS (reference library) for the direct strategy's
per-horizon fit, built here by hand from pandas' shift; the recursive
strategy is checked against a month-by-month computation written in the test.
Data are simulated with a fixed seed (an AR(1) series with a driver).
"""

from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import pipeline
from pipeline.core.columns import PERIOD
from pipeline.stages import multistep


def _simulated(path, months=72, future=3, seed=5):
    rng = np.random.default_rng(seed)
    driver = rng.normal(10, 2, months + future)
    y = np.empty(months + future)
    y[0] = 50
    for t in range(1, months + future):
        y[t] = 20 + 0.6 * y[t - 1] + 1.5 * driver[t] + rng.normal(0, 1)
    frame = pd.DataFrame({"month": pd.period_range("2018-01", periods=months + future, freq="M")
                          .to_timestamp().strftime("%Y-%m-%d"), "y": y.round(3), "x": driver.round(3)})
    frame.loc[months:, "y"] = np.nan
    frame.to_csv(path, index=False)
    return frame


def _spec(tmp_path, strategy, lags="[1, 2]", transform="none"):
    data = tmp_path / "series.csv"
    if not data.exists():
        _simulated(data)
    text = textwrap.dedent(f"""\
        name: ahead
        input: {{file: series.csv, date_column: month}}
        target: y
        target_transform: {transform}
        drivers:
          numeric: [x]
          lags:
            - column: y
              lags: {lags}
        multi_step: {strategy}
        validation: {{method: holdout, last_periods: 6}}
        output: {{folder: out}}
        """)
    path = tmp_path / f"{strategy}-{transform}.yaml"
    path.write_text(text, encoding="utf-8")
    return pipeline.load_spec(path)


def test_spec_for_horizon_keeps_only_lags_known_at_the_origin(tmp_path):
    spec = _spec(tmp_path, "direct", "[1, 3, 12]")
    assert multistep.target_lags_reach(spec) == 1
    assert [lag.lags for lag in multistep.spec_for_horizon(spec, 3).drivers.lags] == [[3, 12]]
    assert not multistep.spec_for_horizon(spec, 13).drivers.lags
    assert multistep.needs_strategy(spec, 2) and not multistep.needs_strategy(spec, 1)


@pytest.mark.parametrize("strategy", ["direct", "recursive"])
def test_changing_actuals_after_the_origin_changes_no_prediction(tmp_path, strategy):
    spec = _spec(tmp_path, strategy)
    data = pipeline.check(spec)
    splits = pipeline.runner.plan_splits(spec, data)[0]
    split = splits[0]
    choice = spec.model("ols")
    first = multistep.predict_ahead(spec, choice, split.train, split.test, split.origin.ordinal)[0]
    scrambled = split.test.copy()
    scrambled["y"] = scrambled["y"] * 10 + 1000
    second = multistep.predict_ahead(spec, choice, split.train, scrambled, split.origin.ordinal)[0]
    np.testing.assert_array_equal(first, second)


def test_direct_strategy_equals_a_statsmodels_fit_per_horizon(tmp_path):
    spec = _spec(tmp_path, "direct")
    data = pipeline.check(spec)
    split = pipeline.runner.plan_splits(spec, data)[0][0]
    got = multistep.predict_ahead(spec, spec.model("ols"), split.train, split.test, split.origin.ordinal)[0]
    history = data.history.sort_values(PERIOD).reset_index(drop=True)
    origin = split.origin.ordinal
    months = history[PERIOD].array.asi8
    for position, month in enumerate(split.test[PERIOD].array.asi8):
        horizon = int(month - origin)
        lags = [lag for lag in (1, 2) if lag >= horizon]
        train = history[months <= origin].copy()
        columns = ["x"]
        for lag in lags:
            train[f"lag{lag}"] = train["y"].shift(lag)
            columns.append(f"lag{lag}")
        train = train.dropna(subset=columns)
        fit = sm.OLS(train["y"], sm.add_constant(train[columns])).fit()
        row = history[months == month].iloc[0]
        features = [1.0, row["x"]] + [float(history.loc[months == month - lag, "y"].iloc[0]) for lag in lags]
        assert got[position] == pytest.approx(float(np.dot(fit.params.to_numpy(), features)), rel=1e-9)


def test_recursive_strategy_feeds_each_prediction_to_the_next_month(tmp_path):
    spec = _spec(tmp_path, "recursive")
    data = pipeline.check(spec)
    split = pipeline.runner.plan_splits(spec, data)[0][0]
    got = multistep.predict_ahead(spec, spec.model("ols"), split.train, split.test, split.origin.ordinal)[0]
    train = split.train.sort_values(PERIOD).copy()
    train["lag1"], train["lag2"] = train["y"].shift(1), train["y"].shift(2)
    train = train.dropna(subset=["lag1", "lag2"])
    fit = sm.OLS(train["y"], sm.add_constant(train[["x", "lag1", "lag2"]])).fit()
    known = list(split.train.sort_values(PERIOD)["y"])
    expected = []
    for x in split.test.sort_values(PERIOD)["x"]:
        value = float(np.dot(fit.params.to_numpy(), [1.0, x, known[-1], known[-2]]))
        expected.append(value)
        known.append(value)
    np.testing.assert_allclose(got, expected, rtol=1e-9)


@pytest.mark.parametrize("strategy", ["direct", "recursive"])
def test_a_whole_run_with_short_target_lags_forecasts_every_future_month(tmp_path, strategy):
    result = pipeline.run(_spec(tmp_path, strategy), output_folder=tmp_path / "runs")
    ols = result.forecast[result.forecast["model"] == "ols"]
    assert len(ols) == 3 and ols["forecast"].notna().all()
    assert any("multi_step" in warning for warning in result.warnings)


def test_direct_strategy_on_a_log_target_gives_the_log_fits_interval_inputs(tmp_path):
    # Per horizon, statsmodels OLS of log(y) on x and the lags of log(y) that reach the origin:
    # its prediction is the centre, its se_obs and df_resid the standard error and df.
    spec = _spec(tmp_path, "direct", transform="log")
    data = pipeline.check(spec)
    split = pipeline.runner.plan_splits(spec, data)[0][0]
    point, se, df, centre, fitted = multistep.predict_ahead(spec, spec.model("ols"), split.train,
                                                            split.test, split.origin.ordinal)
    history = data.history.sort_values(PERIOD).reset_index(drop=True)
    history["log_y"] = np.log(history["y"])
    origin = split.origin.ordinal
    months = history[PERIOD].array.asi8
    smearing = {horizon: model.smearing_ for horizon, _, model in fitted}
    for position, month in enumerate(split.test[PERIOD].array.asi8):
        horizon = int(month - origin)
        lags = [lag for lag in (1, 2) if lag >= horizon]
        train = history[months <= origin].copy()
        columns = ["x"]
        for lag in lags:
            train[f"lag{lag}"] = train["log_y"].shift(lag)
            columns.append(f"lag{lag}")
        train = train.dropna(subset=columns)
        fit = sm.OLS(train["log_y"], sm.add_constant(train[columns])).fit()
        row = history[months == month].iloc[0]
        features = [1.0, row["x"]] + [float(history.loc[months == month - lag, "log_y"].iloc[0])
                                      for lag in lags]
        frame = fit.get_prediction(np.array([features])).summary_frame()
        assert centre[position] == pytest.approx(float(frame["mean"].iloc[0]), rel=1e-9)
        assert se[position] == pytest.approx(float(np.sqrt(frame["mean_se"].iloc[0] ** 2 + fit.scale)),
                                             rel=1e-9)
        assert df[position] == fit.df_resid
        assert point[position] == pytest.approx(np.exp(centre[position]) * smearing[horizon], rel=1e-12)


def test_recursive_strategy_on_a_log_target_gives_no_analytic_interval(tmp_path):
    # Predictions fed back as lags on the log scale: no standard error is claimed for them.
    point, se, df, centre, _ = multistep.predict_ahead(
        *_recursive_inputs(tmp_path, "log"))
    assert np.isfinite(point).all()
    assert np.isnan(se).all() and np.isnan(df).all() and np.isnan(centre).all()
    # Without a transform the recursive strategy still states one, centred on the prediction.
    point, se, df, centre, _ = multistep.predict_ahead(*_recursive_inputs(tmp_path, "none"))
    assert np.isfinite(se).all()
    np.testing.assert_array_equal(centre, point)


def _recursive_inputs(tmp_path, transform):
    spec = _spec(tmp_path, "recursive", transform=transform)
    split = pipeline.runner.plan_splits(spec, pipeline.check(spec))[0][0]
    return spec, spec.model("ols"), split.train, split.test, split.origin.ordinal


@pytest.mark.parametrize("strategy", ["direct", "recursive"])
def test_a_whole_run_on_a_log_target_states_an_analytic_interval_only_without_feeding_back(tmp_path,
                                                                                          strategy):
    result = pipeline.run(_spec(tmp_path, strategy, transform="log"), output_folder=tmp_path / "runs")
    ols = result.forecast[result.forecast["model"] == "ols"]
    fed_back = [w for w in result.warnings if "fed back" in w and "no analytic interval" in w]
    if strategy == "direct":
        assert ols[["analytic_low_80", "analytic_high_95"]].notna().all().all()
        assert ((ols["analytic_low_95"] < ols["forecast"]) & (ols["forecast"] < ols["analytic_high_95"])).all()
        assert not fed_back
    else:
        assert ols[["analytic_low_80", "analytic_high_95"]].isna().all().all()
        assert len(fed_back) == 1
