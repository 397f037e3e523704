"""The backtest scores the forecast the user will make: drivers nobody knows ahead are
estimated inside each window (ex-ante), as the forecast estimates them.

References:
- an independent loop written here with statsmodels OLS (reference library) and pandas
  groupby means, replacing the driver after each origin by its training-window
  calendar-month mean per series;
- a simulation whose design is stated at each test: a pure-noise driver
  (y = 500 + 40·w + e, w and e independent normal draws) that only hindsight can use;
- the fact that OLS with an intercept predicts the mean of y at the mean of the drivers
  (the normal equations; any regression text), so the `mean` rule reproduces the mean
  baseline exactly.
Data are simulated with fixed seeds; no figure is a reference value of its own.
"""

from __future__ import annotations

import json
import textwrap

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

import pipeline
from pipeline import cli
from pipeline.core.errors import SpecError
from pipeline.runner import check
from pipeline.stages.backtest import run_backtest
from pipeline.stages.evaluate import evaluate
from pipeline.stages.forecast import make_forecast


def _write(tmp_path, frame: pd.DataFrame, spec: str, name: str = "spec") -> object:
    frame.to_csv(tmp_path / "data.csv", index=False)
    path = tmp_path / f"{name}.yaml"
    path.write_text(textwrap.dedent(spec), encoding="utf-8")
    return pipeline.load_spec(path)


def _noise(seed: int, months: int = 108) -> pd.DataFrame:
    """y = 500 + 40·w + e, with w ~ N(0, 1) and e ~ N(0, 17²) independent (stated design)."""
    rng = np.random.default_rng(seed)
    w = rng.normal(0, 1, months)
    return pd.DataFrame({"month": pd.period_range("2015-01", periods=months, freq="M")
                         .to_timestamp().strftime("%Y-%m-%d"),
                         "y": 500 + 40 * w + rng.normal(0, 17, months), "w": w})


NOISE_SPEC = """\
    name: noise
    input: {{file: data.csv, date_column: month}}
    target: y
    drivers:
      numeric:
        - {{column: w, future: {rule}}}
    validation: {{method: rolling_origin, min_train_periods: 24, horizon: 12}}
    models: [ols]
    output: {{folder: out}}
    """


def _skill(tmp_path, frame, rule):
    spec = _write(tmp_path, frame, NOISE_SPEC.format(rule=rule), rule)
    backtest = run_backtest(spec, check(spec))
    evaluation = evaluate(spec, backtest)
    row = evaluation.table.set_index("model").loc["ols"]
    return float(row["skill_vs_mean"]), evaluation, backtest


@pytest.mark.parametrize("seed", [1, 2])
def test_a_pure_noise_driver_wins_only_with_hindsight(tmp_path, seed):
    # Simulation (design above): 108 months, 73 expanding origins, horizon 12. Known
    # ahead, w explains most of y; unknown ahead, nothing can be gained from it.
    frame = _noise(seed)
    skill, evaluation, backtest = _skill(tmp_path, frame, "given")
    assert len(backtest.splits) == 73
    assert skill > 0.4 and evaluation.beats_baseline
    # Estimated by its calendar-month mean: the hindsight gain is gone (the month means
    # of a noise driver only add their own estimation noise), and the answer says so.
    skill, evaluation, backtest = _skill(tmp_path, frame, "month_mean")
    assert skill < 0.05 and not evaluation.beats_baseline
    assert "No model or simple rule beats the mean of the training months" in evaluation.verdict
    assert backtest.hindsight is not None
    # The ex-post figure shows what knowing w would have been worth.
    post = evaluation.hindsight.set_index("model").loc["ols", "skill_vs_mean"]
    assert post > 0.4
    assert any("had w been known ahead" in note for note in evaluation.ahead_notes)
    assert not any("had w been known ahead" in note for note in evaluation.notes)
    # Estimated by the window's mean: OLS then predicts exactly the mean of y (normal
    # equations), so it is the mean of the training months to rounding, and no test is run on rounding.
    skill, evaluation, _ = _skill(tmp_path, frame, "mean")
    assert abs(skill) < 1e-9
    assert evaluation.table.set_index("model").loc["ols", "against_mean"] == \
        "the same forecasts as the mean"


def _panel(seed: int = 11, months: int = 60, future: int = 6) -> pd.DataFrame:
    """Three series; p planned (uniform), w seasonal plus noise; y linear in both (stated)."""
    rng = np.random.default_rng(seed)
    frames = []
    for k, name in enumerate(["A", "B", "C"]):
        periods = pd.period_range("2018-01", periods=months + future, freq="M")
        w = 20 + 5 * k + 8 * np.cos(2 * np.pi * periods.month.to_numpy() / 12) \
            + rng.normal(0, 2, len(periods))
        p = rng.uniform(1, 3, len(periods))
        y = 100 + 10 * k + 3 * w - 12 * p + rng.normal(0, 2, len(periods))
        frame = pd.DataFrame({"month": periods.to_timestamp().strftime("%Y-%m-%d"), "shop": name,
                              "y": y, "p": p, "w": w})
        frame.loc[months:, "y"] = np.nan
        frame.loc[months:, "w"] = np.nan     # nobody knows w ahead
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


