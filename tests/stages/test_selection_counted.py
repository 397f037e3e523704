"""Selection counted: the answer's p-value accounts for the number of models compared, and
"significantly in X of N series" for the number of series (Holm 1979).

References: statsmodels.stats.multitest.multipletests(method="holm") (an independent
implementation) for the adjusted p-values; a simulation whose design is stated below for the
size of the answer when several candidates are no better than the mean of the training months.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.multitest import multipletests

from pipeline.core.significance import holm
from pipeline.stages.backtest import PREDICTION_COLUMNS, BacktestResult
from pipeline.stages.evaluate import evaluate


class Spec:
    """The settings evaluate reads."""

    select_by = "mae"
    significance_level = 0.05
    input = SimpleNamespace(period="month")


@pytest.mark.parametrize("seed", range(5))
def test_holm_equals_statsmodels_and_leaves_nan_out(seed):
    rng = np.random.default_rng(seed)
    p = rng.uniform(0, 0.2, 12) ** 2
    p[[2, 7]] = np.nan
    expected = np.full(12, np.nan)
    kept = ~np.isnan(p)
    expected[kept] = multipletests(p[kept], method="holm")[1]
    np.testing.assert_allclose(holm(p), expected, rtol=1e-12, equal_nan=True)
    assert np.isnan(holm([np.nan, np.nan])).all()


def _backtest(rng, candidates: int, origins: int = 40, series=("s1",), helps=0.0) -> BacktestResult:
    """Stated design: each series' actual is 100 + N(0, 10²) per origin (horizon 1, one row
    per origin and series); the mean of the training months predicts 100 + N(0, 10²), noise of its own.
    With helps = 0 each candidate does the same, so every candidate is exactly as accurate
    as the mean of the training months (the null); with helps > 0 a candidate predicts the actual plus
    (1 − helps)·N(0, 10²), closer than the baseline."""
    rows = []
    for origin in range(origins):
        label = str(pd.Period("2020-01", "M") + origin)
        for name in series:
            actual = 100 + rng.normal(0, 10)
            models = {"mean_baseline": 100 + rng.normal(0, 10)}
            models.update({f"m{k}": actual + (1 - helps) * rng.normal(0, 10) if helps
                           else 100 + rng.normal(0, 10) for k in range(candidates)})
            for model, predicted in models.items():
                rows.append({"origin": label, "period": str(pd.Period(label, "M") + 1), "horizon": 1,
                             "series": name, "model": model, "actual": actual,
                             "prediction": predicted, "mase_scale": 10.0,
                             "prediction_se": np.nan, "df_resid": np.nan, "centre": np.nan})
    return BacktestResult(predictions=pd.DataFrame(rows)[PREDICTION_COLUMNS], splits=[],
                          scheme="rolling_origin", horizon=1, notes=[], step=1)


def test_the_answers_p_value_is_holm_adjusted_over_the_models_compared():
    evaluation = evaluate(Spec(), _backtest(np.random.default_rng(3), candidates=4, helps=0.5))
    table = evaluation.table.set_index("model")
    raw = table.loc[[f"m{k}" for k in range(4)], "p_value"].to_numpy()
    np.testing.assert_allclose(table.loc[[f"m{k}" for k in range(4)], "p_holm"],
                               multipletests(raw, method="holm")[1], rtol=1e-12)
    assert np.isnan(table.loc["mean_baseline", "p_holm"])
    assert "Holm-adjusted for the 4 models compared" in evaluation.verdict
    # Each reading states the adjusted p-value, not the raw one.
    for model in [f"m{k}" for k in range(4)]:
        adjusted = table.loc[model, "p_holm"]
        # two significant digits, trailing zeros kept ('#'), "p < 0.001" below 0.001
        said = "p < 0.001" if adjusted < 0.001 else f"p = {adjusted:#.2g}"
        assert f"(Holm {said})" in table.loc[model, "against_mean"]


@pytest.mark.simulation
def test_eight_candidates_no_better_than_the_mean_claim_a_win_rarely():
    # Simulation (design in _backtest, helps = 0): K = 8 candidates, 40 origins, 400
    # replications, seed 2024. Without the adjustment the best of eight passes a 5% test
    # about 1 − 0.95⁸ ≈ 34% of the time; counted, the answer claims a win in at most 7%.
    # About six minutes: run by make simulate, not make test.
    rng = np.random.default_rng(2024)
    wins = [evaluate(Spec(), _backtest(rng, candidates=8)).beats_baseline for _ in range(400)]
    assert np.mean(wins) <= 0.07


def test_significantly_in_x_of_n_series_is_holm_adjusted_across_series():
    evaluation = evaluate(Spec(), _backtest(np.random.default_rng(5), candidates=1, origins=30,
                                            series=[f"s{k}" for k in range(20)]))
    rows = evaluation.by_series[evaluation.by_series["model"] == "m0"]
    np.testing.assert_allclose(rows["p_holm"], multipletests(rows["p_value"], method="holm")[1],
                               rtol=1e-12)
    assert (rows["beats_significantly"]
            == (rows["skill_vs_mean"] > 0) & (rows["p_holm"] < 0.05)).all()
