"""Evaluate, per series: metrics, skill against the mean baseline and the Diebold–Mariano test.

Hand-made predictions tables (fixed seeds) stand in for a backtest. References:
``score`` (the metric definitions, one call per group) for the grouped metrics;
for the per-series test, ``reference_dm`` below, written here from the published
formulas and computed with statsmodels and scipy, not with castline:

F. X. Diebold & R. S. Mariano (1995), "Comparing predictive accuracy", Journal of
Business & Economic Statistics 13(3), 253-263: d_t = loss(baseline)_t − loss(model)_t,
DM = d̄ / sqrt(V̂ / n), V̂ = γ̂_0 + 2 Σ_{k=1}^{h−1} γ̂_k,
γ̂_k = (1/n) Σ_{t=k+1}^{n} (d_t − d̄)(d_{t−k} − d̄).

D. Harvey, S. Leybourne & P. Newbold (1997), "Testing the equality of prediction mean
squared errors", International Journal of Forecasting 13(2), 281-291, eq. 9:
DM* = DM · sqrt((n + 1 − 2h + h(h − 1)/n) / n), compared with Student's t on n − 1 df.

castline's one-sided p-value is P(T ≥ DM*): the evidence that the model's loss is lower.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from statsmodels.tsa.stattools import acovf

from pipeline.core.significance import diebold_mariano_by_group
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


def long_run_variance(d: np.ndarray, h: int) -> float:
    """V̂ = γ̂_0 + 2 Σ_{k=1}^{h−1} γ̂_k (Diebold & Mariano 1995), γ̂_k from statsmodels' acovf.

    adjusted=False: γ̂_k divides by n, not by n − k, as in Diebold & Mariano and as castline
    does (``np.bincount(...) / n`` in significance.diebold_mariano_by_group). Lags of n or
    more have no pairs (an empty sum, 0); acovf refuses them, so they are left at 0 here.
    """
    gamma = np.zeros(h)
    top = min(h - 1, len(d) - 1)
    gamma[:top + 1] = acovf(d, adjusted=False, demean=True, fft=False, nlag=top)
    return float(gamma[0] + 2 * gamma[1:].sum())


def reference_dm(d, h: int) -> tuple[float, float]:
    """The corrected statistic DM* and its one-sided p-value P(T ≥ DM*), T ~ t(n − 1).

    Diebold & Mariano (1995) with the correction of Harvey, Leybourne & Newbold (1997), plus
    the cases castline documents (significance.diebold_mariano_by_group): fewer than 3
    differences give NaN; a long-run variance that is not positive is replaced by the lag-0
    variance γ̂_0; when γ̂_0 is 0 too (every difference equal) the statistic is NaN with
    p = 1 if every difference is 0, otherwise ±inf with p 0 (model better) or 1 (worse).
    """
    d = np.asarray(d, dtype=float)
    n = len(d)
    if n < 3 or h < 1:
        return np.nan, np.nan
    variance = long_run_variance(d, h)
    if variance <= 0:
        variance = long_run_variance(d, 1)   # γ̂_0
    mean = d.mean()
    if variance == 0:
        if (d == 0).all():
            return np.nan, 1.0
        return (np.inf, 0.0) if mean > 0 else (-np.inf, 1.0)
    dm = mean / np.sqrt(variance / n)
    corrected = dm * np.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    return float(corrected), float(scipy.stats.t.sf(corrected, df=n - 1))


def reference_series_tests(predictions: pd.DataFrame, model: str, select_by: str,
                           h: int) -> pd.DataFrame:
    """Per series, plain pandas: pair the model's rows with the mean baseline's on (origin,
    period, series), take d = baseline loss − model loss, order by origin then period (as
    monthly periods, not as text) and apply ``reference_dm``. Index: series; columns: n,
    statistic, p_value, d (the ordered differences)."""
    keys = ["origin", "period", "series"]
    base = predictions.loc[predictions["model"] == "mean_baseline", keys + ["actual", "prediction"]]
    own = predictions.loc[predictions["model"] == model, keys + ["prediction"]]
    both = base.merge(own, on=keys, how="inner", suffixes=("_baseline", "_model"))
    power = 2 if select_by == "rmse" else 1
    both["d"] = ((both["prediction_baseline"] - both["actual"]).abs() ** power
                 - (both["prediction_model"] - both["actual"]).abs() ** power)
    both["origin_month"] = pd.PeriodIndex(both["origin"], freq="M")
    both["period_month"] = pd.PeriodIndex(both["period"], freq="M")
    rows = {}
    for name, group in both.groupby("series"):
        d = group.sort_values(["origin_month", "period_month"])["d"].to_numpy()
        statistic, p_value = reference_dm(d, h)
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
# 2020-06 (30 origins), horizon 3 and step 1, so the per-series test allows for
# h = ceil(3 / 1) = 3 lags (autocovariances at lags 1 and 2 count). Models mean_baseline, ols
# and ols_per_series. Actuals are whole numbers (so the fixed errors below are exact in
# floating point). Each series is scored at some origins, periods 1-3 ahead of each, so
# n = rows = origins × 3, except where said:
#   long    origins 0-29 (n = 90)  errors AR(1) in row order (origin, then period), φ = 0.6,
#   mid     origins 8-21 (n = 42)  sd 3 for the baseline, 2.5 for ols, 2 for ols_per_series;
#   late    origins 25-29 (n = 15) each model its own draw
#   three   origin 29 (n = 3)      AR(1) as above; n = h makes the HLN factor 0: DM* = 0, p = 0.5
#   two     origin 29, periods 1-2 (n = 2): too few, NaN
#   tie     origins 0-9 (n = 30)   ols predicts exactly the baseline: every d = 0, NaN and p = 1;
#                                  ols_per_series AR(1)
#   steady  origins 0-9            baseline error +2, ols error −1, ols_per_series error +3: every
#                                  d is the same (zero variance): +inf, p = 0 for ols, −inf, p = 1
#                                  for ols_per_series
#   wobble  origins 0-9            baseline error 3, ols errors 1.5, 4.5, 1.5 at 1, 2, 3 months
#                                  ahead: d repeats every 3 rows, so the long-run variance at
#                                  h = 3 is negative and castline falls back to γ̂_0;
#                                  ols_per_series AR(1)
# The rows are shuffled, so the order has to come from origin and period.
PANEL_ORIGINS = {"long": range(0, 30), "mid": range(8, 22), "late": range(25, 30),
                 "three": range(29, 30), "two": range(29, 30), "tie": range(0, 10),
                 "steady": range(0, 10), "wobble": range(0, 10)}
PANEL_LAGS = 3   # ceil(horizon 3 / step 1)


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
                "mase_scale": rng.uniform(1, 3, size), "prediction_se": np.nan, "df_resid": np.nan}))
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
def test_series_csv_tests_equal_the_published_formula_on_a_simulated_panel(select_by, tmp_path):
    # Reference: reference_dm (Diebold & Mariano 1995; Harvey, Leybourne & Newbold 1997),
    # per series with pandas groupby. Castline: evaluate's by_series table, written to
    # series.csv as the publish stage writes it (write_csv) and read back.
    predictions = simulated_panel()
    evaluation = evaluate(Spec(select_by=select_by), backtest_of(predictions))
    write_csv(evaluation.by_series, tmp_path / "series.csv")
    written = pd.read_csv(tmp_path / "series.csv").set_index(["model", "series"])
    assert written.loc["mean_baseline", "p_value"].isna().all()
    for model in ("ols", "ols_per_series"):
        expected = reference_series_tests(predictions, model, select_by, PANEL_LAGS)
        assert_equal_to_reference(written.loc[model], expected)
        assert_equal_to_reference(evaluation.by_series.set_index(["model", "series"]).loc[model],
                                  expected)
    # The series the design puts there, with castline's documented outcomes.
    table = written.loc["ols"]
    assert table.loc["long", "test_n"] == 90 and table.loc["mid", "test_n"] == 42
    assert np.isnan(table.loc["two", "p_value"]) and np.isnan(table.loc["two", "test_statistic"])
    assert table.loc["three", "test_statistic"] == 0 and table.loc["three", "p_value"] == 0.5
    assert np.isnan(table.loc["tie", "test_statistic"]) and table.loc["tie", "p_value"] == 1.0
    assert table.loc["steady", "test_statistic"] == np.inf and table.loc["steady", "p_value"] == 0.0
    steady = written.loc[("ols_per_series", "steady")]
    assert steady["test_statistic"] == -np.inf and steady["p_value"] == 1.0
    wobble = reference_series_tests(predictions, "ols", select_by, PANEL_LAGS).loc["wobble", "d"]
    assert long_run_variance(wobble, PANEL_LAGS) < 0 < long_run_variance(wobble, 1)
    assert 0 < table.loc["wobble", "p_value"] < 1
    # The lags matter on this panel: with h = 1 the reference disagrees with castline.
    plain = reference_series_tests(predictions, "ols", select_by, 1)
    assert not np.isclose(plain.loc["long", "p_value"], table.loc["long", "p_value"], rtol=1e-6)


@pytest.mark.parametrize("select_by", ["mae", "rmse"])
def test_batched_test_on_the_panel_equals_the_published_formula(select_by):
    # diebold_mariano_by_group on the panel's differences, series side by side (lags must stop at
    # a series' edge), against reference_dm per series.
    expected = reference_series_tests(simulated_panel(seed=7), "ols_per_series", select_by, PANEL_LAGS)
    sizes = expected["n"].to_numpy(int)
    starts = np.r_[0, np.cumsum(sizes)[:-1]]
    statistic, p_value = diebold_mariano_by_group(np.concatenate(expected["d"].to_list()), starts,
                                                  sizes, PANEL_LAGS)
    got = pd.DataFrame({"test_n": sizes, "test_statistic": statistic, "p_value": p_value},
                       index=expected.index)
    assert_equal_to_reference(got, expected)


def test_row_order_does_not_change_the_per_series_tests():
    predictions = hand_made(seed=4)
    shuffled = predictions.sample(frac=1, random_state=7).reset_index(drop=True)
    a = series_tests(predictions, backtest_of(predictions), "mae").set_index(["model", "series"])
    b = series_tests(shuffled, backtest_of(shuffled), "mae").set_index(["model", "series"])
    pd.testing.assert_frame_equal(a.sort_index(), b.sort_index())


def test_one_series_formed_by_a_pivot_equals_the_published_formula():
    predictions = hand_made(seed=5)
    got = series_tests(predictions, backtest_of(predictions), "mae").set_index(["model", "series"])
    rows = predictions[predictions["series"] == "c"]
    wide = rows.pivot(index=["origin", "period"], columns="model", values="prediction").sort_index()
    actual = rows[rows["model"] == "mean_baseline"].set_index(["origin", "period"])["actual"].sort_index()
    d = ((wide["mean_baseline"] - actual).abs() - (wide["ols_per_series"] - actual).abs()).to_numpy()
    assert len(d) == 18   # six origins, three months each
    statistic, p_value = reference_dm(d, 3)   # Diebold & Mariano 1995; Harvey et al. 1997
    assert got.loc[("ols_per_series", "c"), "test_statistic"] == pytest.approx(statistic, rel=1e-10)
    assert got.loc[("ols_per_series", "c"), "p_value"] == pytest.approx(p_value, rel=1e-10)


def t5_upper_tail(t: float) -> float:
    """P(T ≥ t) for Student's t on 5 df, closed form (Abramowitz & Stegun 1964, 26.7.3):
    θ = atan(t / √5), P(|T| ≤ t) = (2/π)(θ + sin θ (cos θ + (2/3) cos³ θ))."""
    theta = math.atan(t / math.sqrt(5))
    within = 2 / math.pi * (theta + math.sin(theta) * (math.cos(theta) + 2 / 3 * math.cos(theta) ** 3))
    return (1 - within) / 2


def test_batched_test_on_six_differences_worked_by_hand():
    # d = 3, 1, 4, 1, 5, 4 (n = 6): mean 18/6 = 3, centred 0, −2, 1, −2, 2, 1.
    # γ̂_0 = (0 + 4 + 1 + 4 + 4 + 1)/6 = 14/6 = 7/3
    # γ̂_1 = (−2·0 + 1·−2 + −2·1 + 2·−2 + 1·2)/6 = (0 − 2 − 2 − 4 + 2)/6 = −1
    # h = 1: V̂ = 7/3, DM = 3 / sqrt(7/3 / 6) = 3·sqrt(18/7);
    #        HLN factor sqrt((6 + 1 − 2 + 0)/6) = sqrt(5/6), so DM* = 3·sqrt(15/7) ≈ 4.3916
    # h = 2: V̂ = 7/3 + 2·(−1) = 1/3, DM = 3 / sqrt(1/3 / 6) = 3·sqrt(18) = 9·sqrt(2);
    #        HLN factor sqrt((6 + 1 − 4 + 2/6)/6) = sqrt(5/9), so DM* = 3·sqrt(10) ≈ 9.4868
    # p = P(T ≥ DM*) on 5 df (t5_upper_tail): ≈ 0.003539 (h = 1) and ≈ 0.000110 (h = 2).
    # The second group is −d: the statistic changes sign and p becomes 1 − p.
    d = np.array([3.0, 1.0, 4.0, 1.0, 5.0, 4.0])
    for h, by_hand in ((1, 3 * math.sqrt(15 / 7)), (2, 3 * math.sqrt(10))):
        statistic, p_value = diebold_mariano_by_group(np.r_[d, -d], np.array([0, 6]),
                                                      np.array([6, 6]), h)
        assert statistic[0] == pytest.approx(by_hand, rel=1e-13)
        assert statistic[1] == pytest.approx(-by_hand, rel=1e-13)
        assert p_value[0] == pytest.approx(t5_upper_tail(by_hand), rel=1e-10)
        assert p_value[1] == pytest.approx(1 - t5_upper_tail(by_hand), rel=1e-10)
    assert t5_upper_tail(3 * math.sqrt(15 / 7)) == pytest.approx(0.003539, abs=5e-7)
    assert t5_upper_tail(3 * math.sqrt(10)) == pytest.approx(0.000110, abs=5e-7)


@pytest.mark.parametrize("horizon", [1, 2, 3, 5])
def test_many_groups_at_once_equal_the_published_formula(horizon):
    # Groups side by side must not reach into each other (lags stop at a group's edge).
    # Reference: reference_dm per group (Diebold & Mariano 1995; Harvey et al. 1997).
    rng = np.random.default_rng(horizon)
    groups = [rng.normal(0.3, 1, size) for size in rng.integers(1, 30, 60)]
    groups += [np.zeros(7), np.full(6, 0.5), np.full(6, -0.5), np.array([1.0, np.nan, 2.0, 3.0]),
               np.array([5.0, -5.0, 5.0, -5.0])]   # ties, constant gains and losses, a gap
    sizes = np.array([len(g) for g in groups])
    starts = np.r_[0, np.cumsum(sizes)[:-1]]
    statistic, p_value = diebold_mariano_by_group(np.concatenate(groups), starts, sizes, horizon)
    expected = np.array([reference_dm(d, horizon) for d in groups])
    np.testing.assert_allclose(statistic, expected[:, 0], rtol=1e-10, atol=0, equal_nan=True)
    np.testing.assert_allclose(p_value, expected[:, 1], rtol=1e-10, atol=0, equal_nan=True)
    # The documented edge cases: all 0 → NaN, p 1; constant gain → +inf, p 0; loss → −inf, p 1.
    assert np.isnan(statistic[-5]) and p_value[-5] == 1.0
    assert statistic[-4] == np.inf and p_value[-4] == 0.0
    assert statistic[-3] == -np.inf and p_value[-3] == 1.0


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
    # One origin, twelve months ahead: the differences are treated as independent (h = 1).
    predictions = hand_made(seed=8, origins=1, horizon=12)
    got = series_tests(predictions, backtest_of(predictions, horizon=12, scheme="holdout"), "mae")
    got = got[got["model"] == "ols"].set_index("series")
    expected = reference_series_tests(predictions, "ols", "mae", 1)
    assert_equal_to_reference(got, expected)
    assert got.loc["d", "test_n"] == 12
    # With the twelve lags a rolling origin would allow, the answer would differ.
    lagged = reference_series_tests(predictions, "ols", "mae", 12)
    assert not np.isclose(lagged.loc["d", "p_value"], got.loc["d", "p_value"], rtol=1e-6)


def test_summary_of_a_run_with_only_the_mean_baseline_is_empty():
    by_series = pd.DataFrame({"model": ["mean_baseline"], "series": ["a"], "skill_vs_mean": [0.0],
                              "beats": [False], "beats_significantly": [False]})
    assert series_summary(by_series).empty
