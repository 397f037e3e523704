"""Survey a data file for a starter spec: column types, the date column and the spacing
of its dates (week, month or quarter: the period), the likely series key and target
candidates, which numeric drivers the periods to forecast carry, and which columns track
the target too closely to be drivers.

Used by ``castline init DATA_FILE``. The survey is a first draft for a person to
edit, not a checked spec."""

from __future__ import annotations

import csv as csv_module
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.cadence import Cadence, cadence_named
from pipeline.core.errors import DataError
from pipeline.spec import CsvOptions
from pipeline.stages.dates import DateGuess, guess_date_format, numbers_look_like, read_dates
from pipeline.stages.ingest import read_table
from pipeline.stages.spacing import NOT_FORECAST, PERIODS, Spacing, one_a_period, spacing_of

_DATE_NAMES = ("month", "date", "period", "time", "day", "week")


MAX_LEVELS = 30

# A column that moves with the target month by month this closely (|Pearson r| over the
# history, all series pooled) and has no values in the months to forecast is most likely
# another measure of the outcome: offered as a driver, it would leak the target.
LOOKALIKE_R = 0.9

# From two full years on, each calendar month is seen twice and a trend can be told
# from the season: the starter then offers both (two years of any period: CALENDAR_YEARS).
CALENDAR_YEARS = 2
CALENDAR_MONTHS = CALENDAR_YEARS * 12


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
    # The period the dates are spaced by: week, month or quarter (month when no series has
    # two dates to tell it by, or their reading is in doubt: day or month first).
    frequency: str
    series: list[str]
    target: str
    target_candidates: list[str]
    numeric_drivers: list[str]
    categorical_drivers: list[str]
    periods: int
    history_gaps: int = 0
    notes: list[str] = field(default_factory=list)
    history_periods: int = 0
    future_rows: int = 0
    # Each numeric driver's future rule: given when every month to forecast has its value,
    # month_mean otherwise (some empty, or no months to forecast in the file at all).
    driver_future: dict[str, str] = field(default_factory=dict)
    future_missing: dict[str, int] = field(default_factory=dict)
    # Columns left out of the drivers because they track the target: column -> Pearson r.
    target_lookalikes: dict[str, float] = field(default_factory=dict)
    # How the dates are written (strftime), when the automatic reading would misread them.
    date_format: str | None = None
    # The typical days between a series' consecutive dates (None: no series has two).
    spacing_days: float | None = None
    # What the spacing of the dates told: "dates about 7 days apart: weekly data".
    spacing: str = ""

    @property
    def cadence(self) -> Cadence:
        """Return the period of the rows (month when the spacing is none castline knows)."""
        return cadence_named(self.frequency)


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
    parsed = pd.to_datetime(text, errors="coerce", format="mixed", utc=True)   # offsets: to UTC
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


def _spacing(parsed: pd.Series, keys: list[pd.Series], guess: DateGuess, path: Path,
             column: str) -> tuple[Spacing, str, str]:
    """Return the spacing of the dates, the period it makes and what it told, in words.

    The typical gap within each series names the period; failing that, the gap across the
    file (a panel whose series are sparse may fill each other's gaps), then the one period
    that holds one date of a series each, one after the other (monthly dates written on
    varying days). Dates spaced by no period castline forecasts are refused, unless their
    reading is in doubt (day or month first), which the note on the dates then tells: the
    spec is written for months, and the check says how the dates were read."""
    found = spacing_of(parsed, keys)
    if found.period is None and keys:
        overall = spacing_of(parsed)
        found = overall if overall.period is not None or found.days is None else found
    if found.days is None:
        return found, "month", "no series has two dates to tell the spacing by: monthly data assumed"
    if found.period is not None:
        return found, found.period, f"dates {found.apart}: {found.adjective} data"
    fitting = next((period for period in PERIODS if one_a_period(parsed, keys, period)), None)
    if fitting:
        return found, fitting, f"dates {found.apart}, one in each {fitting}: {fitting}ly data"
    if guess.note is not None and guess.date_format is None:   # day or month first: in doubt
        return found, "month", (f"dates {found.apart} as read: no period castline forecasts; "
                                "monthly assumed")
    advice = ("yearly data are too coarse for it" if found.name == "year"
              else "add the rows up to weeks, months or quarters first")
    raise DataError(f"the dates are {found.apart} ({found.adjective} data); {NOT_FORECAST}: "
                    f"{advice}", file=str(path), column=column)


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
        raise DataError("no column holds dates; castline needs a date column for weekly, monthly "
                        "or quarterly data"
                        + _numbers_for_dates(frame), file=str(path))
    dates.sort(key=lambda c: (not any(word in c.lower() for word in _DATE_NAMES), list(frame.columns).index(c)))
    date_column = dates[0]
    guess = guess_date_format(frame[date_column])
    parsed = read_dates(frame[date_column], guess.date_format)
    categories = [c for c in frame.columns if types[c] == "category" and c != date_column]
    # The series are told first to read the spacing within each, then by the periods of
    # that spacing.
    keys = [frame[c] for c in _key_for_spacing(frame, parsed, categories)]
    spacing, frequency, spacing_words = _spacing(parsed, keys, guess, path, date_column)
    months = cadence_named(frequency).of_dates(parsed)
    series = _series_key(frame, months, categories)
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
    history, future = _history_and_future_rows(frame, months, target)
    others = [c for c in numeric if c != target]
    future_missing = {c: int(frame.loc[future, c].isna().sum()) for c in others}
    estimated = "month_mean" if frequency == "month" else "period_mean"   # the monthly name kept
    driver_future = {c: "given" if future.any() and not future_missing[c] else estimated
                     for c in others}
    # Only a column the file cannot supply ahead is suspect: a planned one is known in time.
    correlations = {c: _same_month_r(frame, history, target, c) for c in others
                    if driver_future[c] != "given"}
    lookalikes = {c: r for c, r in correlations.items() if r is not None and abs(r) > LOOKALIKE_R}
    levels = {c: sorted(frame[c].dropna().astype(str).unique().tolist()) for c in categories}
    notes = [guess.note] if guess.note else []
    if file_format == "csv" and csv.missing_values is None:
        notes += _texts_read_as_missing(path, csv, frame, categories)
    return Inference(
        path=path, file_format=file_format, csv=csv, rows=len(frame), types=types,
        missing={c: int(frame[c].isna().sum()) for c in frame.columns}, levels=levels,
        date_column=date_column, frequency=frequency, series=series, target=target,
        target_candidates=candidates[:5],
        numeric_drivers=[c for c in others if c not in lookalikes],
        categorical_drivers=[c for c in categories if c not in series],
        periods=int(months.nunique()), history_gaps=history_gaps, notes=notes,
        history_periods=int(months[history].nunique()), future_rows=int(future.sum()),
        driver_future={c: rule for c, rule in driver_future.items() if c not in lookalikes},
        future_missing={c: n for c, n in future_missing.items() if c not in lookalikes},
        target_lookalikes=lookalikes, date_format=guess.date_format, spacing_days=spacing.days,
        spacing=spacing_words)


