"""Every run of a spec in the ledger: its metrics over time and how its forecasts turned out."""

from __future__ import annotations

import sqlite3

import pandas as pd

from pipeline.core.catalogue import BASELINE, METRIC_NAMES, SKILL
from pipeline.record.ledger.read import latest_realised, rows_of, visible_runs
from pipeline.review.track_record import summarise_realised

HISTORY_METRICS = [*METRIC_NAMES, SKILL]


CHANGED = ["mae", "rmse", SKILL]   # the headline metrics, with the change from the run before


def metrics_history(conn: sqlite3.Connection, name: str | None = None) -> pd.DataFrame:
    """Return each run's backtest metrics per model, oldest run first, with the change in
    MAE, RMSE and skill from the previous run of the same spec and model."""
    runs = visible_runs(conn, name)
    metrics = rows_of(conn, "model_metrics", runs["run_id"])
    table = runs[["spec_name", "run_id", "created", "last_period", "recommended"]].merge(
        metrics, on="run_id", how="inner")
    table["recommended"] = table["model"] == table["recommended"]
    table["_run"] = table["run_id"].map(dict(zip(runs["run_id"], range(len(runs)))))
    table["_baseline_last"] = table["model"] != BASELINE
    table = table.sort_values(["_run", "_baseline_last", "model"], kind="stable")
    for metric in CHANGED:
        table[metric] = table[metric].astype(float)
        table[f"{metric}_change"] = table.groupby(["spec_name", "model"], sort=False)[metric].diff()
    columns = ["spec_name", "run_id", "created", "last_period", "model", "recommended", "n"]
    for metric in HISTORY_METRICS:
        columns += [metric] + ([f"{metric}_change"] if metric in CHANGED else [])
    return table[columns].reset_index(drop=True)


def realised_history(conn: sqlite3.Connection, name: str | None = None) -> pd.DataFrame:
    """Return how each run's forecasts turned out, per model and months ahead, from the
    latest score of each forecast (later runs rescore a month whose actual was revised)."""
    runs = visible_runs(conn, name)
    latest = latest_realised(conn, runs)
    if not len(latest):
        return summarise_realised(latest).assign(spec_name=[], recommended=[], scored_through=[])
    created = dict(zip(runs["run_id"], runs["created"]))
    latest["forecast_created"] = latest["forecast_run_id"].map(created)
    table = summarise_realised(latest)
    by_run = runs.set_index("run_id")
    table.insert(0, "spec_name", table["forecast_run_id"].map(by_run["spec_name"]))
    table.insert(4, "recommended", [by_run["recommended"].get(r) == m
                                    for r, m in zip(table["forecast_run_id"], table["model"])])
    through = latest.groupby("forecast_run_id")["run_id"].agg(lambda ids: max(ids, key=created.get))
    table["scored_through"] = table["forecast_run_id"].map(through).map(by_run["last_period"])
    return table


RECENT_RUNS = 6   # what plain `castline history` shows of each spec; --all shows every run


def recent_runs(metrics: pd.DataFrame, runs: int = RECENT_RUNS, model: str | None = None) -> pd.DataFrame:
    """Return the last `runs` runs of each spec in `metrics` (metrics_history's table), one row
    a run: its recommended model's metrics, or `model`'s when given."""
    order = metrics.drop_duplicates("run_id")
    kept = set(order.groupby("spec_name", sort=False)["run_id"].tail(runs))
    rows = metrics[metrics["run_id"].isin(kept)]
    rows = rows[rows["model"] == model] if model else rows[rows["recommended"].astype(bool)]
    return rows.reset_index(drop=True)


REALISED_PER_RUN = ["spec_name", "forecast_run_id", "forecast_created", "last_period", "model", "recommended",
                    "months_ahead", "n", "realised_mae", "expected_mae", "realised_bias", "inside_80",
                    "inside_95", "scored_through"]


def _share(values: pd.Series) -> float:
    known = values.dropna()
    return float(known.astype(bool).mean()) if len(known) else float("nan")


def _span(horizons: list[int]) -> str:
    """Return months ahead as read: '1–3' for a run of months, '1, 3' otherwise."""
    if len(horizons) > 1 and horizons == list(range(horizons[0], horizons[-1] + 1)):
        return f"{horizons[0]}–{horizons[-1]}"
    return ", ".join(str(h) for h in horizons)


def realised_per_run(conn: sqlite3.Connection, name: str | None = None) -> pd.DataFrame:
    """Return how each run's forecasts turned out, per model, over all its months ahead scored so
    far (from the latest score of each forecast): the realised MAE and bias over those forecasts,
    the mean of the MAE the backtest expected at each one's months ahead, and the shares inside
    the stated intervals. realised_history gives the same per months ahead."""
    runs = visible_runs(conn, name)
    latest = latest_realised(conn, runs)
    if not len(latest):
        return pd.DataFrame(columns=REALISED_PER_RUN)
    by_run = runs.set_index("run_id")
    created = by_run["created"].to_dict()
    rows = []
    for (run_id, model), group in latest.groupby(["forecast_run_id", "model"], sort=False):
        errors = group["error"].astype(float)
        newest = max(group["run_id"], key=created.get)
        rows.append({"spec_name": by_run.at[run_id, "spec_name"], "forecast_run_id": run_id,
                     "forecast_created": created[run_id],
                     "last_period": by_run.at[run_id, "last_period"], "model": model,
                     "recommended": by_run.at[run_id, "recommended"] == model,
                     "months_ahead": _span(sorted(set(group["horizon"].astype(int)))),
                     "n": len(group), "realised_mae": float(errors.abs().mean()),
                     "expected_mae": float(group["expected_mae"].astype(float).mean()),
                     "realised_bias": float(errors.mean()),
                     "inside_80": _share(group["inside_80"]), "inside_95": _share(group["inside_95"]),
                     "scored_through": by_run.at[newest, "last_period"]})
    table = pd.DataFrame(rows, columns=REALISED_PER_RUN)
    return table.sort_values(["forecast_created", "forecast_run_id", "model"],
                             kind="stable").reset_index(drop=True)
