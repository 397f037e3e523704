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
