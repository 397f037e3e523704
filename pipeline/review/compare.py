"""What changed between two runs: spec, data (and the planned drivers), forecasts, coefficients,
metrics."""

from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_of_labels
from pipeline.core.catalogue import BASELINE
from pipeline.core.errors import UserError
from pipeline.record.ledger.read import rows_of, visible_runs
from pipeline.record.ledger.store import json_records, plain
from pipeline.review.history import CHANGED
from pipeline.review.revisions import (
    PlannedChanges,
    Revisions,
    chosen_model,
    forecast_revisions,
    planned_changes,
)


def find_run(conn: sqlite3.Connection, reference: str, ledger_file: Path) -> pd.Series:
    """Return the run a reference names: its id, or enough of its start to be unique."""
    runs = visible_runs(conn)
    exact = runs[runs["run_id"] == reference]
    if len(exact):
        return exact.iloc[0]
    matches = runs[runs["run_id"].str.startswith(reference) | runs["run_id"].str.endswith(reference)]
    if len(matches) == 1:
        return matches.iloc[0]
    if len(matches) > 1:
        raise UserError(f"'{reference}' matches {len(matches)} runs in {ledger_file} "
                        f"({', '.join(matches['run_id'].head(3))}, ...); give more of the run id")
    raise UserError(f"{ledger_file}: no run '{reference}' (see 'castline history --ledger "
                    f"{ledger_file}')")


def flatten(value, prefix: str = "") -> dict[str, object]:
    """Return a nested spec as key paths (``validation.last_periods``, ``models[1].kind``)."""
    if isinstance(value, dict):
        out: dict[str, object] = {}
        for key, item in value.items():
            out.update(flatten(item, f"{prefix}.{key}" if prefix else str(key)))
        return out or {prefix: {}}
    if isinstance(value, list):
        out = {}
        for index, item in enumerate(value):
            out.update(flatten(item, f"{prefix}[{index}]"))
        return out or {prefix: []}
    return {prefix: value}


def spec_differences(earlier: dict, later: dict) -> pd.DataFrame:
    """Return the keys whose values differ between two resolved specs."""
    before, after = flatten(earlier), flatten(later)
    missing = object()
    rows = []
    for key in list(dict.fromkeys([*before, *after])):
        old, new = before.get(key, missing), after.get(key, missing)
        if old != new:
            rows.append({"key": key, "earlier": "(not set)" if old is missing else old,
                         "later": "(not set)" if new is missing else new})
    return pd.DataFrame(rows, columns=["key", "earlier", "later"])


PLANNED = "planned drivers changed"   # a month both runs forecast, its rows changed


def month_changes(earlier: pd.DataFrame, later: pd.DataFrame) -> pd.DataFrame:
    """Return the months whose rows differ between two runs' inputs, each with what changed:
    actuals added, actuals revised, actuals removed, a new month to forecast, or the planned
    drivers of a month to forecast changed (a quarter or a week, as the periods' labels say)."""
    columns = ["period", "change", "earlier_actual_rows", "later_actual_rows"]
    both = earlier.merge(later, on="period", how="outer", suffixes=("_earlier", "_later"))
    name = cadence_of_labels(both["period"]).name
    rows = []
    for row in both.sort_values("period").itertuples(index=False):
        old_actual = 0 if pd.isna(row.actual_rows_earlier) else int(row.actual_rows_earlier)
        new_actual = 0 if pd.isna(row.actual_rows_later) else int(row.actual_rows_later)
        if row.sha256_earlier == row.sha256_later:
            continue
        if old_actual == 0 and new_actual > 0:
            change = "actuals added"
        elif old_actual > 0 and new_actual == 0:
            change = "actuals removed"
        elif old_actual > 0:
            change = "actuals revised" if new_actual == old_actual else "actuals added and revised"
        elif pd.isna(row.sha256_earlier):
            change = f"new {name} to forecast"
        elif pd.isna(row.sha256_later):
            change = f"{name} to forecast dropped"
        else:
            change = PLANNED
        rows.append({"period": row.period, "change": change, "earlier_actual_rows": old_actual,
                     "later_actual_rows": new_actual})
    return pd.DataFrame(rows, columns=columns)


def coefficient_moves(earlier: pd.DataFrame, later: pd.DataFrame, top: int) -> pd.DataFrame:
    """Return the coefficients that moved most between two runs: by the change measured in the
    earlier run's standard errors where it has them, else by the size of the change."""
    both = earlier.merge(later, on=["model", "term"], how="outer", suffixes=("_earlier", "_later"))
    both["change"] = both["estimate_later"] - both["estimate_earlier"]
    both["change_in_se"] = both["change"] / both["std_error_earlier"]
    both["_rank"] = both["change_in_se"].abs().fillna(-1)
    both["_size"] = both["change"].abs().fillna(np.inf)   # a term added or dropped ranks high
    # Unchanged terms are not moves (added or dropped ones are), nor are terms left out of
    # both fits (a term constant within a series, in a model per series).
    both = both[both["change"].ne(0)
                & ~(both["estimate_earlier"].isna() & both["estimate_later"].isna())]
    both = both.sort_values(["_rank", "_size"], ascending=False, kind="stable")
    columns = ["model", "term", "estimate_earlier", "estimate_later", "change", "change_in_se"]
    return both[columns].rename(columns={"estimate_earlier": "earlier", "estimate_later": "later"}) \
        .head(top).reset_index(drop=True)


