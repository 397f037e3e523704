"""Evaluate, per series: metrics, skill against the mean of the training months and the comparison test.

Hand-made predictions tables (fixed seeds) stand in for a backtest. References:
``score`` (the metric definitions, one call per group) for the grouped metrics; for the
per-series test, ``reference_series_tests`` below: plain pandas forms each series' mean
loss difference per origin (origins as months, in time order), and the test is composed
from its published steps with independent implementations (scipy.fft.dct for the cosine
terms, statsmodels OLS for the AR(1) coefficient, scipy.stats.t), as
tests/core/test_significance.py states: AR(1) prewhitening (Andrews & Monahan 1992) with
Kendall's bias correction, the equal-weighted cosine variance (Müller 2007; Lazarus,
Lewis, Stock & Watson 2018) and Student's t with 2 degrees of freedom (Coroneo & Iacone
2020). castline's one-sided p-value is the evidence that the model's loss is lower.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import scipy.fft
import scipy.stats
import statsmodels.api as sm

from pipeline.core.significance import MIN_ORIGINS
from pipeline.record.safe_csv import write_csv
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
    predicts exactly what the mean of the training months does, and a series scored only once."""
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
                "df_resid": np.nan, "centre": np.nan}))
    table = pd.concat(frames, ignore_index=True)[PREDICTION_COLUMNS]
    # ols predicts what the mean of the training months does for series "b": every loss difference is 0.
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
    """The settings evaluate reads."""

    def __init__(self, select_by: str = "mae", significance_level: float = 0.05) -> None:
        self.select_by = select_by
        self.significance_level = significance_level
        self.input = SimpleNamespace(period="month")


def reference_test(d: np.ndarray) -> tuple[float, float]:
    """The statistic and one-sided p-value of per-origin differences d, composed from
    statsmodels (AR(1) coefficient), scipy.fft.dct (cosine terms) and scipy.stats.t, with
    the cases castline documents: fewer than MIN_ORIGINS origins or every difference 0 give
    NaN; differences all equal and non-zero give ±inf with p 0 (model better) or 1."""
    d = np.asarray(d, float)
    n = len(d)
    if n < MIN_ORIGINS or (d == 0).all():
        return np.nan, np.nan
    c = d - d.mean()
    if (c == 0).all():
        return (np.inf, 0.0) if d.mean() > 0 else (-np.inf, 1.0)
    phi = float(sm.OLS(c[1:], c[:-1]).fit().params[0])
    phi = min(max(phi + (1 + 3 * phi) / n, -0.9), 0.9)
    e = c[1:] - phi * c[:-1]
    terms = scipy.fft.dct(e - e.mean(), type=2, norm="ortho")[1:3]
    statistic = d.mean() / np.sqrt(np.mean(terms ** 2) / (1 - phi) ** 2 / n)
    return float(statistic), float(scipy.stats.t.sf(statistic, 2))


def reference_series_tests(predictions: pd.DataFrame, model: str, select_by: str) -> pd.DataFrame:
    """Per series, plain pandas: pair the model's rows with the mean of the training months' on (origin,
    period, series), take d = baseline loss − model loss, average it per origin, order the
    origins as months (not as text) and apply ``reference_test``. Index: series; columns: n
    (origins), statistic, p_value, d (the per-origin means in order)."""
    keys = ["origin", "period", "series"]
    base = predictions.loc[predictions["model"] == "mean_baseline", keys + ["actual", "prediction"]]
    own = predictions.loc[predictions["model"] == model, keys + ["prediction"]]
    both = base.merge(own, on=keys, how="inner", suffixes=("_baseline", "_model"))
    power = 2 if select_by == "rmse" else 1
    both["d"] = ((both["prediction_baseline"] - both["actual"]).abs() ** power
                 - (both["prediction_model"] - both["actual"]).abs() ** power)
    both["origin_month"] = pd.PeriodIndex(both["origin"], freq="M")
    rows = {}
    for name, group in both.groupby("series"):
        d = group.groupby("origin_month")["d"].mean().sort_index().to_numpy()
        statistic, p_value = reference_test(d)
        rows[name] = {"n": len(d), "statistic": statistic, "p_value": p_value, "d": d}
    return pd.DataFrame.from_dict(rows, orient="index")


def ar1(rng: np.random.Generator, size: int, sd: float, phi: float = 0.6) -> np.ndarray:
    """A stationary AR(1) series e_t = φ e_{t−1} + u_t with standard deviation sd."""
    shocks = rng.normal(0, sd * np.sqrt(1 - phi ** 2), size)
    e = np.empty(size)
    e[0] = rng.normal(0, sd)
    for t in range(1, size):
        e[t] = phi * e[t - 1] + shocks[t]
    return e


