"""Everything the ledger knows of one spec's runs, gathered for the history page.

The page (``castline history SPEC --html FILE``) reads the ledger only, as ``history`` and
``compare`` do: each model's metrics per run, how each run's forecasts turned out, how the
forecast of each target month was revised from run to run, and what changed between
consecutive runs. Nothing is written.
"""

from __future__ import annotations

import json
import re
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.cadence import MONTH, Cadence, cadence_of_labels
from pipeline.core.catalogue import BASELINE, model_label
from pipeline.core.formatting import format_percent
from pipeline.core.intervals import SHORTFALL
from pipeline.record.ledger.read import latest_realised, rows_of, visible_runs
from pipeline.review.compare import PLANNED, compare_runs
from pipeline.review.history import metrics_history, realised_per_run
from pipeline.review.track_record import realised_skill, realised_skill_warning

RUN_COLUMNS = ["run_id", "created", "last_period", "history_rows", "recommended", "beats_baseline",
               "folder", "rerun"]
FAN_COLUMNS = ["period", "forecast_run_id", "run_period", "rerun", "horizon", "series", "forecast",
               "actual", "actual_series"]
CHANGE_COLUMNS = ["earlier_run", "later_run", "earlier_period", "later_period", "spec", "data",
                  "planned", "recommended"]
# The order the kinds of change in the input are told in: what came, then what was corrected
# (compare names the period by its spacing: a new quarter or week to forecast ranks as a month).
CHANGE_ORDER = {"actuals added": 0, "actuals revised": 1, "actuals added and revised": 2,
                "actuals removed": 3, "new month to forecast": 4, "month to forecast dropped": 5}
KEYS_SHOWN = 4            # spec keys named per pair of runs before "and N more"
MONTHS_SHOWN = 6          # months named per kind of change before "and N more"
# Realised forecasts before the share inside the stated intervals may raise a warning: fewer
# say little about a 80% interval (common practice: a few dozen before judging a coverage).
COVERAGE_FORECASTS = 20


@dataclass(frozen=True)
class HistoryBook:
    """One spec's runs as the ledger holds them, oldest first."""

    ledger: Path
    spec_name: str
    runs: pd.DataFrame              # RUN_COLUMNS, one row a run
    metrics: pd.DataFrame           # review.history.metrics_history
    realised: pd.DataFrame          # review.history.realised_per_run, every model
    scored: pd.DataFrame            # the latest score of each recommended forecast
    skill: dict                     # realised skill over every earlier run (realised_skill)
    skill_by_run: pd.DataFrame
    fan: pd.DataFrame               # FAN_COLUMNS: each run's forecast of each target month
    changes: pd.DataFrame           # CHANGE_COLUMNS: what changed from each run to the next
    warnings: list[str] = field(default_factory=list)


def run_labels(runs: pd.DataFrame) -> dict[str, str]:
    """Return each run's name for people: its last month of actuals, and which rerun on that
    month it was when there were several ("2026-05 (rerun 1)")."""
    return {run: str(period) + (f" (rerun {rerun})" if rerun else "")
            for run, period, rerun in zip(runs["run_id"], runs["last_period"], runs["rerun"])}


def _months(periods: list[str]) -> str:
    shown = ", ".join(periods[:MONTHS_SHOWN])
    return shown + (f" and {len(periods) - MONTHS_SHOWN} more" if len(periods) > MONTHS_SHOWN else "")


def _span(periods: list[str]) -> str:
    return periods[0] if len(periods) == 1 else f"{periods[0]} to {periods[-1]}"


def _change_rank(change: str) -> int:
    return CHANGE_ORDER.get(re.sub(r"\b(quarter|week)\b", "month", change), len(CHANGE_ORDER))


def _data_words(comparison, cadence: Cadence = MONTH) -> str:
    """Return the change in the input between two runs in words, from compare's months."""
    if comparison.earlier["input_sha256"] == comparison.later["input_sha256"]:
        return "the same input file"
    if not comparison.months_recorded:
        added = comparison.data_summary()["rows_with_actuals_added"]
        return f"the input changed ({added:+,} rows with actuals); {cadence.plural} not recorded"
    parts = []
    for change, group in sorted(comparison.months.groupby("change", sort=False), key=lambda item: _change_rank(item[0])):
        periods = sorted(group["period"].astype(str))
        if change == "actuals added":
            parts.append(f"actuals added for {_span(periods)}")
        elif change != PLANNED:   # planned drivers are named in their own column
            parts.append(f"{change}: {_months(periods)}")
    return "; ".join(parts) or "the same rows (the file differs in layout only)"