PANEL_SPEC = """\
    name: panel
    input: {file: data.csv, date_column: month, series: [shop]}
    target: y
    drivers:
      numeric:
        - p
        - {column: w, future: month_mean}
    validation: {method: rolling_origin, min_train_periods: 36, horizon: 6, step: 3}
    models: [ols]
    output: {folder: out}
    """


def _terms(frame: pd.DataFrame) -> pd.DataFrame:
    """Return 1, p, w and a level for shops B and C (against A), as numbers."""
    return pd.DataFrame({"const": 1.0, "p": frame["p"], "w": frame["w"],
                         "B": (frame["shop"] == "B").astype(float),
                         "C": (frame["shop"] == "C").astype(float)}, index=frame.index)


def _by_hand(history: pd.DataFrame, origin: pd.Period, horizon: int, estimate: bool) -> pd.DataFrame:
    """Fit OLS y ~ 1 + p + w + shop (statsmodels) on months up to the origin and predict the
    next months, w replaced by its (series, calendar month) mean over the window if
    ``estimate``."""
    train = history[history["period"] <= origin]
    test = history[(history["period"] > origin) & (history["period"] <= origin + horizon)].copy()
    fit = sm.OLS(train["y"], _terms(train)).fit()
    if estimate:
        means = train.groupby(["shop", train["period"].dt.month])["w"].mean()
        test["w"] = [means[(s, m.month)] for s, m in zip(test["shop"], test["period"])]
    test["prediction"] = fit.predict(_terms(test))
    return test


def test_ex_ante_predictions_match_an_independent_statsmodels_loop(tmp_path):
    frame = _panel()
    spec = _write(tmp_path, frame, PANEL_SPEC)
    backtest = run_backtest(spec, check(spec))
    history = frame[frame["y"].notna()].assign(period=lambda f: pd.PeriodIndex(f["month"], freq="M"))
    for estimate, table in ((True, backtest.predictions), (False, backtest.hindsight)):
        ours = table[table["model"] == "ols"]
        assert ours["origin"].nunique() == len(backtest.splits) >= 7
        for origin, rows in ours.groupby("origin"):
            hand = _by_hand(history, pd.Period(origin, "M"), 6, estimate)
            merged = rows.merge(hand.assign(period=hand["period"].astype(str)),
                                left_on=["period", "series"], right_on=["period", "shop"])
            assert len(merged) == len(rows) == 18
            np.testing.assert_allclose(merged["prediction_x"], merged["prediction_y"],
                                       rtol=0, atol=1e-8)


@settings(max_examples=8, deadline=None)
@given(position=st.integers(0, 80), change=st.floats(-50, 50).filter(lambda v: abs(v) > 0.1))
def test_an_estimated_driver_after_an_origin_never_moves_that_origins_predictions(
        tmp_path_factory, position, change):
    # Property: the predictions of the origin 2021-06 read nothing of w after 2021-06; p
    # (given) is read at its actual values, so changing it does move them (the test can fail).
    tmp_path = tmp_path_factory.mktemp("prop")
    frame = _panel()
    after = frame.index[(pd.PeriodIndex(frame["month"], freq="M") > pd.Period("2021-06", "M"))
                        & frame["y"].notna()]
    row = after[position % len(after)]
    spec = _write(tmp_path, frame, PANEL_SPEC)
    before = run_backtest(spec, check(spec)).predictions
    moved = frame.copy()
    moved.loc[row, "w"] += change
    spec = _write(tmp_path, moved, PANEL_SPEC)
    now = run_backtest(spec, check(spec)).predictions
    at = (before["origin"] == "2021-06").to_numpy()
    # Equal to rounding: the whole history's design is factorised in blocks, so the last bit
    # may differ; a value read after the origin would move them by about 3·change/years.
    np.testing.assert_allclose(before["prediction"].to_numpy()[at], now["prediction"].to_numpy()[at],
                               rtol=1e-12, atol=0)
    planned = frame.copy()
    planned.loc[row, "p"] += change
    spec = _write(tmp_path, planned, PANEL_SPEC)
    shifted = run_backtest(spec, check(spec)).predictions
    month = str(pd.Period(frame.loc[row, "month"], "M"))
    reads = at & (before["period"] == month).to_numpy() & (before["series"] == frame.loc[row, "shop"]).to_numpy()
    if reads.any():
        assert not np.allclose(before["prediction"].to_numpy()[reads], shifted["prediction"].to_numpy()[reads])