# The simulated panel (seeded): a rolling-origin backtest with monthly origins 2018-01 to
# 2020-06 (30 origins), horizon 3 and step 1. Models mean_baseline, ols and ols_per_series.
# Actuals are whole numbers (so the fixed errors below are exact in floating point). Each
# series is scored at some origins, periods 1-3 ahead of each (n = origins tested on):
#   long    origins 0-29 (n = 30)  errors AR(1) in row order (origin, then period), φ = 0.6,
#   mid     origins 8-21 (n = 14)  sd 3 for the baseline, 2.5 for ols, 2 for ols_per_series;
#   late    origins 25-29 (n = 5)  each model its own draw; fewer than MIN_ORIGINS: NaN
#   two     origin 29, periods 1-2 (n = 1): NaN
#   tie     origins 0-14 (n = 15)  ols predicts exactly the baseline: every d = 0, NaN;
#                                  ols_per_series AR(1)
#   steady  origins 0-14           baseline error +2, ols error −1, ols_per_series error +3: every
#                                  d is the same (no variance): +inf, p = 0 for ols, −inf, p = 1
#                                  for ols_per_series
#   wobble  origins 0-14           baseline error 3, ols errors 1.5, 4.5, 1.5 at 1, 2, 3 months
#                                  ahead: the per-origin mean is the same at every origin
#                                  (+inf, p = 0) though the rows differ; ols_per_series AR(1)
# The rows are shuffled, so the order has to come from origin and period.
PANEL_ORIGINS = {"long": range(0, 30), "mid": range(8, 22), "late": range(25, 30),
                 "two": range(29, 30), "tie": range(0, 15),
                 "steady": range(0, 15), "wobble": range(0, 15)}


def simulated_panel(seed: int = 1995) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    months = pd.period_range("2018-01", periods=33, freq="M")
    frames = []
    for name, origins in PANEL_ORIGINS.items():
        ahead = (1, 2) if name == "two" else (1, 2, 3)
        cells = [(months[o], months[o + k], k) for o in origins for k in ahead]
        size = len(cells)
        actual = np.round(rng.normal(20, 4, size))
        errors = {"mean_baseline": ar1(rng, size, 3.0), "ols": ar1(rng, size, 2.5),
                  "ols_per_series": ar1(rng, size, 2.0)}
        if name == "tie":
            errors["ols"] = errors["mean_baseline"]
        if name == "steady":
            errors = {"mean_baseline": np.full(size, 2.0), "ols": np.full(size, -1.0),
                      "ols_per_series": np.full(size, 3.0)}
        if name == "wobble":
            errors["mean_baseline"] = np.full(size, 3.0)
            errors["ols"] = np.array([{1: 1.5, 2: 4.5, 3: 1.5}[k] for _, _, k in cells])
        for model, error in errors.items():
            frames.append(pd.DataFrame({
                "origin": [str(o) for o, _, _ in cells], "period": [str(p) for _, p, _ in cells],
                "horizon": [k for _, _, k in cells], "series": name, "model": model,
                "actual": actual, "prediction": actual + error,
                "mase_scale": rng.uniform(1, 3, size), "prediction_se": np.nan, "df_resid": np.nan,
                "centre": np.nan}))
    table = pd.concat(frames, ignore_index=True)[PREDICTION_COLUMNS]
    return table.sample(frac=1, random_state=seed).reset_index(drop=True)


