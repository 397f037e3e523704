"""Evaluate: score the out-of-sample predictions and compare each model with the mean baseline.

Metrics come overall and per origin, horizon and series; skill is measured
against the mean baseline, and the Diebold–Mariano test (with the small-sample
correction) says whether a model's advantage is more than luck.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .. import metrics
from ..intervals import coverage
from ..significance import diebold_mariano
from ..spec import BASELINE, Spec
from .backtest import BacktestResult

METRIC_COLUMNS = ["n", "mae", "rmse", "mape", "smape", "wape", "mase", "r2", "bias"]
LOWER_IS_BETTER = {"mae", "rmse", "mape", "smape", "wape", "mase"}
LABELS = {"mean_baseline": "the mean baseline", "last_value": "last value",
          "seasonal_naive": "same month last year", "drift": "drift", "ols": "OLS",
          "ols_per_series": "OLS per series",
          "ridge": "ridge", "lasso": "lasso", "elastic_net": "elastic net", "huber": "Huber"}


@dataclass(frozen=True)
class Evaluation:
    """The comparison table (mean baseline first), the breakdowns, and the answer in words."""

    table: pd.DataFrame
    by_origin: pd.DataFrame
    by_horizon: pd.DataFrame
    by_series: pd.DataFrame
    coverage: pd.DataFrame
    recommended: str
    beats_baseline: bool
    verdict: str
    select_by: str
    notes: list[str] = field(default_factory=list)


def score(actual, predicted, scale=None) -> dict[str, float]:
    """Return every metric of one set of predictions."""
    actual = np.asarray(actual, float)
    predicted = np.asarray(predicted, float)
    mape_value, zeros = metrics.mape(actual, predicted)
    smape_value, _ = metrics.smape(actual, predicted)
    return {
        "n": len(actual),
        "mae": metrics.mae(actual, predicted),
        "rmse": metrics.rmse(actual, predicted),
        "mape": mape_value,
        "smape": smape_value,
        "wape": metrics.wape(actual, predicted),
        "mase": metrics.mase(actual, predicted, scale) if scale is not None else float("nan"),
        "r2": metrics.r2_out_of_sample(actual, predicted) if len(actual) > 1 else float("nan"),
        "bias": metrics.bias(actual, predicted),
        "mape_rows_left_out": zeros,
    }


def _scores_by(predictions: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    rows = []
    for values, group in predictions.groupby(keys, sort=False):
        values = values if isinstance(values, tuple) else (values,)
        rows.append({**dict(zip(keys, values)),
                     **score(group["actual"], group["prediction"], group["mase_scale"])})
    return pd.DataFrame(rows)


def _with_skill(table: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """Add skill against the mean baseline: 1 − MAE_model / MAE_baseline, within each key."""
    base = table[table["model"] == BASELINE].set_index(keys)["mae"] if keys else \
        table.loc[table["model"] == BASELINE, "mae"]
    if keys:
        reference = table.set_index(keys).index.map(base)
    else:
        reference = np.repeat(float(base.iloc[0]), len(table))
    table = table.copy()
    table["skill_vs_mean"] = [metrics.skill(m, r) for m, r in zip(table["mae"], reference)]
    return table


def _loss(errors: np.ndarray, select_by: str) -> np.ndarray:
    return errors ** 2 if select_by == "rmse" else np.abs(errors)


def loss_differences(predictions: pd.DataFrame, model: str, backtest: BacktestResult,
                     select_by: str) -> tuple[np.ndarray, int, str]:
    """Return the series of (baseline loss − model loss), the lag horizon and how it was formed."""
    pair = predictions[predictions["model"].isin([BASELINE, model])]
    wide = pair.pivot_table(index=["origin", "period", "series"], columns="model",
                            values=["prediction", "actual"], aggfunc="first")
    actual = wide[("actual", BASELINE)].to_numpy()
    difference = (_loss(wide[("prediction", BASELINE)].to_numpy() - actual, select_by)
                  - _loss(wide[("prediction", model)].to_numpy() - actual, select_by))
    frame = pd.DataFrame({"d": difference}, index=wide.index).reset_index()
    origins = frame["origin"].nunique()
    if backtest.scheme == "rolling_origin" and origins >= 3:
        series = frame.groupby("origin", sort=True)["d"].mean()
        step = getattr(backtest, "step", 1) or 1
        lags = max(1, math.ceil(backtest.horizon / step))
        return series.to_numpy(), lags, f"the mean loss at each of {origins} origins"
    if backtest.scheme in ("holdout", "rolling_origin"):
        series = frame.groupby("period", sort=True)["d"].mean()
        return series.to_numpy(), 1, (f"the mean loss in each of the {len(series)} months scored "
                                      "(treated as independent; rolling origins give a sounder test)")
    return frame["d"].to_numpy(), 1, f"the loss of each of the {len(frame)} rows scored"


def _p_text(p: float) -> str:
    if not np.isfinite(p):
        return "p not available"
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def evaluate(spec: Spec, backtest: BacktestResult) -> Evaluation:
    """Return the metrics of each model, its skill against the mean baseline, and the answer."""
    predictions = backtest.predictions
    select_by = spec.select_by
    level = spec.significance_level
    table = _with_skill(_scores_by(predictions, ["model"]), [])
    statistics, p_values, readings, notes = [], [], [], list(backtest.notes)
    how = ""
    for model in table["model"]:
        if model == BASELINE:
            statistics.append(np.nan)
            p_values.append(np.nan)
            readings.append("the reference")
            continue
        differences, lags, how = loss_differences(predictions, model, backtest, select_by)
        test = diebold_mariano(differences, np.zeros_like(differences), horizon=lags) \
            if len(differences) else None
        statistic = test.statistic if test else np.nan
        p = test.p_value if test else np.nan
        statistics.append(statistic)
        p_values.append(p)
        readings.append(f"beats the mean baseline ({_p_text(p)})" if np.isfinite(p) and p < level
                        else f"no better than the mean baseline ({_p_text(p)})")
    table["test_statistic"] = statistics
    table["p_value"] = p_values
    table["against_mean"] = readings
    if how:
        notes.append(f"Significance: Diebold–Mariano test with the Harvey–Leybourne–Newbold "
                     f"correction, one-sided, on {how}; loss = "
                     f"{'squared' if select_by == 'rmse' else 'absolute'} error.")
    for row in table.itertuples():
        if row.mape_rows_left_out:
            notes.append(f"{row.model}: MAPE leaves out {row.mape_rows_left_out} rows whose actual "
                         "is 0 (a percentage error is undefined there)")

    baseline_value = float(table.loc[table["model"] == BASELINE, select_by].iloc[0])
    sign = 1 if select_by in LOWER_IS_BETTER else -1
    # A model must beat the baseline by more than rounding to be preferred to it.
    contenders = table[(table["model"] == BASELINE)
                       | (sign * table[select_by] < sign * baseline_value - 1e-9 * abs(baseline_value))]
    contenders = contenders[contenders[select_by].notna()]
    best = contenders.sort_values(select_by, ascending=sign > 0, kind="stable").iloc[0]
    recommended = str(best["model"])
    metric = select_by.upper()
    if recommended == BASELINE:
        beats = False
        verdict = (f"No model beats the mean baseline out of sample on {metric}: the plain average "
                   "of each series' history is as good a forecast here.")
    else:
        p = float(best["p_value"])
        beats = bool(np.isfinite(p) and p < level)
        lower = 1 - best[select_by] / baseline_value if baseline_value else np.nan
        name = LABELS.get(recommended, recommended)
        if beats:
            verdict = (f"{name} beats the mean baseline out of sample ({_p_text(p)}): its {metric} is "
                       f"{lower:.1%} lower ({best[select_by]:.4g} against {baseline_value:.4g}).")
        else:
            verdict = (f"{name} has the lowest {metric} ({best[select_by]:.4g} against "
                       f"{baseline_value:.4g} for the mean baseline), but it is no better than the "
                       f"mean baseline by the significance test ({_p_text(p)}): the difference "
                       "may be luck.")
    time_ordered = backtest.scheme in ("holdout", "rolling_origin")
    by_origin = _with_skill(_scores_by(predictions, ["model", "origin"]), ["origin"])
    by_horizon = _with_skill(_scores_by(predictions, ["model", "horizon"]), ["horizon"]) \
        if time_ordered else pd.DataFrame()
    by_series = _with_skill(_scores_by(predictions, ["model", "series"]), ["series"])
    return Evaluation(table=table, by_origin=by_origin, by_horizon=by_horizon, by_series=by_series,
                      coverage=coverage(predictions),
                      recommended=recommended, beats_baseline=beats, verdict=verdict,
                      select_by=select_by, notes=notes)
