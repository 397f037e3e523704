"""What a rerun revised: each month's forecast against the earlier run's, and the planned
drivers whose values changed in the months both runs forecast.

The ledger keeps each run's forecasts, so the revisions come from it alone. It keeps one
fingerprint per month of the input, not one per column, so naming the drivers that changed
reads the two runs' input files again (through each run folder's spec.yaml, checked as the
run checked them) and uses them only where their months still match the fingerprints the
runs recorded. Nothing is written.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_named, cadence_of_labels, period_labels
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import UserError
from pipeline.record.ledger.fingerprints import period_fingerprints
from pipeline.spec import Spec, load_spec
from pipeline.stages.check import CheckedData, check_data
from pipeline.stages.ingest import read_input

REVISION_COLUMNS = ["period", "series", "earlier", "later", "change", "earlier_width_80",
                    "change_in_widths"]
PLANNED_COLUMNS = ["period", "driver", "series", "earlier", "later"]
PLANNED_MONTH_COLUMNS = ["driver", "period", "series_changed", "series"]
NAMED_SERIES = 3             # series named per driver and month in the short table; more are counted


@dataclass(frozen=True)
class Revisions:
    """One model's forecasts in both runs, month by month and series by series."""

    model: str | None               # None: no model to compare (see note)
    interval_method: str | None     # the earlier run's stated interval for that model
    table: pd.DataFrame             # REVISION_COLUMNS, by period and series
    note: str | None = None         # why the table is empty or has no widths


@dataclass(frozen=True)
class PlannedChanges:
    """The planned drivers whose values changed, in the months both runs forecast."""

    table: pd.DataFrame             # PLANNED_COLUMNS: one row per month, driver and series
    months: list[str]               # the months whose planned rows changed (by their fingerprints)
    note: str | None = None         # why the drivers could not be named

    @property
    def named(self) -> bool:
        return self.note is None

    def by_month(self) -> pd.DataFrame:
        """Return one row per driver and month: how many series changed, the first few named."""
        rows = []
        for (driver, period), group in self.table.groupby(["driver", "period"], sort=True):
            names = sorted(group["series"].astype(str).unique())
            shown = ", ".join(names[:NAMED_SERIES]) + (f", … ({len(names) - NAMED_SERIES} more)"
                                                       if len(names) > NAMED_SERIES else "")
            rows.append({"driver": driver, "period": period, "series_changed": len(names),
                         "series": shown})
        return pd.DataFrame(rows, columns=PLANNED_MONTH_COLUMNS)


def chosen_model(earlier: pd.DataFrame, later: pd.DataFrame, recommended: str | None,
                 model: str | None) -> tuple[str | None, str | None]:
    """Return the model whose forecasts to compare (the asked one, else the later run's
    recommended one) and a note when there is none; an asked model both runs lack is a
    mistake."""
    both = sorted(set(earlier["model"]) & set(later["model"]))
    if model is not None:
        if model not in both:
            raise UserError(f"--model: no forecasts of '{model}' in both runs (models in both: "
                            f"{', '.join(both) or 'none'})")
        return model, None
    if recommended is None:
        return None, "the later run recommended no model"
    if recommended not in both:
        return None, (f"the earlier run has no forecasts of {recommended}, the later run's "
                      "recommended model (choose another with --model)")
    return recommended, None


def forecast_revisions(earlier: pd.DataFrame, later: pd.DataFrame, model: str | None,
                       note: str | None = None) -> Revisions:
    """Return, per month and series that both runs forecast with `model`, the earlier forecast,
    the later one, the change (later − earlier), the width of the earlier run's stated 80%
    interval (high − low, of the method its summary stated) and the change measured in that
    width. The width is left empty where the earlier run stated no interval or one of no width.

    `earlier` and `later` are the two runs' rows of the ledger's forecasts table.
    """
    empty = pd.DataFrame(columns=REVISION_COLUMNS)
    if model is None:
        return Revisions(None, None, empty, note)
    old = earlier[earlier["model"] == model]
    new = later[later["model"] == model]
    methods = old["interval_method"].dropna().unique()
    method = str(methods[0]) if len(methods) else None
    if method is not None:
        width = old[f"{method}_high_80"].astype(float) - old[f"{method}_low_80"].astype(float)
    else:
        width = pd.Series(np.nan, index=old.index)
        note = "the earlier run stated no interval for its forecasts (it was recorded before the " \
               "ledger kept the stated one)"
    old = pd.DataFrame({"period": old["period"].astype(str), "series": old["series"].astype(str),
                        "earlier": old["forecast"].astype(float),
                        "earlier_width_80": width.where(width > 0)})
    new = pd.DataFrame({"period": new["period"].astype(str), "series": new["series"].astype(str),
                        "later": new["forecast"].astype(float)})
    both = old.merge(new, on=["period", "series"], how="inner")
    both["change"] = both["later"] - both["earlier"]
    both["change_in_widths"] = both["change"] / both["earlier_width_80"]
    table = both[REVISION_COLUMNS].sort_values(["period", "series"], kind="stable").reset_index(drop=True)
    if not len(table) and note is None:
        name = cadence_of_labels(pd.concat([old["period"], new["period"]])).name
        note = f"the two runs forecast no {name} and series in common with {model}"
    elif note is None and table["earlier_width_80"].isna().all():
        note = (f"the earlier run's stated interval ({method}) has no 80% bounds of some width for "
                f"these forecasts of {model}: the changes are not measured in widths")
    return Revisions(model, method, table, note)