def assert_equal_to_reference(got: pd.DataFrame, expected: pd.DataFrame) -> None:
    """Statistic and p-value of each series equal the reference's to 1e-10 (relative)."""
    assert sorted(got.index) == sorted(expected.index)
    got = got.loc[expected.index]
    np.testing.assert_array_equal(got["test_n"].to_numpy(int), expected["n"].to_numpy(int))
    np.testing.assert_allclose(got["test_statistic"].to_numpy(float),
                               expected["statistic"].to_numpy(float), rtol=1e-10, atol=0,
                               equal_nan=True)
    np.testing.assert_allclose(got["p_value"].to_numpy(float), expected["p_value"].to_numpy(float),
                               rtol=1e-10, atol=0, equal_nan=True)


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
def test_series_csv_tests_equal_an_independent_computation_on_a_simulated_panel(select_by, tmp_path):
    # Reference: reference_series_tests (pandas groupby, statsmodels, scipy). Castline:
    # evaluate's by_series table, written to series.csv as the publish stage writes it
    # (write_csv) and read back.
    predictions = simulated_panel()
    evaluation = evaluate(Spec(select_by=select_by), backtest_of(predictions))
    write_csv(evaluation.by_series, tmp_path / "series.csv")
    written = pd.read_csv(tmp_path / "series.csv").set_index(["model", "series"])
    assert written.loc["mean_baseline", "p_value"].isna().all()
    for model in ("ols", "ols_per_series"):
        expected = reference_series_tests(predictions, model, select_by)
        assert_equal_to_reference(written.loc[model], expected)
        assert_equal_to_reference(evaluation.by_series.set_index(["model", "series"]).loc[model],
                                  expected)
    # The series the design puts there, with castline's documented outcomes.
    table = written.loc["ols"]
    assert table.loc["long", "test_n"] == 30 and table.loc["mid", "test_n"] == 14
    assert 0 < table.loc["long", "p_value"] < 1 and 0 < table.loc["mid", "p_value"] < 1
    assert np.isnan(table.loc["late", "p_value"]) and table.loc["late", "test_n"] == 5
    assert np.isnan(table.loc["two", "p_value"]) and np.isnan(table.loc["two", "test_statistic"])
    assert np.isnan(table.loc["tie", "test_statistic"]) and np.isnan(table.loc["tie", "p_value"])
    assert table.loc["steady", "test_statistic"] == np.inf and table.loc["steady", "p_value"] == 0.0
    steady = written.loc[("ols_per_series", "steady")]
    assert steady["test_statistic"] == -np.inf and steady["p_value"] == 1.0
    assert table.loc["wobble", "test_statistic"] == np.inf


def test_row_order_does_not_change_the_per_series_tests():
    predictions = hand_made(seed=4, origins=14)
    shuffled = predictions.sample(frac=1, random_state=7).reset_index(drop=True)
    a = series_tests(predictions, backtest_of(predictions), "mae").set_index(["model", "series"])
    b = series_tests(shuffled, backtest_of(shuffled), "mae").set_index(["model", "series"])
    assert a["p_value"].notna().sum() >= 6
    pd.testing.assert_frame_equal(a.sort_index(), b.sort_index())


def test_one_series_formed_by_a_pivot_equals_an_independent_computation():
    predictions = hand_made(seed=5, origins=14)
    got = series_tests(predictions, backtest_of(predictions), "mae").set_index(["model", "series"])
    rows = predictions[predictions["series"] == "c"]
    wide = rows.pivot(index=["origin", "period"], columns="model", values="prediction").sort_index()
    actual = rows[rows["model"] == "mean_baseline"].set_index(["origin", "period"])["actual"].sort_index()
    d = (wide["mean_baseline"] - actual).abs() - (wide["ols_per_series"] - actual).abs()
    per_origin = d.groupby(level="origin").mean().sort_index().to_numpy()   # "2020-01" … sort as text
    assert len(per_origin) == 14
    statistic, p_value = reference_test(per_origin)
    assert got.loc[("ols_per_series", "c"), "test_n"] == 14
    assert got.loc[("ols_per_series", "c"), "test_statistic"] == pytest.approx(statistic, rel=1e-10)
    assert got.loc[("ols_per_series", "c"), "p_value"] == pytest.approx(p_value, rel=1e-10)


def test_evaluate_puts_skill_tests_and_the_summary_per_series():
    predictions = hand_made(seed=6, origins=14)
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
        assert row["beats_significantly"] == (row["beats"] and row["p_holm"] < 0.2)
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
            ((own["skill_vs_mean"] > 0) & (own["p_holm"] < 0.2)).mean())
        assert row["skill_median"] == pytest.approx(np.median(own["skill_vs_mean"]))
        assert row["skill_q25"] == pytest.approx(np.quantile(own["skill_vs_mean"], 0.25))
        assert row["skill_q75"] == pytest.approx(np.quantile(own["skill_vs_mean"], 0.75))
    # The better model (smaller errors by construction) beats the mean of the training months on more series.
    assert summary.loc["ols_per_series", "beats"] >= summary.loc["ols", "beats"]


def test_a_holdout_gives_no_per_series_p_values():
    # One origin, twelve months ahead: one fit, dependent errors, no test (and no pretence).
    predictions = hand_made(seed=8, origins=1, horizon=12)
    got = series_tests(predictions, backtest_of(predictions, horizon=12, scheme="holdout"), "mae")
    assert len(got) and got["p_value"].isna().all() and got["test_statistic"].isna().all()
    assert (got.loc[got["series"] == "d", "test_n"] == 1).all()


def test_summary_of_a_run_with_only_the_mean_baseline_is_empty():
    by_series = pd.DataFrame({"model": ["mean_baseline"], "series": ["a"], "skill_vs_mean": [0.0],
                              "beats": [False], "beats_significantly": [False]})
    assert series_summary(by_series).empty