def metric_changes(earlier: pd.DataFrame, later: pd.DataFrame) -> pd.DataFrame:
    """Return each model's headline metrics in the two runs and the change."""
    both = earlier.merge(later, on="model", how="outer", suffixes=("_earlier", "_later"))
    table = pd.DataFrame({"model": both["model"]})
    for metric in CHANGED:
        table[f"{metric}_earlier"] = both[f"{metric}_earlier"].astype(float)
        table[f"{metric}_later"] = both[f"{metric}_later"].astype(float)
        table[f"{metric}_change"] = table[f"{metric}_later"] - table[f"{metric}_earlier"]
    order = {BASELINE: 0}
    return table.sort_values("model", key=lambda m: m.map(lambda v: order.get(v, 1)),
                             kind="stable").reset_index(drop=True)


@dataclass(frozen=True)
class Comparison:
    """What changed between two runs, the earlier one first."""

    earlier: dict
    later: dict
    swapped: bool                   # the runs were given newest first
    spec: pd.DataFrame              # key, earlier, later
    months: pd.DataFrame            # period, change, earlier/later rows with actuals
    months_recorded: bool           # both runs have per-month fingerprints
    coefficients: pd.DataFrame
    metrics: pd.DataFrame
    revisions: Revisions            # one model's forecasts, month by month, in both runs
    planned: PlannedChanges         # the planned drivers that changed, month by month

    def as_dict(self) -> dict:
        """Return the comparison as plain JSON-ready values."""
        records = json_records
        revisions, planned = self.revisions, self.planned
        return {"earlier": self.earlier, "later": self.later, "given_newest_first": self.swapped,
                "spec_changes": records(self.spec), "data": self.data_summary(),
                "months": records(self.months) if self.months_recorded else None,
                "planned_driver_changes": {"months": planned.months, "named": planned.named,
                                           "note": planned.note, "rows": records(planned.table)},
                "forecast_revisions": {"model": revisions.model,
                                       "interval_method": revisions.interval_method,
                                       "note": revisions.note, "rows": records(revisions.table)},
                "coefficient_moves": records(self.coefficients), "metric_changes": records(self.metrics)}

    def data_summary(self) -> dict:
        """Return the change in the input: same file bytes or not, and rows with actuals."""
        months = self.months
        counted = months.groupby("change").size().to_dict() if self.months_recorded else {}
        return {"same_input": self.earlier["input_sha256"] == self.later["input_sha256"],
                "rows_with_actuals_earlier": self.earlier["history_rows"],
                "rows_with_actuals_later": self.later["history_rows"],
                "rows_with_actuals_added": int(self.later["history_rows"]) - int(self.earlier["history_rows"]),
                "months_by_change": {k: int(v) for k, v in counted.items()}}


RUN_FIELDS = ["run_id", "created", "spec_name", "spec_hash", "input_sha256", "castline_version",
              "first_period", "last_period", "history_rows", "future_rows", "recommended", "folder"]


def compare_runs(conn: sqlite3.Connection, first: str, second: str, ledger_file: Path,
                 top: int = 10, model: str | None = None) -> Comparison:
    """Return what changed between two runs of the ledger: spec keys, data and planned drivers,
    the forecasts of `model` (default: the later run's recommended model), coefficients, metrics."""
    one, two = find_run(conn, first, ledger_file), find_run(conn, second, ledger_file)
    swapped = (one["created"], one["run_id"]) > (two["created"], two["run_id"])
    earlier, later = (two, one) if swapped else (one, two)
    ids = [earlier["run_id"], later["run_id"]]
    specs = dict(conn.execute("SELECT run_id, spec_json FROM runs WHERE run_id IN (?, ?)", ids).fetchall())
    periods = rows_of(conn, "periods", ids)
    coefficients = rows_of(conn, "coefficients", ids)
    metrics = rows_of(conn, "model_metrics", ids)
    forecasts = rows_of(conn, "forecasts", ids)

    def of(frame: pd.DataFrame, run_id: str) -> pd.DataFrame:
        return frame[frame["run_id"] == run_id].drop(columns=["run_id"])

    recorded = all(len(of(periods, r)) for r in ids)
    months = month_changes(of(periods, ids[0]), of(periods, ids[1])) if recorded else \
        pd.DataFrame(columns=["period", "change", "earlier_actual_rows", "later_actual_rows"])
    runs = [{k: plain(run[k]) for k in RUN_FIELDS} for run in (earlier, later)]
    old, new = of(forecasts, ids[0]), of(forecasts, ids[1])
    chosen, why = chosen_model(old, new, runs[1]["recommended"], model)
    replanned = months.loc[months["change"] == PLANNED, "period"].tolist()
    return Comparison(
        earlier=runs[0], later=runs[1], swapped=bool(swapped),
        spec=spec_differences(json.loads(specs[ids[0]]), json.loads(specs[ids[1]])),
        months=months, months_recorded=recorded,
        coefficients=coefficient_moves(of(coefficients, ids[0]), of(coefficients, ids[1]), top),
        metrics=metric_changes(of(metrics, ids[0]), of(metrics, ids[1])),
        revisions=forecast_revisions(old, new, chosen, why),
        planned=planned_changes(runs[0], runs[1], {r: of(periods, r) for r in ids}, replanned))
