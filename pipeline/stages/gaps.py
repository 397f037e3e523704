"""Periods (months, quarters, weeks) missing inside a series: found, reported, or filled by interpolation (``input.gaps``)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_named, cadence_of
from pipeline.core.columns import PERIOD, ROW, SERIES, internal
from pipeline.spec import Spec
from pipeline.stages.problems import Problem


def missing_months(frame: pd.DataFrame) -> pd.DataFrame:
    """Return, per series, each month missing between its first and last month,
    with the row of the next month present."""
    columns = [SERIES, PERIOD, "next_row"]
    ordinal = pd.Series(frame[PERIOD].array.asi8, index=frame.index)
    spans = ordinal.groupby(frame[SERIES], sort=False).agg(["min", "max", "nunique"])
    gapped = spans.index[(spans["max"] - spans["min"] + 1) > spans["nunique"]]
    if len(gapped) == 0:
        return pd.DataFrame(columns=columns)
    # Only the series with a gap are sorted and walked.
    month = internal("ordinal")
    subset = frame.loc[frame[SERIES].isin(gapped), [SERIES, ROW]].assign(**{month: ordinal})
    ordered = subset.sort_values([SERIES, month], kind="stable").drop_duplicates([SERIES, month])
    ordinals = ordered[month].to_numpy()
    names = ordered[SERIES].to_numpy()
    gaps = np.flatnonzero((names[1:] == names[:-1]) & (np.diff(ordinals) > 1))
    rows = []
    cadence = cadence_of(frame)
    for position in gaps:
        after = ordered.iloc[position + 1]
        for missing in range(int(ordinals[position]) + 1, int(ordinals[position + 1])):
            rows.append({SERIES: after[SERIES], PERIOD: cadence.period(missing),
                         "next_row": int(after[ROW])})
    return pd.DataFrame(rows, columns=columns)


def gap_problem(gaps: pd.DataFrame, spec: Spec, word: str, hint: str = "") -> Problem:
    first = gaps.iloc[0]
    return Problem(word, spec.input.date_column, int(first["next_row"]),
                   f"{cadence_named(spec.input.period).label(first[PERIOD])} for series '{first[SERIES]}' (missing before this row){hint}",
                   count=len(gaps))


# Said of a month missing between a series' last actual and its rows to forecast.
AHEAD_HINT = ("; it comes after the series' last actual: add the row with its drivers, or set "
               "forecast.months to have castline add the months to forecast")


def fill_gaps(frame: pd.DataFrame, gaps: pd.DataFrame, spec: Spec, numeric: list[str]) -> pd.DataFrame:
    """Return the frame with each missing month inserted, numbers interpolated in time."""
    filled = []
    cadence = cadence_of(frame)
    for series, rows in frame.groupby(SERIES, sort=False):
        rows = rows.set_index(PERIOD).sort_index()
        full = pd.period_range(rows.index.min(), rows.index.max(), freq=cadence.freq)
        if len(full) == len(rows):
            filled.append(rows.reset_index())
            continue
        grown = rows.reindex(full)
        grown.index.name = PERIOD
        inserted = grown[ROW].isna()
        # The target stays as given for months to forecast: interpolate history only.
        for column in numeric:
            grown[column] = grown[column].astype(float).interpolate(method="linear", limit_area="inside")
        for column in [c for c in grown.columns if c not in numeric]:
            grown[column] = grown[column].ffill()
        grown.loc[inserted, spec.input.date_column] = grown.index[inserted].to_timestamp()
        grown.loc[inserted, ROW] = np.nan
        grown[SERIES] = series
        filled.append(grown.reset_index())
    return pd.concat(filled, ignore_index=True)


def filled_cells(before: pd.DataFrame, after: pd.DataFrame, numeric: list[str]) -> pd.DataFrame:
    """Return, for each row of ``after``, which numeric cells hold a value that ``before``
    lacked: every value of an inserted month (no file row), and the empty cells filled.

    Rows are matched by their line in the file (``ROW``); ``after`` keeps its index.
    """
    at = pd.Index(before[ROW].to_numpy(float)).get_indexer(after[ROW].to_numpy(float))
    given = before[numeric].notna().to_numpy()[at] & (at >= 0)[:, None]
    now = after[numeric].notna().to_numpy()
    return pd.DataFrame(now & ~given, index=after.index, columns=numeric)