def _texts_read_as_missing(path: Path, csv: CsvOptions, frame: pd.DataFrame, columns: list[str]) -> list[str]:
    """Return a note for each text column holding a text read as missing (NA, None, null)."""
    if not columns or not frame[columns].isna().any().any():
        return []
    kept = read_table(path, "csv", csv.model_copy(update={"missing_values": [""]}))
    notes = []
    for column in columns:
        texts = kept[column].reindex(frame.index)[frame[column].isna()].dropna().astype(str)
        if len(texts):
            shown = ", ".join(repr(text) for text in sorted(set(texts))[:3])
            notes.append(f"column '{column}' holds {shown} in {len(texts)} rows, read as missing; to keep "
                         "it as a level, add missing_values: [\"\"] under input.csv in the spec")
    return notes


def _numbers_for_dates(frame: pd.DataFrame) -> str:
    """Return what the first column named like a date holds, when it holds numbers."""
    for column in frame.columns:
        if any(word in str(column).lower() for word in _DATE_NAMES):
            looks = numbers_look_like(frame[column])
            if looks:
                return f"; column '{column}' holds {looks}"
    return ""


def _history_and_future_rows(frame: pd.DataFrame, months: pd.Series, target: str
                             ) -> tuple[pd.Series, pd.Series]:
    """Return masks of the history rows (the target given) and of the months to forecast
    (the target empty, after the last actual), placed as ``castline check`` places them."""
    history = frame[target].notna()
    if not history.any():
        return history, history
    return history, ~history & (months > months[history].max())


def _same_month_r(frame: pd.DataFrame, history: pd.Series, target: str, column: str) -> float | None:
    """Return Pearson's r between a column and the target in the same month, over the history
    rows of every series pooled; None when fewer than three rows have both or either is constant."""
    pairs = frame.loc[history, [target, column]].apply(pd.to_numeric, errors="coerce").dropna()
    if len(pairs) < 3 or (pairs.std(ddof=0) == 0).any():
        return None
    return float(np.corrcoef(pairs[target].to_numpy(float), pairs[column].to_numpy(float))[0, 1])


def _count_history_gaps(frame: pd.DataFrame, months: pd.Series, series: list[str], target: str) -> int:
    """Return how many months inside the history lack the target or a row, summed over series."""
    keys = [frame[c].astype(str) for c in series] or [pd.Series("all", index=frame.index)]
    last_actual = months[frame[target].notna()].max()
    total = 0
    for _, rows in months.groupby(keys):
        present = set(rows[(rows <= last_actual) & frame.loc[rows.index, target].notna()])
        if present:
            span = pd.period_range(min(present), max(present))
            total += len(span) - len(present)
    return total


def _key_for_spacing(frame: pd.DataFrame, parsed: pd.Series, categories: list[str]) -> list[str]:
    """Return the series key that, with the month (monthly or quarterly rows), else the ISO
    week (weekly rows), else the date itself, identifies every row: the coarsest that does,
    so that series dated at other times of one period (other days, other offsets from UTC)
    are still told apart."""
    for stamps in (parsed.dt.to_period("M"), parsed.dt.to_period("W-SUN"), parsed):
        key = _series_key(frame, stamps, categories)
        if not pd.concat([stamps, *(frame[c] for c in key)], axis=1).duplicated().any():
            return key
    return []


def _series_key(frame: pd.DataFrame, months: pd.Series, categories: list[str]) -> list[str]:
    """Return the fewest category columns that, with the month (or the date, or another
    period), identify every row."""
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
