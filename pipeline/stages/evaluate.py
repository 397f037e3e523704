"""Evaluate: score the out-of-sample predictions and compare each model with the mean baseline."""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from .. import metrics
from ..spec import BASELINE
from .backtest import BacktestResult


@dataclass(frozen=True)
class Evaluation:
    """The comparison table (baseline first), the recommended model and plain notes."""

    table: pd.DataFrame
    recommended: str
    verdict: str
    notes: list[str] = field(default_factory=list)


def score(actual, predicted) -> dict[str, float]:
    """Return every headline metric of one set of predictions."""
    mape_value, zeros = metrics.mape(actual, predicted)
    return {
        "n": len(actual),
        "mae": metrics.mae(actual, predicted),
        "rmse": metrics.rmse(actual, predicted),
        "mape": mape_value,
        "mape_rows_left_out": zeros,
        "bias": metrics.bias(actual, predicted),
    }


def evaluate(backtest: BacktestResult) -> Evaluation:
    """Return the metrics of each model and the skill of each against the mean baseline."""
    rows = []
    for model, group in backtest.predictions.groupby("model", sort=False):
        rows.append({"model": model, **score(group["actual"], group["prediction"])})
    table = pd.DataFrame(rows)
    baseline_mae = float(table.loc[table["model"] == BASELINE, "mae"].iloc[0])
    table["skill_vs_mean"] = [metrics.skill(m, baseline_mae) for m in table["mae"]]
    notes = []
    for row in table.itertuples():
        if row.mape_rows_left_out:
            notes.append(f"{row.model}: MAPE leaves out {row.mape_rows_left_out} rows whose actual "
                         "is 0 (a percentage error is undefined there)")
    # A model must beat the baseline by more than rounding to be recommended over it.
    contenders = table[(table["model"] == BASELINE) | (table["mae"] < baseline_mae * (1 - 1e-9))]
    best = contenders.sort_values("mae", kind="stable").iloc[0]
    recommended = str(best["model"])
    if recommended == BASELINE:
        verdict = ("No model beats the mean baseline out of sample: the plain average of each "
                   "series' history is as good a forecast here.")
    else:
        verdict = (f"{recommended} beats the mean baseline out of sample: its MAE is "
                   f"{best['skill_vs_mean']:.1%} lower ({best['mae']:.4g} against {baseline_mae:.4g}).")
    return Evaluation(table=table, recommended=recommended, verdict=verdict, notes=notes)
