"""The spacing of the dates: how far apart a series' dates typically are, and which period
that makes.

The typical gap is the median, over every series pooled, of the days between consecutive
distinct dates of a series. A month or a quarter missing here and there, or monthly dates
written on varying days, leave the median where it was; rows spaced a week apart do not.
``castline init`` reads the period from it, and the check refuses data whose spacing is
plainly not the period the spec declares, in one line, before the calendar checks would
report every period "given four times" or "missing".
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from pipeline.core.cadence import cadence_named
from pipeline.core.errors import DataError

# Days between consecutive dates (the median, rounded) that make each spacing; the spacings
# castline forecasts are week, month and quarter, the others are named in messages only.
_SPACINGS = (("day", 0, 1), ("week", 6, 8), ("month", 28, 31), ("quarter", 89, 92), ("year", 364, 366))
PERIODS = ("week", "month", "quarter")
_ADJECTIVES = {"day": "daily", "week": "weekly", "month": "monthly", "quarter": "quarterly",
               "year": "yearly"}
# Said when the dates are spaced in a way castline does not forecast.
NOT_FORECAST = ("castline forecasts weekly (6 to 8 days apart), monthly (28 to 31) or quarterly "
                "(89 to 92) data")


@dataclass(frozen=True)
class Spacing:
    """The typical gap between a series' consecutive dates, and the spacing it makes."""

    days: float | None     # None when no series has two distinct dates

    @property
    def name(self) -> str | None:
        """Return day, week, month, quarter or year; None when the gap is none of them."""
        if self.days is None:
            return None
        rounded = round(self.days)
        return next((name for name, low, high in _SPACINGS if low <= rounded <= high), None)

    @property
    def period(self) -> str | None:
        """Return the spec's ``input.period`` for this spacing; None when castline has none."""
        return self.name if self.name in PERIODS else None

    @property
    def adjective(self) -> str:
        """Return "weekly" and the like; "irregular" for a gap that is no known spacing."""
        return _ADJECTIVES.get(self.name or "", "irregular")

    @property
    def apart(self) -> str:
        """Return "about 7 days apart"."""
        rounded = round(self.days or 0)
        return f"about {rounded} day{'' if rounded == 1 else 's'} apart"


def spacing_of(dates: pd.Series, keys: list[pd.Series] | None = None) -> Spacing:
    """Return the spacing of a column of dates, read within each series (``keys``: the
    columns naming the series, none for a single series); empty dates are left out."""
    frame = pd.DataFrame({"date": pd.to_datetime(dates, errors="coerce")}, index=dates.index)
    names = []
    for number, key in enumerate(keys or []):
        frame[f"key{number}"] = key.reindex(dates.index).astype(str)
        names.append(f"key{number}")
    frame = frame.dropna(subset=["date"]).drop_duplicates()
    if len(frame) < 2:
        return Spacing(None)
    frame = frame.sort_values([*names, "date"], kind="stable")
    steps = frame.groupby(names, sort=False)["date"].diff() if names else frame["date"].diff()
    days = steps.dropna().dt.total_seconds() / 86400.0
    return Spacing(float(days.median())) if len(days) else Spacing(None)


def one_a_period(dates: pd.Series, keys: list[pd.Series], period: str) -> bool:
    """Return whether the dates fit a period though their gaps vary (monthly dates written on
    varying days): no series has two dates in one period, and from one date of a series to
    its next is one period, typically (the median over every series pooled)."""
    frame = pd.DataFrame({"date": pd.to_datetime(dates, errors="coerce")}, index=dates.index).dropna()
    if frame.empty or _several_in_one_period(frame["date"], keys, period):
        return False
    frame["ordinal"] = cadence_named(period).of_dates(frame["date"]).array.asi8
    names = []
    for number, key in enumerate(keys):
        frame[f"key{number}"] = key.reindex(frame.index).astype(str)
        names.append(f"key{number}")
    frame = frame.drop(columns="date").drop_duplicates().sort_values([*names, "ordinal"])
    steps = (frame.groupby(names, sort=False)["ordinal"].diff() if names else frame["ordinal"].diff()).dropna()
    return bool(len(steps)) and float(steps.median()) == 1.0


def _several_in_one_period(dates: pd.Series, keys: list[pd.Series], period: str) -> bool:
    """Return whether some series has two distinct dates in one period of the spacing."""
    frame = pd.DataFrame({"date": dates}, index=dates.index).dropna()
    frame["period"] = cadence_named(period).of_dates(frame["date"])
    for number, key in enumerate(keys):
        frame[f"key{number}"] = key.reindex(frame.index).astype(str)
    frame = frame.drop_duplicates()
    return bool(frame.drop(columns="date").duplicated().any())


def check_spacing(frame: pd.DataFrame, spec, file) -> None:
    """Refuse, in one line naming the file and the date column, data whose dates are
    plainly spaced otherwise than ``input.period`` says (``frame``: the spec's columns,
    the dates read as dates).

    Only a known spacing other than the declared one is refused, and a finer one only when
    some series then has several dates in one declared period: a series with a period
    missing, dates written on varying days of their period, or a single row per series
    pass, and are left to the calendar checks.
    """
    column = spec.input.date_column
    if column not in frame.columns or not pd.api.types.is_datetime64_any_dtype(frame[column]):
        return
    if any(key not in frame.columns for key in spec.input.series):
        return
    keys = [frame[key] for key in spec.input.series]
    found = spacing_of(frame[column], keys)
    declared = spec.input.period
    # Dates a day apart are left to the calendar checks: day-first dates read month first
    # look daily too, and the check of a period given twice says how the dates were read.
    if found.name in (None, "day", declared):
        return
    finer = found.days < _days_of(declared)
    if finer and not _several_in_one_period(frame[column], keys, declared):
        return
    said = (f"the dates are {found.apart}, so the data look {found.adjective}, but "
            f"input.period is {declared}; ")
    advice = (f"set input.period: {found.period}" if found.period
              else NOT_FORECAST + f"; {found.adjective} rows are too coarse for it")
    raise DataError(said + advice, file=str(file), column=column)


def _days_of(period: str) -> float:
    return next((low + high) / 2 for name, low, high in _SPACINGS if name == period)

