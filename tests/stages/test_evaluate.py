"""Evaluate stage: the verdict against the mean of the training months, and metrics equal to scikit-learn's.

Simulated data (fixed seeds, written to tmp_path): one panel where the drivers
truly move the target, one where the target is noise around a constant.
References: sklearn.metrics (mean_absolute_error, root_mean_squared_error,
mean_absolute_percentage_error, r2_score), pandas group-bys for the breakdowns
and the MASE scale, and the comparison test composed from independent pieces
(statsmodels, scipy.fft, scipy.stats; see tests/core/test_significance.py for the citations).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.fft
import scipy.stats
import statsmodels.api as sm
import yaml
from sklearn.metrics import (
    mean_absolute_error,
    mean_absolute_percentage_error,
    r2_score,
    root_mean_squared_error,
)

import pipeline
from pipeline.core.columns import PERIOD, SERIES
from pipeline.stages.backtest import run_backtest
from pipeline.stages.evaluate import evaluate

ROLLING = {"method": "rolling_origin", "horizon": 3, "min_train_periods": 24, "origins": 12}


def load(folder: Path, frame: pd.DataFrame, models: list, validation: dict | None = None, **extra):
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": "evaluate-test",
            "input": {"file": "data.csv", "date_column": "month", "series": ["region"]},
            "target": "y",
            "drivers": {"numeric": ["x1", "x2"], "categorical": [{"column": "region"}]},
            "validation": validation or ROLLING, "models": models, **extra,
            "output": {"folder": "reports"}}
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    spec = pipeline.load_spec(path)
    return spec, pipeline.check(spec)


def simulated(seed: int, signal: bool, n_months: int = 60) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    months = pd.date_range("2015-01-01", periods=n_months, freq="MS")
    regions = ["East", "North", "West"]
    frame = pd.DataFrame([(m.strftime("%Y-%m-%d"), r) for m in months for r in regions],
                         columns=["month", "region"])
    n = len(frame)
    frame["x1"] = rng.normal(size=n).round(6)
    frame["x2"] = rng.normal(size=n).round(6)
    level = frame["region"].map({"East": 120.0, "North": 100.0, "West": 80.0})
    if signal:
        frame["y"] = (level + 8 * frame["x1"] - 5 * frame["x2"] + rng.normal(size=n)).round(6)
    else:
        frame["y"] = (100 + 5 * rng.normal(size=n)).round(6)
    return frame


def run(tmp_path, frame, models, **kwargs):
    spec, data = load(tmp_path, frame, models, **kwargs)
    result = run_backtest(spec, data)
    return spec, data, result, evaluate(spec, result)


def reference_test(d):
    """The comparison test composed from its published steps with independent pieces
    (statsmodels OLS for the AR(1) coefficient, scipy.fft.dct for the cosine terms,
    scipy.stats.t), as tests/core/test_significance.py states them."""
    d = np.asarray(d, float)
    n = len(d)
    c = d - d.mean()
    phi = float(sm.OLS(c[1:], c[:-1]).fit().params[0])
    phi = min(max(phi + (1 + 3 * phi) / n, -0.9), 0.9)
    e = c[1:] - phi * c[:-1]
    terms = scipy.fft.dct(e - e.mean(), type=2, norm="ortho")[1:3]
    statistic = d.mean() / math.sqrt(np.mean(terms ** 2) / (1 - phi) ** 2 / n)
    return statistic, float(scipy.stats.t.sf(statistic, df=2))


def test_a_model_that_truly_helps_beats_the_mean_baseline_and_is_recommended(tmp_path):
    _, _, result, evaluation = run(tmp_path, simulated(seed=1, signal=True), ["ols"])
    assert evaluation.recommended == "ols"
    assert evaluation.beats_baseline
    assert "OLS beats the mean of the training months" in evaluation.verdict
    row = evaluation.table.set_index("model").loc["ols"]
    assert row["against_mean"].startswith("beats the mean (Holm p")
    assert row["p_value"] < 0.05 and row["test_statistic"] > 0
    assert row["skill_vs_mean"] > 0.5

    # The test statistic: on the mean absolute-loss difference at each of the 12 origins.
    p = result.predictions
    wide = p.pivot_table(index=["origin", "period", "series"], columns="model", values="prediction")
    actual = p[p["model"] == "mean_baseline"].set_index(["origin", "period", "series"])["actual"]
    diff = (wide["mean_baseline"] - actual).abs() - (wide["ols"] - actual).abs()
    per_origin = diff.groupby(level="origin").mean().sort_index().tolist()
    assert len(per_origin) == 12
    statistic, p_value = reference_test(per_origin)
    assert row["test_statistic"] == pytest.approx(statistic, rel=1e-10)
    assert row["p_value"] == pytest.approx(p_value, rel=1e-8)


@pytest.mark.parametrize("seed", [2, 3])
def test_pure_noise_around_a_constant_is_no_better_than_the_mean_baseline(seed, tmp_path):
    _, _, _, evaluation = run(tmp_path, simulated(seed=seed, signal=False), ["ols", "ridge"])
    assert not evaluation.beats_baseline
    verdict = evaluation.verdict
    assert ("No model or simple rule beats the mean of the training months" in verdict
            or "no better than the mean of the training months" in verdict or "may be luck" in verdict), verdict
    if evaluation.recommended != "mean_baseline":
        assert "may be luck" in verdict
    for model, row in evaluation.table.set_index("model").iterrows():
        if model != "mean_baseline":
            assert row["against_mean"].startswith("no better than the mean (Holm"), row["against_mean"]


def reference_scales(history: pd.DataFrame, origin: str) -> dict[str, float]:
    """In-sample MAE of the seasonal naive forecast (lag 12) per series, over months up to origin."""
    train = history[history[PERIOD] <= pd.Period(origin, freq="M")].sort_values([SERIES, PERIOD])
    lagged = train.groupby(SERIES)["y"].shift(12)
    return (train["y"] - lagged).abs().groupby(train[SERIES]).mean().to_dict()


def test_metrics_in_the_table_equal_sklearn_and_hand_formulas(tmp_path):
    _, data, result, evaluation = run(tmp_path, simulated(seed=4, signal=True),
                                      ["ols", "drift", "seasonal_naive", "huber"])
    p = result.predictions
    for origin, rows in p.groupby("origin"):
        scales = reference_scales(data.history, origin)
        np.testing.assert_allclose(rows["mase_scale"], rows["series"].map(scales), rtol=1e-12)
    table = evaluation.table.set_index("model")
    assert list(table.index)[0] == "mean_baseline"
    # The simple rules are compared whatever models lists.
    assert set(table.index) == {"mean_baseline", "ols", "drift", "seasonal_naive", "huber",
                                "calendar_month_mean", "trailing_mean", "last_value"}
    for model, rows in p.groupby("model"):
        y, f = rows["actual"].to_numpy(), rows["prediction"].to_numpy()
        error = np.abs(f - y)
        got = table.loc[model]
        assert got["n"] == len(y) == 12 * 3 * 3
        assert got["mae"] == pytest.approx(mean_absolute_error(y, f), rel=1e-12)
        assert got["rmse"] == pytest.approx(root_mean_squared_error(y, f), rel=1e-12)
        assert got["mape"] == pytest.approx(mean_absolute_percentage_error(y, f), rel=1e-12)
        # R² out of sample against the forecast of the mean of the training months on the same rows (Campbell &
        # Thompson 2008, R²_OS = 1 − Σ(y − ŷ)² / Σ(y − ȳ_hist)², ȳ_hist the historical mean).
        rows_base = p[p["model"] == "mean_baseline"].set_index(["origin", "period", "series"])
        benchmark = rows_base["prediction"].reindex(
            pd.MultiIndex.from_frame(rows[["origin", "period", "series"]])).to_numpy()
        assert got["r2"] == pytest.approx(1 - np.sum((y - f) ** 2) / np.sum((y - benchmark) ** 2),
                                          rel=1e-12, abs=1e-12)
        # Not R² against the test months' own mean (sklearn's r2_score), unknown when forecasting.
        if model == "mean_baseline":
            assert got["r2"] == 0 and r2_score(y, f) != 0
        assert got["bias"] == pytest.approx(np.mean(f - y), rel=1e-12, abs=1e-12)
        assert got["smape"] == pytest.approx(np.mean(2 * error / (np.abs(y) + np.abs(f))), rel=1e-12)
        assert got["wape"] == pytest.approx(error.sum() / np.abs(y).sum(), rel=1e-12)
        assert got["mase"] == pytest.approx(np.mean(error / rows["mase_scale"].to_numpy()), rel=1e-12)
        base = table.loc["mean_baseline", "mae"]
        assert got["skill_vs_mean"] == pytest.approx(1 - got["mae"] / base, rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("key", ["origin", "horizon", "series"])
def test_breakdowns_carry_skill_against_the_mean_baseline(key, tmp_path):
    _, _, result, evaluation = run(tmp_path, simulated(seed=5, signal=True), ["ols", "last_value"])
    table = getattr(evaluation, f"by_{key}")
    assert {"model", key, "mae", "rmse", "smape", "wape", "mase", "r2", "bias",
            "skill_vs_mean"} <= set(table.columns)
    p = result.predictions
    reference = (p.assign(abs_error=(p["prediction"] - p["actual"]).abs())
                 .groupby(["model", key])["abs_error"].mean().unstack("model"))
    expected_groups = {"origin": 12, "horizon": 3, "series": 3}[key]
    assert len(reference) == expected_groups
    assert len(table) == expected_groups * 6   # the mean, ols and the four simple rules
    for row in table.itertuples():
        mae = reference.loc[getattr(row, key), row.model]
        base = reference.loc[getattr(row, key), "mean_baseline"]
        assert row.mae == pytest.approx(mae, rel=1e-12)
        assert row.skill_vs_mean == pytest.approx(1 - mae / base, rel=1e-12, abs=1e-12)
    assert (table.loc[table["model"] == "mean_baseline", "skill_vs_mean"] == 0).all()
    if key == "horizon":
        assert sorted(table["horizon"].unique()) == [1, 2, 3]


def test_kfold_evaluation_has_no_horizon_breakdown_and_says_so(tmp_path):
    _, _, _, evaluation = run(tmp_path, simulated(seed=6, signal=True), ["ols"],
                              validation={"method": "kfold", "folds": 5, "seed": 1})
    assert evaluation.by_horizon.empty
    assert evaluation.table["mase"].isna().all()
    assert any("k-fold" in note for note in evaluation.notes)
    assert evaluation.recommended == "ols"


# The loss each selection metric averages per row, written out here from its definition.
HAND_LOSS = {
    "mae": lambda y, f, s: np.abs(f - y),
    "rmse": lambda y, f, s: (f - y) ** 2,
    "mape": lambda y, f, s: np.abs((f - y) / y),
    "smape": lambda y, f, s: 2 * np.abs(f - y) / (np.abs(y) + np.abs(f)),
    "mase": lambda y, f, s: np.abs(f - y) / s,
}


@pytest.mark.parametrize("select_by", list(HAND_LOSS))
def test_skill_the_test_and_the_selection_judge_the_one_loss_of_select_by(select_by, tmp_path):
    _, _, result, evaluation = run(tmp_path, simulated(seed=6, signal=True), ["ols", "last_value"],
                                   select_by=select_by)
    table = evaluation.table.set_index("model")
    p = result.predictions
    base = p[p["model"] == "mean_baseline"].reset_index(drop=True)
    for model in ("ols", "last_value"):
        own = p[p["model"] == model].reset_index(drop=True)   # the same rows, in the same order
        # Skill in the select_by metric.
        expected = 1 - table.loc[model, select_by] / table.loc["mean_baseline", select_by]
        assert table.loc[model, "skill_vs_mean"] == pytest.approx(expected, rel=1e-12, abs=1e-12)
        # The test runs on the per-origin mean of (baseline loss − model loss) in that loss.
        y, s = own["actual"].to_numpy(), own["mase_scale"].to_numpy()
        d = (HAND_LOSS[select_by](y, base["prediction"].to_numpy(), s)
             - HAND_LOSS[select_by](y, own["prediction"].to_numpy(), s))
        by_origin = pd.Series(d).groupby(own["origin"]).mean().sort_index().to_numpy()
        statistic, p_value = reference_test(by_origin)
        assert table.loc[model, "test_statistic"] == pytest.approx(statistic, rel=1e-9)
        assert table.loc[model, "p_value"] == pytest.approx(p_value, rel=1e-9)
    assert any(f"the loss of {select_by.upper()}" in note for note in evaluation.notes)
