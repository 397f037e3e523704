"""Realised skill end to end: `castline run` again once new actuals have come in, and the track
record compares the earlier recommended forecasts with the forecasts of the mean of the training months.

Plumbing on invented data: every expected figure is computed here with pandas from the files
the runs wrote (forecast.csv, metrics.json) and the data each run read, never from the ledger.
"""

from __future__ import annotations

import json
import sqlite3
from contextlib import closing
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import tiny_data, write_tiny_spec

from pipeline import cli
from pipeline.core.formatting import format_percent


def run_folders(output: Path) -> list[Path]:
    """Return the run folders in the order they were made (their ids begin with the time)."""
    return sorted(p for p in output.iterdir() if p.is_dir() and p.name.startswith("run-"))


def expected_skill(forecast: pd.DataFrame, recommended: str, actuals: pd.DataFrame) -> tuple[float, float, int]:
    """Return the MAE of the recommended model's forecasts and of the mean of the training months' over the
    rows that now have actuals, and how many months; pandas, from the run's own files."""
    scored = forecast.merge(actuals, on=["period", "series"])
    errors = scored.assign(abs_error=(scored["forecast"] - scored["actual"]).abs()).pivot_table(
        index=["period", "series"], columns="model", values="abs_error")
    return (float(errors[recommended].mean()), float(errors["mean_baseline"].mean()),
            int(errors.index.get_level_values("period").nunique()))


def test_a_second_run_records_the_realised_skill_against_the_baselines_own_forecasts(tmp_path, capsys):
    data = tiny_data(regions=("North", "South"))
    assert cli.main(["run", str(write_tiny_spec(tmp_path, data, actuals_to="2021-12"))]) == 0
    assert cli.main(["run", str(write_tiny_spec(tmp_path, data, actuals_to="2022-03"))]) == 0
    capsys.readouterr()
    first, second = run_folders(tmp_path / "runs")
    forecast = pd.read_csv(first / "forecast.csv", dtype={"series": str})
    recommended = json.loads((first / "metrics.json").read_text(encoding="utf-8"))["recommended"]
    read = pd.read_csv(tmp_path / "data.csv").dropna(subset=["y"])
    actuals = pd.DataFrame({"period": read["month"].str[:7], "series": read["region"], "actual": read["y"]})
    model_mae, baseline_mae, months = expected_skill(forecast, recommended, actuals)

    skill = json.loads((second / "track_record.json").read_text(encoding="utf-8"))["realised_skill"]
    assert (skill["months"], skill["forecasts"], skill["runs"], skill["without_baseline"]) == (3, 6, 1, 0)
    assert months == 3
    assert skill["model_mae"] == pytest.approx(model_mae) and skill["baseline_mae"] == pytest.approx(baseline_mae)
    assert skill["skill"] == pytest.approx(1 - model_mae / baseline_mae)
    assert [(r["forecast_run_id"], r["model"]) for r in skill["by_run"]] == [(first.name, recommended)]
    assert f"Realised skill against the forecasts of the mean of the training months: {format_percent(skill['skill'])} over 3 month(s)" \
        in (second / "summary.md").read_text(encoding="utf-8")
    # The mean of the training months' forecasts of every month and series the first run forecast are in
    # the ledger beside the recommended model's.
    with closing(sqlite3.connect(tmp_path / "runs" / "ledger.sqlite")) as conn:
        recorded = pd.read_sql_query("SELECT model, period, series FROM forecasts WHERE run_id = ?", conn,
                                     params=(first.name,))
    rows = {model: set(zip(own["period"], own["series"])) for model, own in recorded.groupby("model")}
    assert rows["mean_baseline"] == rows[recommended] == set(zip(forecast["period"], forecast["series"]))