def largest_revisions(table: pd.DataFrame, top: int) -> pd.DataFrame:
    """Return the `top` revisions that moved most: by the change in widths of the earlier
    interval, then (where there is no width) by the size of the change."""
    order = table.assign(_rank=table["change_in_widths"].abs().fillna(-1),
                         _size=table["change"].abs())
    order = order.sort_values(["_rank", "_size"], ascending=False, kind="stable")
    return order[REVISION_COLUMNS].head(top).reset_index(drop=True)


def _input_as_recorded(run: dict, recorded: pd.DataFrame, months: list[str]
                       ) -> tuple[Spec | None, CheckedData | None, str | None]:
    """Return the run's input checked as the run checked it, or None and why not: its spec or
    file cannot be read, or the file no longer holds what the run read in those months."""
    folder = Path(run["folder"])
    try:
        spec = load_spec(folder / "spec.yaml")
        # A spec without input.as_of placed its months by the day it ran.
        data = check_data(spec, read_input(spec), today=date.fromisoformat(str(run["created"])[:10]))
    except UserError as problem:
        return None, None, f"{run['run_id']}'s input cannot be read again ({problem.one_line()})"
    now = period_fingerprints(data).set_index("period")["sha256"]
    then = recorded.set_index("period")["sha256"]
    if any(now.get(month) != then.get(month) for month in months):
        return None, None, (f"{spec.input.file} no longer holds what {run['run_id']} read in those "
                            f"{cadence_named(spec.input.period).plural} (the file has been replaced since)")
    return spec, data, None


def _planned_rows(data: CheckedData, months: list[str], columns: list[str], side: str) -> pd.DataFrame:
    """Return the planned values of the columns in the months, one row per period, series and
    driver; the user's columns are values here, never names, whatever they are called."""
    rows = data.future[pd.Series(period_labels(data.future[PERIOD]), index=data.future.index).isin(months)]
    values = rows.reindex(columns=columns).astype(object)
    count = len(columns)
    return pd.DataFrame({"period": np.repeat(np.asarray(period_labels(rows[PERIOD]), dtype=object), count),
                         "series": np.repeat(rows[SERIES].astype(str).to_numpy(), count),
                         "driver": np.tile(np.asarray(columns, dtype=object), len(rows)),
                         side: values.to_numpy().reshape(-1)})


def planned_differences(earlier: CheckedData, later: CheckedData, months: list[str],
                        columns: list[str]) -> pd.DataFrame:
    """Return, in the given months, each series and column whose planned value differs between
    the two runs' months to forecast (a series planned in one run only differs in every column
    it has a value in), by period, driver and series."""
    keys = ["period", "series"]
    long = [_planned_rows(data, months, columns, side)
            for data, side in ((earlier, "earlier"), (later, "later"))]
    both = long[0].merge(long[1], on=[*keys, "driver"], how="outer")
    old, new = both["earlier"], both["later"]
    same = (old.isna() & new.isna()) | (old.notna() & new.notna() & (old == new))
    table = both.loc[~same, PLANNED_COLUMNS].astype(object)
    table = table.where(table.notna(), None)
    return table.sort_values(["period", "driver", "series"], kind="stable").reset_index(drop=True)


def planned_changes(earlier: dict, later: dict, periods: dict[str, pd.DataFrame],
                    months: list[str]) -> PlannedChanges:
    """Return the planned drivers that changed in `months` (the months both runs forecast whose
    fingerprints differ), read from the two runs' input files; `periods` holds each run's
    recorded fingerprints by run id."""
    empty = pd.DataFrame(columns=PLANNED_COLUMNS)
    if not months:
        return PlannedChanges(empty, [])
    read = []
    for run in (earlier, later):
        spec, data, why = _input_as_recorded(run, periods[run["run_id"]], months)
        if data is None:
            return PlannedChanges(empty, months, f"the drivers cannot be named: {why}")
        read.append(data)
    # Every column the month's fingerprint covers, except the target and the series key.
    skip = {PERIOD, SERIES, ROW, spec.target, *spec.input.series}
    columns = [c for c in read[1].future.columns if c not in skip]
    columns += [c for c in read[0].future.columns if c not in skip and c not in columns]
    return PlannedChanges(planned_differences(read[0], read[1], months, columns), months)