def _planned_words(comparison) -> str:
    planned = comparison.planned
    if not planned.months:
        return ""
    if not planned.named:
        return f"{_months(planned.months)} ({planned.note})"
    by_driver = planned.table.groupby("driver", sort=True)["period"].agg(lambda p: sorted(set(p)))
    return "; ".join(f"{driver} in {_months(list(periods))}" for driver, periods in by_driver.items())


def _spec_words(spec: pd.DataFrame) -> str:
    words = [f"{row.key}: {row.earlier} → {row.later}" for row in spec.head(KEYS_SHOWN).itertuples()]
    more = f"; and {len(spec) - KEYS_SHOWN} more key(s)" if len(spec) > KEYS_SHOWN else ""
    return "; ".join(words) + more


def run_changes(conn: sqlite3.Connection, runs: pd.DataFrame, ledger_file: Path) -> pd.DataFrame:
    """Return, for each run after the first, what changed since the run before it, as
    ``castline compare`` finds it: spec keys, the input's months, planned drivers, and the
    recommended model."""
    rows = []
    cadence = cadence_of_labels(runs["last_period"])
    for earlier, later in zip(runs.itertuples(), runs.iloc[1:].itertuples()):
        comparison = compare_runs(conn, earlier.run_id, later.run_id, ledger_file)
        models = (earlier.recommended, later.recommended)
        rows.append({"earlier_run": earlier.run_id, "later_run": later.run_id,
                     "earlier_period": earlier.last_period, "later_period": later.last_period,
                     "spec": _spec_words(comparison.spec), "data": _data_words(comparison, cadence),
                     "planned": _planned_words(comparison),
                     "recommended": "" if models[0] == models[1] else f"{models[0]} → {models[1]}"})
    return pd.DataFrame(rows, columns=CHANGE_COLUMNS)


def _latest_actuals(scored: pd.DataFrame, order: dict[str, int]) -> pd.DataFrame:
    """Return each (period, series)'s actual as the newest run that scored it read it."""
    if not len(scored):
        return pd.DataFrame(columns=["period", "series", "actual"])
    rows = scored.assign(_order=scored["run_id"].map(order)).sort_values("_order", kind="stable")
    return rows.drop_duplicates(["period", "series"], keep="last")[["period", "series", "actual"]]


def forecast_fan(forecasts: pd.DataFrame, runs: pd.DataFrame, scored: pd.DataFrame) -> pd.DataFrame:
    """Return each run's forecast of each target month by its recommended model, summed over the
    series it forecast, beside the month's actual (summed over the same series, as the newest
    run that scored them read them; empty until every one has an actual)."""
    recommended = dict(zip(runs["run_id"], runs["recommended"]))
    own = forecasts[forecasts["model"].astype(object).eq(forecasts["run_id"].map(recommended))]
    if not len(own):
        return pd.DataFrame(columns=FAN_COLUMNS)
    actuals = _latest_actuals(scored, dict(zip(runs["run_id"], range(len(runs)))))
    own = own.merge(actuals, on=["period", "series"], how="left")
    fan = own.groupby(["period", "run_id"], sort=False).agg(
        horizon=("horizon", "min"), series=("series", "size"), forecast=("forecast", "sum"),
        actual=("actual", "sum"), actual_series=("actual", "count")).reset_index()
    fan.loc[fan["actual_series"] < fan["series"], "actual"] = np.nan
    by_run = runs.set_index("run_id")
    fan.insert(2, "run_period", fan["run_id"].map(by_run["last_period"]))
    fan.insert(3, "rerun", fan["run_id"].map(by_run["rerun"]))
    fan["_order"] = fan["run_id"].map(dict(zip(runs["run_id"], range(len(runs)))))
    fan = fan.sort_values(["period", "_order"], kind="stable").rename(columns={"run_id": "forecast_run_id"})
    return fan[FAN_COLUMNS].reset_index(drop=True)