def test_the_forecast_estimates_as_the_backtest_did_and_a_scenario_replaces_the_estimate(tmp_path):
    frame = _panel()
    spec = _write(tmp_path, frame, PANEL_SPEC.rstrip(" ") + "    scenarios:\n      - name: wet\n        changes:\n"
                                                "          - {column: w, set: 40}\n")
    data = check(spec)
    forecast = make_forecast(spec, data, run_backtest(spec, data))
    history = frame[frame["y"].notna()].assign(period=lambda f: pd.PeriodIndex(f["month"], freq="M"))
    full = frame.assign(period=lambda f: pd.PeriodIndex(f["month"], freq="M"), y=frame["y"].fillna(0))
    hand = _by_hand(full, history["period"].max(), 6, estimate=True)
    fit = sm.OLS(history["y"], _terms(history)).fit()
    ours = forecast.forecast[forecast.forecast["model"] == "ols"].merge(
        hand.assign(period=hand["period"].astype(str)), left_on=["period", "series"],
        right_on=["period", "shop"])
    assert len(ours) == 18
    np.testing.assert_allclose(ours["forecast"], ours["prediction"], rtol=1e-10)
    wet = forecast.scenarios[forecast.scenarios["model"] == "ols"]
    np.testing.assert_allclose(wet["difference"].to_numpy(),
                               fit.params["w"] * (40 - ours["w"].to_numpy()), rtol=1e-8)


def test_given_values_of_an_estimated_driver_are_ignored_with_a_note(tmp_path):
    frame = _panel()
    frame["w"] = frame["w"].fillna(99.0)
    spec = _write(tmp_path, frame, PANEL_SPEC)
    data = check(spec)
    forecast = make_forecast(spec, data, run_backtest(spec, data))
    assert any(note.startswith("w: the 18 values given in the months to forecast were ignored")
               for note in forecast.warnings)
    assert forecast.forecast["forecast"].lt(1000).all()


def test_an_empty_future_without_a_rule_is_refused_with_the_hint(tmp_path, capsys):
    frame = _panel()
    _write(tmp_path, frame, PANEL_SPEC.replace("{column: w, future: month_mean}", "w"))
    assert cli.main(["check", str(tmp_path / "spec.yaml")]) == 2
    out = capsys.readouterr().out
    assert "driver missing in a month to forecast" in out and "future: month_mean" in out


LAG_SPEC = """\
    name: lagged
    input: {{file: data.csv, date_column: month, series: [shop]}}
    target: y
    drivers:
      numeric: [p]
      lags:
        - {{column: km, lags: [{lags}]{rule}}}
    validation: {{method: rolling_origin, min_train_periods: 36, horizon: 6, step: 3}}
    models: [ols]
    output: {{folder: out}}
    """


def test_lags_of_a_column_that_is_not_a_driver(tmp_path):
    frame = _panel().assign(km=lambda f: f["w"] * 10)     # empty in the months to forecast
    # A lag shorter than the horizon of a column nobody gives ahead is refused at its key.
    spec = _write(tmp_path, frame, LAG_SPEC.format(lags=1, rule=""))
    with pytest.raises(SpecError, match="reaches past the forecast origin") as caught:
        run_backtest(spec, check(spec))
    assert "drivers.lags[0].lags[0]" in str(caught.value)
    # A lag that reaches past the horizon reads only months up to the origin.
    spec = _write(tmp_path, frame, LAG_SPEC.format(lags=6, rule=""))
    data = check(spec)
    backtest = run_backtest(spec, data)
    assert backtest.hindsight is None
    assert len(make_forecast(spec, data, backtest).forecast)
    # With a rule, a shorter lag reads the estimates, and a note says so.
    spec = _write(tmp_path, frame, LAG_SPEC.format(lags=1, rule=", future: last_value"))
    backtest = run_backtest(spec, check(spec))
    assert any("'km, 1 month earlier' reads castline's estimate" in n for n in backtest.notes)


def test_a_model_file_estimates_drivers_the_new_file_leaves_out(tmp_path, capsys):
    frame = _panel()
    _write(tmp_path, frame, PANEL_SPEC)
    result = pipeline.run(tmp_path / "spec.yaml")
    document = json.loads((result.folder.path / "metrics.json").read_text())
    assert document["drivers_ahead"]["estimated"] == {"w": "month_mean"}
    assert document["drivers_ahead"]["given"] == ["p"]
    assert [m["model"] for m in document["hindsight_models"]] == ["mean_baseline", "ols"]
    new = frame[frame["y"].isna()].drop(columns=["y", "w"])
    new.to_csv(tmp_path / "new.csv", index=False)
    out = tmp_path / "new_forecast.csv"
    assert cli.main(["forecast", str(result.folder.path / "model.json"), str(tmp_path / "new.csv"),
                     "--model", "ols", "--output", str(out)]) == 0
    written = pd.read_csv(out)
    run_forecast = result.forecast[result.forecast["model"] == "ols"]
    merged = written.merge(run_forecast, on=["period", "series"])
    assert len(merged) == 18
    np.testing.assert_allclose(merged["forecast_x"], merged["forecast_y"], rtol=1e-12)
