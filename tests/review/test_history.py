"""pipeline/review/history.py: every run of a spec, its metrics over time and how its forecasts
turned out.

Plumbing on the tiny invented runs (conftest's tiny_runs: three runs in one ledger). Every
expected figure is computed here with pandas from the files each run wrote (metrics.json,
forecast.csv) and the data each run read, never taken from the ledger.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from pipeline.record.ledger import reading
from pipeline.review.history import metrics_history, realised_history, realised_per_run, recent_runs


@pytest.fixture(scope="module")
def tables(tiny_runs):
    _, ledger_file, runs = tiny_runs
    with reading(ledger_file) as conn:
        return metrics_history(conn, "tiny"), realised_history(conn, "tiny"), \
            metrics_history(conn, "another-spec"), runs, realised_per_run(conn, "tiny")


def run_metrics(result) -> pd.DataFrame:
    document = json.loads((result.folder.path / "metrics.json").read_text(encoding="utf-8"))
    return pd.DataFrame(document["models"]).set_index("model"), document["recommended"]


def test_every_run_and_model_oldest_first_with_the_metrics_its_folder_holds(tables):
    history, _, _, runs, _ = tables
    assert list(history["run_id"].drop_duplicates()) == [r.folder.run_id for r, _ in runs]
    for result, _ in runs:
        own = history[history["run_id"] == result.folder.run_id].set_index("model")
        written, recommended = run_metrics(result)
        assert sorted(own.index) == sorted(written.index)
        for metric in ("n", "mae", "rmse", "skill_vs_mean"):
            np.testing.assert_allclose(own[metric].astype(float), written.loc[own.index, metric].astype(float))
        assert own["recommended"].to_dict() == {m: m == recommended for m in own.index}


def test_the_change_from_the_run_before(tables):
    history, _, _, runs, _ = tables
    for model in history["model"].unique():
        own = history[history["model"] == model]
        for metric in ("mae", "rmse", "skill_vs_mean"):
            # pandas: each run's value minus the previous run's (none before the first run)
            written = [run_metrics(r)[0].loc[model, metric] for r, _ in runs]
            expected = [np.nan] + [b - a for a, b in zip(written, written[1:])]
            np.testing.assert_allclose(own[f"{metric}_change"].astype(float), expected)


def test_another_specs_name_finds_none_of_these_runs(tables):
    _, _, other, _, _ = tables
    assert other.empty


def test_realised_mae_per_earlier_run_and_months_ahead(tables):
    _, realised, _, runs, _ = tables
    (first, _), (_, _), (third, latest_data) = runs
    # Only the first run has forecasts whose months now have actuals.
    assert set(realised["forecast_run_id"]) == {first.folder.run_id}
    forecast = pd.read_csv(first.folder.path / "forecast.csv")
    actual = latest_data.assign(period=latest_data["month"].str[:7])[["period", "y"]]
    expected = forecast.merge(actual, on="period").assign(
        error=lambda t: t["forecast"] - t["y"])           # pandas, against the latest actuals
    for row in realised.itertuples():
        own = expected[(expected["model"] == row.model) & (expected["horizon"] == row.horizon)]
        assert row.n == len(own) == 1
        assert row.realised_mae == pytest.approx(own["error"].abs().mean())
        assert row.realised_bias == pytest.approx(own["error"].mean())


def test_the_revised_month_is_read_from_its_latest_score(tables):
    _, realised, _, runs, _ = tables
    before, latest_data = runs[1][1], runs[2][1]
    revised = latest_data.set_index("month")["y"] - before.set_index("month")["y"]
    assert revised.loc["2022-02-01"] == pytest.approx(5)        # the fixture's revision
    forecast = pd.read_csv(runs[0][0].folder.path / "forecast.csv")
    # 2022-02 is two months ahead of the first run's last actual
    at_two = forecast[forecast["period"] == "2022-02"].set_index("model")["forecast"]
    shown = realised[realised["horizon"] == 2].set_index("model")
    for model, value in at_two.items():
        assert shown.loc[model, "realised_bias"] == pytest.approx(value - latest_data.set_index("month")
                                                                  .loc["2022-02-01", "y"])


def test_scored_through_is_the_last_month_of_the_newest_run_that_scored(tables):
    _, realised, _, runs, _ = tables
    assert set(realised["scored_through"]) == {str(runs[2][0].data.last_period)}
    recommended = run_metrics(runs[0][0])[1]
    assert realised.set_index("model")["recommended"].groupby(level=0).first().to_dict() == \
        {m: m == recommended for m in realised["model"].unique()}


def test_realised_per_run_pools_each_models_months_ahead(tables):
    _, realised, _, runs, per_run = tables
    (first, _), (_, _), (third, latest_data) = runs
    assert set(per_run["forecast_run_id"]) == {first.folder.run_id}
    forecast = pd.read_csv(first.folder.path / "forecast.csv")
    actual = latest_data.assign(period=latest_data["month"].str[:7])[["period", "y"]]
    expected = forecast.merge(actual, on="period").assign(
        error=lambda t: t["forecast"] - t["y"])           # pandas, against the latest actuals
    assert sorted(per_run["model"]) == sorted(expected["model"].unique())
    for row in per_run.itertuples():
        own = expected[expected["model"] == row.model]
        assert row.n == len(own) == 3 and row.months_ahead == "1–3"
        assert row.realised_mae == pytest.approx(own["error"].abs().mean())
        assert row.realised_bias == pytest.approx(own["error"].mean())
        # the expected MAE: the mean of the per-months-ahead ones over the same forecasts
        assert row.expected_mae == pytest.approx(realised[realised["model"] == row.model]["expected_mae"].mean())
        assert row.last_period == str(first.data.last_period)
        assert row.scored_through == str(third.data.last_period)
    recommended = run_metrics(first)[1]
    assert per_run.set_index("model")["recommended"].to_dict() == {m: m == recommended for m in per_run["model"]}


def test_recent_runs_keeps_the_last_runs_and_one_model_each(tables):
    history, _, _, runs, _ = tables
    ids = [r.folder.run_id for r, _ in runs]
    recent = recent_runs(history, 2)
    assert list(recent["run_id"]) == ids[-2:]
    assert list(recent["model"]) == [run_metrics(r)[1] for r, _ in runs[-2:]]
    assert list(recent_runs(history, 2, "mean_baseline")["model"]) == ["mean_baseline"] * 2
    assert list(recent_runs(history, 10)["run_id"]) == ids