def broken_spec(folder: Path, frame: pd.DataFrame, actuals_to: str, ahead: int) -> Path:
    """Write sales.csv (sales emptied after `actuals_to`, `ahead` months kept to forecast) and
    its spec; return the spec's path."""
    months = pd.PeriodIndex(pd.to_datetime(frame["month"]), freq="M")
    cut = pd.Period(actuals_to, "M")
    kept = frame[months <= cut + ahead].copy()
    kept.loc[months[months <= cut + ahead] > cut, "sales"] = np.nan
    kept.to_csv(folder / "sales.csv", index=False)
    spec = {"name": "broken", "input": {"file": "sales.csv", "date_column": "month", "as_of": "2026-01-31"},
            "target": "sales", "drivers": {"numeric": ["price"]},
            "validation": {"method": "holdout", "last_periods": 12}, "models": ["ols"],
            "output": {"folder": "runs"}}
    path = folder / "broken.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def test_twelve_realised_months_without_skill_are_warned_about_and_eleven_are_not(tmp_path, capsys):
    # Invented: through 2023 sales follow the price closely (500 + 20 · price), so the backtest
    # favours a model of the price; from 2024 they sit at their old average, 600, whatever the
    # price, so forecasts that follow the price miss by 20 · |price − 5| on average while the
    # mean's own forecasts (about 600) hardly miss: no realised skill (checked below).
    rng = np.random.default_rng(11)
    months = pd.period_range("2020-01", "2025-01", freq="M")
    price = np.round(rng.uniform(0, 10, len(months)), 2)
    broken = months >= pd.Period("2024-01", "M")
    sales = np.where(broken, 600.0, 500 + 20 * price) + rng.normal(0, 2, len(months))
    frame = pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"),
                          "sales": np.round(sales, 1), "price": price})
    printed = []
    # 1: actuals to 2023-12, 12 months forecast; 2: actuals to 2024-11 (11 of them realised);
    # 3: actuals to 2024-12 (all 12, and the second run's forecast of 2024-12).
    for cut, ahead in [("2023-12", 12), ("2024-11", 1), ("2024-12", 1)]:
        capsys.readouterr()
        assert cli.main(["run", str(broken_spec(tmp_path, frame, cut, ahead))]) == 0
        printed.append(capsys.readouterr().out)
    folders = run_folders(tmp_path / "runs")
    actuals = pd.DataFrame({"period": months.astype(str), "series": "all", "actual": frame["sales"]})
    pairs = []
    for folder in folders[:2]:
        forecast = pd.read_csv(folder / "forecast.csv", dtype={"series": str}).assign(run=folder.name)
        recommended = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["recommended"]
        # the recommended model may be the mean of the training months itself: its rows then sit on both sides
        own = forecast[forecast["model"] == recommended].merge(
            forecast[forecast["model"] == "mean_baseline"], on=["run", "period", "series"],
            suffixes=("", "_baseline")).merge(actuals, on=["period", "series"])
        pairs.append(pd.DataFrame({"recommended": (own["forecast"] - own["actual"]).abs(),
                                   "baseline": (own["forecast_baseline"] - own["actual"]).abs()}))
    pooled = pd.concat(pairs, ignore_index=True)
    first = json.loads((folders[0] / "metrics.json").read_text(encoding="utf-8"))["recommended"]
    assert first != "mean_baseline", "the first run must recommend a model of the price (the premise)"
    realised = 1 - pooled["recommended"].mean() / pooled["baseline"].mean()
    assert realised <= 0, "forecasts following the price must not beat the mean's own (the premise)"

    skills = [json.loads((f / "track_record.json").read_text(encoding="utf-8"))["realised_skill"]
              for f in folders]
    assert [s["months"] for s in skills] == [0, 11, 12]
    assert skills[2]["skill"] == pytest.approx(realised) and skills[2]["forecasts"] == len(pooled) == 13
    said = ("realised months, the recommended forecasts were no more accurate than the forecasts of "
            "the mean of the training months")
    assert [said in out for out in printed] == [False, False, True]
    warning = next(line for line in printed[2].splitlines() if said in line)
    assert warning.startswith(f"warning: Over the last 12 {said} (realised skill {format_percent(realised)}")
    assert warning[len("warning: "):] in (folders[2] / "summary.md").read_text(encoding="utf-8")
