"""On a random walk, the answer must not rank a trend model above the best simple rule.

Simulation (fixed seed 1931), stated design: three series, each a Gaussian random walk
y_t = y_{t−1} + N(0, 5²) from 100, 72 months of actuals. Spec: OLS on a linear trend and
the series (one-hot), rolling origin with horizon 12 from 36 months (25 origins), MAE.
The last value is the best forecast of a random walk; the simple rules castline always
fits include it. Counted: replications where the answer says OLS beats the best simple
rule at the 5% level (Holm-adjusted). The bar is at most 7% of 500 replications; about
four minutes, so it runs in make simulate. A three-replication version runs in make test
so the code path does not rot.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml

from pipeline.runner import check
from pipeline.spec import load_spec
from pipeline.stages.backtest import run_backtest
from pipeline.stages.evaluate import evaluate

MONTHS = 72
SERIES = ("East", "North", "West")


def write_spec(folder) -> object:
    spec = {"name": "walk", "input": {"file": "walk.csv", "date_column": "month", "period": "month",
                                      "series": ["region"]},
            "target": "y", "drivers": {"categorical": [{"column": "region"}],
                                       "calendar": {"trend": True}},
            "validation": {"method": "rolling_origin", "horizon": 12, "min_train_periods": 36},
            "models": ["ols"], "output": {"folder": "runs"}}
    path = folder / "walk.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def write_walk(folder, rng) -> None:
    months = pd.period_range("2019-01", periods=MONTHS, freq="M").to_timestamp().strftime("%Y-%m-%d")
    frames = [pd.DataFrame({"month": months, "region": name,
                            "y": (100 + np.cumsum(rng.normal(0, 5, MONTHS))).round(3)})
              for name in SERIES]
    pd.concat(frames, ignore_index=True).to_csv(folder / "walk.csv", index=False)


def answers(folder, replications: int, seed: int = 1931) -> list:
    rng = np.random.default_rng(seed)
    write_walk(folder, rng)
    spec = load_spec(write_spec(folder))
    found = []
    for replication in range(replications):
        if replication:
            write_walk(folder, rng)
        evaluation = evaluate(spec, run_backtest(spec, check(spec)))
        found.append(evaluation)
    return found


def beats_best_rule(evaluation) -> bool:
    """Whether the answer says OLS beats the best simple rule at the 5% level."""
    return evaluation.recommended == "ols" and evaluation.beats_best_rule


def test_the_random_walk_design_runs_and_compares_with_the_last_value(tmp_path):
    found = answers(tmp_path, 3, seed=5)
    for evaluation in found:
        models = set(evaluation.table["model"])
        assert {"ols", "last_value", "calendar_month_mean", "trailing_mean", "seasonal_naive"} <= models
        assert evaluation.tested
        assert "p_best_rule_holm" in evaluation.table.columns
        # The trend model measured against the best rule, in the answer's words.
        if evaluation.recommended == "ols" and evaluation.best_rule != "mean_baseline":
            assert "best simple rule" in evaluation.verdict


@pytest.mark.simulation
def test_a_trend_model_rarely_beats_the_best_simple_rule_on_a_random_walk(tmp_path):
    found = answers(tmp_path, 500)
    share = np.mean([beats_best_rule(evaluation) for evaluation in found])
    best_rules = pd.Series([evaluation.best_rule for evaluation in found]).value_counts()
    print(f"OLS beats the best simple rule in {share:.1%}; best rules: {best_rules.to_dict()}")
    assert share <= 0.07