def _outside_warnings(scored: pd.DataFrame, runs: pd.DataFrame) -> list[str]:
    judged = scored[scored["within_backtest_95"].notna()]
    if not len(judged):
        return []
    outside = judged[~judged["within_backtest_95"].astype(bool)]
    if not len(outside):
        return []
    labels = run_labels(runs)
    per_run = outside.groupby("forecast_run_id", sort=False).size()
    named = ", ".join(f"the run with actuals to {labels[run]}: {count}" for run, count in per_run.items())
    return [f"{len(outside)} of {len(judged)} realised forecasts of the recommended models missed by "
            f"more than their run's backtest 95% range of errors, where about 1 in 20 would by "
            f"chance; by run: {named}"]


def _coverage_warnings(scored: pd.DataFrame) -> list[str]:
    warnings = []
    for level, column in ((0.80, "inside_80"), (0.95, "inside_95")):
        known = scored[column].dropna()
        if len(known) < COVERAGE_FORECASTS:
            continue
        held = float(known.astype(bool).mean())
        if held < level - SHORTFALL:
            warnings.append(f"the stated {level:.0%} intervals held for {format_percent(held)} of "
                            f"{len(known)} realised forecasts of the recommended models (more than "
                            f"{SHORTFALL:.0%} short): the intervals are too narrow for what came")
    return warnings


def _streak_warning(conn: sqlite3.Connection, runs: pd.DataFrame) -> list[str]:
    """Return a warning when the latest tested runs did not beat the mean of the training months as often in a
    row as the latest spec's output.warn_after_runs_without_skill allows."""
    latest = runs.iloc[-1]["run_id"]
    text = conn.execute("SELECT spec_json FROM runs WHERE run_id = ?", (latest,)).fetchone()[0]
    try:
        wanted = int(json.loads(text)["output"]["warn_after_runs_without_skill"])
    except (TypeError, ValueError, KeyError):
        return []
    tested = [bool(b) for b in runs["beats_baseline"] if b is not None and not pd.isna(b)]
    streak = 0
    for beat in reversed(tested):
        if beat:
            break
        streak += 1
    if streak < wanted:
        return []
    mean = model_label(BASELINE, cadence_of_labels(runs["last_period"]))
    return [f"the recommended model has not beaten the {mean} in the last {streak} tested "
            f"run(s) (output.warn_after_runs_without_skill: {wanted})"]


def history_book(conn: sqlite3.Connection, name: str, ledger_file: Path) -> HistoryBook:
    """Return one spec's runs as the ledger holds them (for ``castline history --html``).

    Reads the ledger, and for planned drivers the runs' input files as ``compare`` does.
    """
    runs = visible_runs(conn, name)
    runs["rerun"] = runs.groupby("last_period", sort=False).cumcount()
    runs = runs[RUN_COLUMNS].reset_index(drop=True)
    latest = latest_realised(conn, runs)
    recommended = dict(zip(runs["run_id"], runs["recommended"]))
    if len(latest):
        latest["forecast_created"] = latest["forecast_run_id"].map(dict(zip(runs["run_id"], runs["created"])))
        scored = latest[latest["model"].astype(object).eq(latest["forecast_run_id"].map(recommended))]
    else:
        scored = latest
    by_run, overall = realised_skill(latest, recommended) if len(latest) else (pd.DataFrame(), {})
    scored = scored.reset_index(drop=True)
    warnings = _outside_warnings(scored, runs) + _coverage_warnings(scored) + _streak_warning(conn, runs)
    skill_warning = realised_skill_warning(overall, cadence_of_labels(runs["last_period"])) if overall else None
    warnings += [skill_warning] if skill_warning else []
    forecasts = rows_of(conn, "forecasts", runs["run_id"])
    return HistoryBook(
        ledger=ledger_file, spec_name=name, runs=runs, metrics=metrics_history(conn, name),
        realised=realised_per_run(conn, name), scored=scored, skill=overall, skill_by_run=by_run,
        fan=forecast_fan(forecasts, runs, latest), changes=run_changes(conn, runs, ledger_file),
        warnings=warnings)

