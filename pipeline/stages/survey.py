"""Survey a data file for a starter spec: column types, the date column and its
frequency, the likely series key and target candidates.

Used by ``castline init DATA_FILE``. The survey is a first draft for a person to
edit, not a checked spec."""

from __future__ import annotations

import csv as csv_module
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.errors import DataError
from pipeline.spec import CsvOptions
from pipeline.stages.ingest import read_table

_DATE_NAMES = ("month", "date", "period", "time", "day", "week")


MAX_LEVELS = 30


@dataclass
class Inference:
    """What castline could tell about a data file."""

    path: Path
    file_format: str
    csv: CsvOptions
    rows: int
    types: dict[str, str]
    missing: dict[str, int]
    levels: dict[str, list[str]]
    date_column: str
    frequency: str
    series: list[str]
    target: str
    target_candidates: list[str]
    numeric_drivers: list[str]
    categorical_drivers: list[str]
    periods: int
    history_gaps: int = 0
    notes: list[str] = field(default_factory=list)


def guess_format(path: Path) -> str:
    """Return csv, parquet or excel from a file's suffix."""
    suffix = path.suffix.lower()
    if suffix in (".parquet", ".pq"):
        return "parquet"
    return "excel" if suffix in (".xlsx", ".xlsm") else "csv"


def sniff_delimiter(path: Path) -> str:
    with path.open("rb") as handle:
        sample = handle.read(16384).decode("utf-8", errors="replace")
    try:
        return csv_module.Sniffer().sniff(sample, delimiters=",;\t|").delimiter
    except csv_module.Error:
        return ","


def _parses_as_dates(values: pd.Series) -> pd.Series | None:
    present = values.dropna()
    if present.empty or pd.api.types.is_numeric_dtype(present):
        return None
    text = present.astype(str)
    if not text.str.contains(r"\d", regex=True).all():
        return None
    parsed = pd.to_datetime(text, errors="coerce", format="mixed")
    return parsed if parsed.notna().mean() >= 0.95 else None


def _column_type(values: pd.Series) -> str:
    present = values.dropna()
    if pd.api.types.is_bool_dtype(present):
        return "category"
    if pd.api.types.is_numeric_dtype(present):
        return "whole_number" if len(present) and bool(np.all(present == np.round(present))) else "number"
    if pd.api.types.is_datetime64_any_dtype(present) or _parses_as_dates(values) is not None:
        return "date"
    numbers = pd.to_numeric(present, errors="coerce")
    if len(present) and numbers.notna().all():
        return "whole_number" if bool(np.all(numbers == np.round(numbers))) else "number"
    distinct = present.nunique()
    return "category" if distinct <= max(MAX_LEVELS, 0.05 * len(present)) else "text"


def _frequency(dates: pd.Series) -> str:
    unique = pd.Series(sorted(dates.dropna().unique()))
    if len(unique) < 3:
        return "unknown"
    days = unique.diff().dropna().dt.days.median()
    if 28 <= days <= 31:
        return "month"
    if 6 <= days <= 8:
        return "week"
    if days <= 1:
        return "day"
    if 89 <= days <= 92:
        return "quarter"
    if 365 <= days <= 366:
        return "year"
    return f"every {days:g} days"


def infer(path: Path, *, csv: CsvOptions | None = None, sheet: str | int = 0) -> Inference:
    """Return what the spec for a data file would most likely say."""
    file_format = guess_format(path)
    if csv is None and file_format == "csv":
        csv = CsvOptions(delimiter=sniff_delimiter(path))
    csv = csv or CsvOptions()
    frame = read_table(path, file_format, csv, sheet)
    frame = frame.dropna(how="all")
    types = {column: _column_type(frame[column]) for column in frame.columns}
    dates = [c for c in frame.columns if types[c] == "date"]
    if not dates:
        raise DataError("no column holds dates; castline needs a date column for monthly data",
                        file=str(path))
    dates.sort(key=lambda c: (not any(word in c.lower() for word in _DATE_NAMES), list(frame.columns).index(c)))
    date_column = dates[0]
    parsed = pd.to_datetime(frame[date_column].astype(str), errors="coerce", format="mixed")
    months = parsed.dt.to_period("M")
    categories = [c for c in frame.columns if types[c] == "category" and c != date_column]
    series = _series_key(frame, months, categories)
    per_series_dates = parsed.groupby([frame[c].astype(str) for c in series]).apply(_frequency) \
        if series else pd.Series([_frequency(parsed)])
    frequency = per_series_dates.mode().iloc[0]
    numeric = [c for c in frame.columns if types[c] in ("number", "whole_number")]
    if not numeric:
        raise DataError("no numeric column to forecast", file=str(path))
    # A column empty in the latest months is most likely the target: those are
    # the months to forecast.
    trailing_missing = [c for c in numeric if parsed[frame[c].notna()].max() < parsed.max()]
    candidates = trailing_missing + [c for c in numeric if c not in trailing_missing]
    candidates = [c for c in candidates if not re.search(r"(^|_)(id|code|key)$", c.lower())] or candidates
    target = candidates[0]
    history_gaps = _count_history_gaps(frame, months, series, target)
    levels = {c: sorted(frame[c].dropna().astype(str).unique().tolist()) for c in categories}
    notes = []
    if frequency != "month":
        notes.append(f"the dates in '{date_column}' look {frequency}ly spaced, not monthly; "
                     "castline forecasts monthly data, so aggregate to months first")
    return Inference(
        path=path, file_format=file_format, csv=csv, rows=len(frame), types=types,
        missing={c: int(frame[c].isna().sum()) for c in frame.columns}, levels=levels,
        date_column=date_column, frequency=frequency, series=series, target=target,
        target_candidates=candidates[:5],
        numeric_drivers=[c for c in numeric if c != target],
        categorical_drivers=[c for c in categories if c not in series],
        periods=int(months.nunique()), history_gaps=history_gaps, notes=notes)


def _count_history_gaps(frame: pd.DataFrame, months: pd.Series, series: list[str], target: str) -> int:
    """Return how many months inside the history lack the target or a row, summed over series."""
    keys = [frame[c].astype(str) for c in series] or [pd.Series("all", index=frame.index)]
    last_actual = months[frame[target].notna()].max()
    total = 0
    for _, rows in months.groupby(keys):
        present = set(rows[(rows <= last_actual) & frame.loc[rows.index, target].notna()])
        if present:
            span = pd.period_range(min(present), max(present), freq="M")
            total += len(span) - len(present)
    return total


def _series_key(frame: pd.DataFrame, months: pd.Series, categories: list[str]) -> list[str]:
    """Return the fewest category columns that, with the month, identify every row."""
    if not months.duplicated().any():
        return []
    for size in (1, 2):
        for first in range(len(categories)):
            key = categories[first:first + size] if size == 1 else None
            choices = [key] if key else [[categories[first], other] for other in categories[first + 1:]]
            for columns in choices:
                identity = pd.concat([months.rename("__month")] + [frame[c] for c in columns], axis=1)
                if not identity.duplicated().any():
                    return columns
    return []
