"""Evaluate, per series: metrics, skill against the mean baseline and the Diebold–Mariano test.

Hand-made predictions tables (fixed seeds) stand in for a backtest. References:
``score`` (the metric definitions, one call per group) for the grouped metrics;
``pipeline.significance.diebold_mariano`` called on each series' loss
differences, formed here with pandas (it is itself checked against the published
formula in tests/test_significance.py); and, for one series, the
Diebold–Mariano statistic (Diebold & Mariano 1995) with the small-sample
correction of Harvey, Leybourne & Newbold (1997, eq. 9: the statistic times
sqrt((n + 1 − 2h + h(h − 1)/n) / n), compared with Student's t on n − 1 df),
written out here in numpy.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats

from pipeline.significance import diebold_mariano, diebold_mariano_by_group
from pipeline.stages.backtest import PREDICTION_COLUMNS, BacktestResult
from pipeline.stages.evaluate import (
    METRIC_COLUMNS,
    _scores_by,
    evaluate,
    grouped_scores,
    series_summary,
    series_tests,
)

MODELS = ["mean_baseline", "ols", "ols_per_series"]


def hand_made(seed: int = 0, origins: int = 6, horizon: int = 3, series=("a", "b", "c", "d")):
    """Return a predictions table laid out as the backtest writes it (origin, model, period,
    series), with awkward rows: an actual of 0, a missing MASE scale, a series where ols
    predicts exactly what the mean baseline does, and a series scored only once."""
    rng = np.random.default_rng(seed)
    months = pd.period_range("2020-01", periods=origins + horizon, freq="M")
    frames = []
    for o in range(origins):
        origin = months[o]
        periods = [months[o + h] for h in range(1, horizon + 1) if o + h < len(months)]
        cells = [(p, s) for p in periods for s in series]
        actual = rng.normal(20, 4, len(cells))
        base = actual + rng.normal(0, 3, len(cells))
        for model in MODELS:
            spread = {"mean_baseline": 0, "ols": 2.0, "ols_per_series": 1.0}[model]
            prediction = base if model == "mean_baseline" else actual + rng.normal(0, spread, len(cells))
            frames.append(pd.DataFrame({
                "origin": str(origin), "period": [str(p) for p, _ in cells],
                "horizon": [(p - origin).n for p, _ in cells], "series": [s for _, s in cells],
                "model": model, "actual": actual, "prediction": prediction,
                "mase_scale": rng.uniform(1, 3, len(cells)), "prediction_se": np.nan,
                "df_resid": np.nan}))
    table = pd.concat(frames, ignore_index=True)[PREDICTION_COLUMNS]
    # ols predicts what the mean baseline does for series "b": every loss difference is 0.
    base = table[table["model"] == "mean_baseline"].set_index(["origin", "period", "series"])["prediction"]
    tie = (table["model"] == "ols") & (table["series"] == "b")
    table.loc[tie, "prediction"] = base.loc[
        pd.MultiIndex.from_frame(table.loc[tie, ["origin", "period", "series"]])].to_numpy()
    table.loc[table.index[(table["series"] == "a")][:3], "actual"] = 0.0
    table.loc[table.index[(table["series"] == "c")][1], "mase_scale"] = np.nan
    # A series that appears once (a late starter): too few differences for the test.
    last = table[table["origin"] == table["origin"].iloc[-1]]
    late = last[last["series"] == series[0]].assign(series="late")
    return pd.concat([table, late], ignore_index=True)


def backtest_of(predictions: pd.DataFrame, horizon: int = 3, scheme: str = "rolling_origin",
                step: int = 1) -> BacktestResult:
    return BacktestResult(predictions=predictions, splits=[], scheme=scheme, horizon=horizon,
                          notes=[], step=step)


class Spec:
    """The two settings evaluate reads."""

    def __init__(self, select_by: str = "mae", significance_level: float = 0.05) -> None:
        self.select_by = select_by
        self.significance_level = significance_level


def direct_series_tests(predictions: pd.DataFrame, model: str, select_by: str, lags: int) -> dict:
    """Per series: diebold_mariano on the loss differences ordered by origin then period."""
    keys = ["origin", "period", "series"]
    base = predictions.loc[predictions["model"] == "mean_baseline", keys + ["actual", "prediction"]]
    own = predictions.loc[predictions["model"] == model, keys + ["prediction"]]
    both = base.merge(own, on=keys, how="inner", suffixes=("", "_model"))
    power = 2 if select_by == "rmse" else 1
    both["d"] = ((both["prediction"] - both["actual"]).abs() ** power
                 - (both["prediction_model"] - both["actual"]).abs() ** power)
    found = {}
    for name, rows in both.groupby("series"):
        d = rows.sort_values(["origin", "period"])["d"].to_numpy()
        found[name] = diebold_mariano(d, np.zeros_like(d), horizon=lags)
    return found


def numpy_hln(d: np.ndarray, h: int) -> tuple[float, float]:
    """Diebold–Mariano with the Harvey–Leybourne–Newbold correction, straight from the formulas."""
    n = len(d)
    dbar = d.mean()
    gamma = np.array([np.sum((d[k:] - dbar) * (d[:n - k] - dbar)) / n for k in range(h)])
    dm = dbar / np.sqrt((gamma[0] + 2 * gamma[1:].sum()) / n)
    hln = dm * np.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    return float(hln), float(scipy.stats.t.sf(hln, df=n - 1))


def test_grouped_scores_equal_one_score_call_per_series():
    predictions = hand_made(seed=1)
    got = grouped_scores(predictions, ["model", "series"])
    expected = _scores_by(predictions, ["model", "series"])   # reference: score() per group
    assert list(got.columns) == list(expected.columns)
    assert got[["model", "series"]].values.tolist() == expected[["model", "series"]].values.tolist()
    for column in METRIC_COLUMNS + ["mape_rows_left_out"]:
        np.testing.assert_allclose(got[column].to_numpy(float), expected[column].to_numpy(float),
                                   rtol=1e-13, atol=0, equal_nan=True, err_msg=column)
    # The awkward rows are there: zeros left out of MAPE, one series scored once (no R²).
    assert got.loc[got["series"] == "a", "mape_rows_left_out"].max() == 3
    assert got.loc[got["series"] == "late", "n"].tolist() == [3, 3, 3]
    assert got.loc[got["series"] == "late", "r2"].notna().all()


def test_grouped_scores_of_a_one_row_group_and_of_numeric_keys():
    predictions = hand_made(seed=2).iloc[[0, 1, 2, 40]]
    got = grouped_scores(predictions, ["horizon"])
    expected = _scores_by(predictions, ["horizon"])
    assert got["horizon"].tolist() == expected["horizon"].tolist()
    assert got["horizon"].dtype == predictions["horizon"].dtype
    for column in METRIC_COLUMNS:
        np.testing.assert_allclose(got[column].to_numpy(float), expected[column].to_numpy(float),
                                   rtol=1e-13, equal_nan=True, err_msg=column)


@pytest.mark.parametrize("select_by", ["mae", "rmse"])
def test_per_series_tests_equal_diebold_mariano_on_each_series(select_by):
    predictions = hand_made(seed=3)
    got = series_tests(predictions, backtest_of(predictions), select_by).set_index(["model", "series"])
    lags = math.ceil(3 / 1)   # the overall test's lag: ceil(horizon / step), six origins
    for model in ("ols", "ols_per_series"):
        expected = direct_series_tests(predictions, model, select_by, lags)
        assert set(expected) == {s for m, s in got.index if m == model}
        for name, test in expected.items():
            row = got.loc[(model, name)]
            assert row["test_n"] == test.n
            if np.isnan(test.statistic):
                assert np.isnan(row["test_statistic"])
            else:
                assert row["test_statistic"] == pytest.approx(test.statistic, rel=1e-10)
            if np.isnan(test.p_value):
                assert np.isnan(row["p_value"])
            else:
                assert row["p_value"] == pytest.approx(test.p_value, rel=1e-9, abs=1e-15)
    # ols ties the mean baseline on series b: no evidence either way, p = 1.
    assert got.loc[("ols", "b"), "p_value"] == 1.0
    # A series with three differences at lag 3 has a correction of sqrt(0): statistic 0.
    assert got.loc[("ols", "late"), "test_n"] == 3


def test_row_order_does_not_change_the_per_series_tests():
    predictions = hand_made(seed=4)
    shuffled = predictions.sample(frac=1, random_state=7).reset_index(drop=True)
    a = series_tests(predictions, backtest_of(predictions), "mae").set_index(["model", "series"])
    b = series_tests(shuffled, backtest_of(shuffled), "mae").set_index(["model", "series"])
    pd.testing.assert_frame_equal(a.sort_index(), b.sort_index())


def test_one_series_statistic_equals_a_plain_numpy_hln_implementation():
    predictions = hand_made(seed=5)
    got = series_tests(predictions, backtest_of(predictions), "mae").set_index(["model", "series"])
    rows = predictions[predictions["series"] == "c"]
    wide = rows.pivot(index=["origin", "period"], columns="model", values="prediction").sort_index()
    actual = rows[rows["model"] == "mean_baseline"].set_index(["origin", "period"])["actual"].sort_index()
    d = ((wide["mean_baseline"] - actual).abs() - (wide["ols_per_series"] - actual).abs()).to_numpy()
    assert len(d) == 18   # six origins, three months each
    statistic, p_value = numpy_hln(d, 3)
    assert got.loc[("ols_per_series", "c"), "test_statistic"] == pytest.approx(statistic, rel=1e-10)
    assert got.loc[("ols_per_series", "c"), "p_value"] == pytest.approx(p_value, rel=1e-9)


def test_batched_test_on_a_sequence_worked_by_hand():
    # d = 1..5, h = 1: mean 3, variance (4+1+0+1+4)/5 = 2, DM = 3 / sqrt(2/5);
    # the correction sqrt((5 + 1 − 2) / 5) = sqrt(0.8) makes it 3·sqrt(2) exactly.
    d = np.arange(1.0, 6.0)
    statistic, p_value = diebold_mariano_by_group(d, np.array([0]), np.array([5]), 1)
    assert statistic[0] == pytest.approx(3 * math.sqrt(2), rel=1e-14)
    assert p_value[0] == pytest.approx(scipy.stats.t.sf(3 * math.sqrt(2), 4), rel=1e-12)


@pytest.mark.parametrize("horizon", [1, 2, 3, 5])
def test_many_groups_at_once_equal_each_group_alone(horizon):
    # Groups side by side must not reach into each other (lags stop at a group's edge).
    rng = np.random.default_rng(horizon)
    groups = [rng.normal(0.3, 1, size) for size in rng.integers(1, 30, 60)]
    groups += [np.zeros(7), np.full(6, 0.5), np.full(6, -0.5), np.array([1.0, np.nan, 2.0, 3.0]),
               np.array([5.0, -5.0, 5.0, -5.0])]   # ties, constant gains and losses, a gap
    sizes = np.array([len(g) for g in groups])
    starts = np.r_[0, np.cumsum(sizes)[:-1]]
    statistic, p_value = diebold_mariano_by_group(np.concatenate(groups), starts, sizes, horizon)
    for index, d in enumerate(groups):
        with np.errstate(invalid="ignore", divide="ignore"):
            expected = diebold_mariano(d, np.zeros_like(d), horizon=horizon)
        np.testing.assert_allclose(statistic[index], expected.statistic, rtol=1e-9, equal_nan=True)
        np.testing.assert_allclose(p_value[index], expected.p_value, rtol=1e-9, atol=1e-15,
                                   equal_nan=True)


def test_evaluate_puts_skill_tests_and_the_summary_per_series():
    predictions = hand_made(seed=6)
    evaluation = evaluate(Spec(significance_level=0.2), backtest_of(predictions))
    table = evaluation.by_series.set_index(["model", "series"])
    assert {"skill_vs_mean", "test_statistic", "p_value", "beats", "beats_significantly"} <= \
        set(table.columns)
    mae = predictions.assign(e=(predictions["prediction"] - predictions["actual"]).abs()) \
        .groupby(["model", "series"])["e"].mean()
    for (model, name), row in table.iterrows():
        skill = 1 - mae[(model, name)] / mae[("mean_baseline", name)]   # 1 − MAE / MAE of the mean
        assert row["skill_vs_mean"] == pytest.approx(skill, rel=1e-12, abs=1e-12)
        assert row["beats"] == (model != "mean_baseline" and skill > 0)
        assert row["beats_significantly"] == (row["beats"] and row["p_value"] < 0.2)
    assert table.loc["mean_baseline", "p_value"].isna().all()
    assert not table.loc["mean_baseline", "beats"].any()
    summary = evaluation.series_summary.set_index("model")
    assert list(summary.index) == ["ols", "ols_per_series"]
    for model, row in summary.iterrows():
        own = table.loc[model]
        assert row["series"] == len(own) == 5
        assert row["beats"] == (own["skill_vs_mean"] > 0).sum()
        assert row["beats_share"] == pytest.approx((own["skill_vs_mean"] > 0).mean())
        assert row["significant_share"] == pytest.approx(
            ((own["skill_vs_mean"] > 0) & (own["p_value"] < 0.2)).mean())
        assert row["skill_median"] == pytest.approx(np.median(own["skill_vs_mean"]))
        assert row["skill_q25"] == pytest.approx(np.quantile(own["skill_vs_mean"], 0.25))
        assert row["skill_q75"] == pytest.approx(np.quantile(own["skill_vs_mean"], 0.75))
    # The better model (smaller errors by construction) beats the mean baseline on more series.
    assert summary.loc["ols_per_series", "beats"] >= summary.loc["ols", "beats"]


def test_holdout_series_tests_use_no_lags():
    predictions = hand_made(seed=8, origins=1, horizon=12)
    got = series_tests(predictions, backtest_of(predictions, horizon=12, scheme="holdout"), "mae")
    expected = direct_series_tests(predictions, "ols", "mae", 1)
    row = got[(got["model"] == "ols") & (got["series"] == "d")].iloc[0]
    assert row["test_n"] == 12
    assert row["p_value"] == pytest.approx(expected["d"].p_value, rel=1e-9)


def test_summary_of_a_run_with_only_the_mean_baseline_is_empty():
    by_series = pd.DataFrame({"model": ["mean_baseline"], "series": ["a"], "skill_vs_mean": [0.0],
                              "beats": [False], "beats_significantly": [False]})
    assert series_summary(by_series).empty
