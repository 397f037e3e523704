"""A quarterly forecast, whole runs against an independent statsmodels loop.

The data is statsmodels.datasets.macrodata (US quarterly macroeconomic series,
1959Q1-2009Q3, shipped with statsmodels): real personal consumption (``realcons``),
each quarter given by its first day. The spec asks for a trend plus quarter dummies,
20 rolling origins and a horizon of 4 quarters. Every number castline reports for
the backtest is recomputed here with numpy and statsmodels alone, window by window.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from conftest import run_cli, run_spec

ORIGINS, HORIZON = 20, 4


def macrodata() -> pd.DataFrame:
    """Return statsmodels' quarterly macrodata with the quarter's first day as the date."""
    data = sm.datasets.macrodata.load_pandas().data
    quarters = pd.PeriodIndex.from_fields(year=data["year"].astype(int), quarter=data["quarter"].astype(int),
                                          freq="Q")
    return pd.DataFrame({"quarter_start": quarters.start_time.strftime("%Y-%m-%d"),
                         "realcons": data["realcons"].to_numpy(float)})


@pytest.fixture(scope="module")
def quarterly_run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("quarterly")
    macrodata().to_csv(folder / "macro.csv", index=False)
    spec = {"name": "realcons-by-quarter",
            "input": {"file": "macro.csv", "date_column": "quarter_start", "period": "quarter"},
            "target": "realcons",
            "drivers": {"calendar": {"trend": True, "season": "dummies"}},
            "models": ["ols"],
            "validation": {"method": "rolling_origin", "horizon": HORIZON, "origins": ORIGINS},
            "forecast": {"periods": HORIZON},
            "output": {"folder": "out"}}
    return run_spec(folder, spec)


def independent_predictions() -> pd.DataFrame:
    """Return every origin's predictions by plain numpy/statsmodels: expanding windows from
    the first quarter, the 20 latest origins that leave 4 quarters to predict."""
    data = macrodata()
    y = data["realcons"].to_numpy(float)
    quarters = pd.PeriodIndex(pd.to_datetime(data["quarter_start"]), freq="Q")
    n = len(y)
    rows = []
    for origin in range(n - HORIZON - ORIGINS, n - HORIZON):
        train = np.arange(origin + 1)
        test = np.arange(origin + 1, origin + 1 + HORIZON)

        def design(positions):
            q = quarters[positions].quarter.to_numpy()
            return np.column_stack([np.ones(len(positions)), positions.astype(float),   # trend from 0
                                    *[(q == k).astype(float) for k in (2, 3, 4)]])

        ols = sm.OLS(y[train], design(train)).fit().predict(design(test))
        tq = quarters[train].quarter.to_numpy()
        for step, at in enumerate(test):
            same = train[tq == quarters[at].quarter]
            predictions = {
                "ols": ols[step],
                "mean_baseline": y[train].mean(),
                "calendar_month_mean": y[same].mean(),          # the same quarter's mean
                "seasonal_naive": y[same[-1]],                   # the same quarter last year
                "last_value": y[train[-1]],
                "trailing_mean": y[train[-4:]].mean(),           # the last 4 quarters
            }
            rows += [{"origin": str(quarters[origin]), "period": str(quarters[at]), "horizon": step + 1,
                      "model": model, "expected": value, "actual": y[at]}
                     for model, value in predictions.items()]
    return pd.DataFrame(rows)


def test_every_prediction_equals_the_independent_loop(quarterly_run):
    got = pd.read_csv(quarterly_run / "predictions.csv", dtype={"origin": str, "period": str})
    expected = independent_predictions()
    merged = got.merge(expected, on=["origin", "period", "model"], validate="1:1")
    assert len(merged) == len(expected) == len(got) == ORIGINS * HORIZON * 6
    np.testing.assert_array_equal(merged["horizon_x"], merged["horizon_y"])
    np.testing.assert_allclose(merged["prediction"], merged["expected"], rtol=1e-9, atol=0)
    np.testing.assert_array_equal(merged["actual_x"], merged["actual_y"])


def test_every_mae_equals_the_independent_loop(quarterly_run):
    metrics = json.loads((quarterly_run / "metrics.json").read_text())
    expected = independent_predictions()
    maes = (expected["expected"] - expected["actual"]).abs().groupby(expected["model"]).mean()
    got = {entry["model"]: entry["mae"] for entry in metrics["models"]}
    assert set(got) == set(maes.index)
    for model, mae in maes.items():
        assert got[model] == pytest.approx(mae, rel=1e-9), model


def test_the_forecast_and_the_terms_count_quarters(quarterly_run):
    forecast = pd.read_csv(quarterly_run / "forecast.csv", dtype={"period": str})
    ols = forecast[forecast["model"] == "ols"]
    # macrodata ends in 2009Q3; a year of quarters follows it.
    assert ols["period"].tolist() == ["2009Q4", "2010Q1", "2010Q2", "2010Q3"]
    terms = pd.read_csv(quarterly_run / "coefficients.csv")
    ols_terms = terms.loc[terms["model"] == "ols", "term"].tolist()
    assert ols_terms == ["intercept", "quarters since 1959Q1", "quarter: Q2", "quarter: Q3", "quarter: Q4"]
    # The final fit on all history is statsmodels' on the same design.
    data = macrodata()
    quarters = pd.PeriodIndex(pd.to_datetime(data["quarter_start"]), freq="Q").quarter.to_numpy()
    positions = np.arange(len(data), dtype=float)
    design = np.column_stack([np.ones(len(data)), positions, *[(quarters == k).astype(float) for k in (2, 3, 4)]])
    reference = sm.OLS(data["realcons"].to_numpy(float), design).fit()
    estimates = terms.loc[terms["model"] == "ols", "estimate"].to_numpy(float)
    np.testing.assert_allclose(estimates, reference.params, rtol=1e-9)
    future = np.column_stack([np.ones(4), np.arange(len(data), len(data) + 4, dtype=float),
                              *[(np.array([4, 1, 2, 3]) == k).astype(float) for k in (2, 3, 4)]])
    np.testing.assert_allclose(ols["forecast"].to_numpy(float), reference.predict(future), rtol=1e-9)


def test_history_and_compare_speak_of_quarters(quarterly_run):
    # A second run of the same spec and data: the console's review tables name quarters.
    folder = quarterly_run.parent.parent
    code, _, err = run_cli(["run", str(folder / "spec.yaml")])
    assert code == 0, err
    (second,) = [path for path in quarterly_run.parent.iterdir() if path.is_dir() and path != quarterly_run]
    code, out, err = run_cli(["compare", str(quarterly_run), str(second)])
    assert code == 0, err
    assert "no quarter's rows changed" in out
    assert "that of the mean of the training quarters):" in out
    assert "same quarter last year" in out and "trailing 4-quarter mean" in out
    assert "month" not in out
    code, out, err = run_cli(["history", str(folder / "spec.yaml")])
    assert code == 0, err
    assert "last actual quarter" in out and "2009Q3" in out
    assert "month" not in out
