"""A starter spec from a data file: infer what the spec would say, write it commented.

Used by ``castline init DATA_FILE``. The inference is a first draft for a
person to edit: column types, the date column and its frequency, the likely
series key and target candidates.
"""

from __future__ import annotations

import csv as csv_module
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from pipeline.core.errors import DataError, UserError
from pipeline.spec import CsvOptions
from pipeline.stages.ingest import read_table

_DATE_NAMES = ("month", "date", "period", "time", "day", "week")
_MAX_LEVELS = 30


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
    return "category" if distinct <= max(_MAX_LEVELS, 0.05 * len(present)) else "text"


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


def _yaml_value(value) -> str:
    return yaml.safe_dump(value, default_flow_style=True, allow_unicode=True).strip().removesuffix("...").strip()


def _gaps_line(found: Inference) -> str:
    if found.history_gaps:
        return (f"  gaps: fill              # {found.history_gaps} month(s) inside the history lack "
                "the target or a row: filled by interpolation (refuse | allow | fill)")
    return "  gaps: refuse            # months missing inside a series: refuse | allow | fill"


def render_spec(found: Inference, spec_path: Path) -> str:
    """Return a commented starter spec for the inferred data."""
    data_file = os.path.relpath(found.path.resolve(), spec_path.resolve().parent)
    name = re.sub(r"[^A-Za-z0-9_.-]+", "-", found.path.stem).strip("-.") or "forecast"
    periods = found.periods
    holdout = min(12, max(1, periods // 5))
    lines = [
        f"# Starter spec written by 'castline init' from {found.path.name}",
        f"# ({found.rows} rows, {periods} months). Everything below is a guess to check and edit.",
        "",
        f"name: {_yaml_value(name)}",
        "",
        "input:",
        f"  file: {_yaml_value(data_file)}",
    ]
    if found.file_format == "csv" and found.csv != CsvOptions():
        lines.append("  csv:")
        for key, value in found.csv.model_dump().items():
            if value != getattr(CsvOptions(), key):
                lines.append(f"    {key}: {_yaml_value(value)}")
    lines += [
        f"  date_column: {_yaml_value(found.date_column)}",
        f"  period: month{'' if found.frequency == 'month' else '   # the dates look ' + found.frequency + 'ly: aggregate to months first'}",
        f"  series: {_yaml_value(found.series)}" + ("   # columns that, with the month, identify a row"
                                                  if found.series else "   # one series: no key needed"),
        _gaps_line(found),
        "",
        f"# Other candidates for the target: {', '.join(found.target_candidates[1:]) or 'none'}",
        f"target: {_yaml_value(found.target)}",
        "",
        "drivers:",
        "  numeric:" + ("" if found.numeric_drivers else " []"),
        *[f"    - {_yaml_value(c)}" for c in found.numeric_drivers],
        "  categorical:" + ("" if found.categorical_drivers or found.series else " []"),
        *[f"    - column: {_yaml_value(c)}\n      encoding: one_hot" for c in found.categorical_drivers + found.series],
        "",
        "# What each column must hold; a run stops when the data breaks a rule.",
        "columns:",
    ]
    for column, kind in found.types.items():
        rule = {"type": kind}
        if found.missing[column] and column not in (found.date_column,):
            rule["missing_allowed"] = True
        if kind == "category" and len(found.levels.get(column, [])) <= _MAX_LEVELS:
            rule["allowed"] = found.levels[column]
        if column in found.numeric_drivers or column in found.categorical_drivers + found.series:
            rule.pop("missing_allowed", None)
        lines.append(f"  {_yaml_value(column)}: {_yaml_value(rule)}")
    lines += [
        "",
        f"# Test out of sample on the last {holdout} months of history.",
        "validation:",
        "  method: holdout",
        f"  last_periods: {holdout}",
        "",
        "models: [ols]               # the mean baseline is always fitted beside them",
        "",
        "output:",
        "  folder: reports",
        "",
    ]
    return "\n".join(lines)


def write_starter_spec(data_file: str | Path, spec_file: str | Path | None = None, *,
                       csv: CsvOptions | None = None, sheet: str | int = 0) -> tuple[Path, Inference]:
    """Write a starter spec for a data file and return its path; never overwrites."""
    data_path = Path(data_file)
    if not data_path.exists():
        raise DataError("no such data file", file=str(data_path))
    if data_path.is_dir():
        raise DataError("is a folder, not a data file", file=str(data_path))
    target = Path(spec_file) if spec_file else Path(f"{data_path.stem}.spec.yaml")
    if target.exists():
        raise UserError(f"{target}: already exists; castline init never overwrites a file "
                        "(choose another name with --spec-file)")
    found = infer(data_path, csv=csv, sheet=sheet)
    text = render_spec(found, target)
    try:
        with target.open("x", encoding="utf-8") as handle:
            handle.write(text)
    except FileExistsError:
        raise UserError(f"{target}: already exists; castline init never overwrites a file") from None
    except OSError as exc:
        raise UserError(f"{target}: cannot write the spec: {exc.strerror}") from None
    return target, found
