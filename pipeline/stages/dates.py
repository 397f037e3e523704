"""Reading a date column: with the spec's ``input.date_format``, with time-zone offsets
(converted to UTC before the month is taken), and telling which numbers are not dates.

Used by the check (``stages/check.py``) and by ``castline init``'s survey
(``stages/survey.py``), which also guesses a format for dates written with slashes,
dots or dashes: day first when some first field is above 12, month first when some
second field is.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.stages.ingest import RawInput

# A date written as three numbers with one separator, the year last: 25/03/2019, 3.1.19.
_THREE_FIELDS = re.compile(r"^\s*(\d{1,2})([/.\-])(\d{1,2})\2(\d{4}|\d{2})\s*$")
# A time followed by an offset from UTC: 23:00:00+02:00, 23:00Z, 23:00:00.5-0500.
_OFFSET = re.compile(r"\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?\s*(?:Z|[+-]\d{2}(?::?\d{2})?)\s*$", re.IGNORECASE)

AUTOMATIC = "read automatically (month first where ambiguous)"
DAY_FIRST = "%d/%m/%Y"

# Whole numbers in these ranges, in a date column, look like another way of counting
# time. Spreadsheet serial days count from 1899-12-30: 20000 is 1954-10-04, 80000 is
# 2119-01-10. Unix epoch seconds count from 1970-01-01 UTC: 1e8 is 1973-03-03, 5e9 is 2128.
_SERIAL_DAYS = (20_000, 80_000)
_EPOCH_SECONDS = (1e8, 5e9)
_EPOCH_MILLISECONDS = (1e11, 5e12)
SPREADSHEET_ORIGIN = "1899-12-30"


@dataclass(frozen=True)
class DateGuess:
    """How a column of dates seems to be written: a strftime format (None when the
    automatic reading will do) and a note for the person (None when there is nothing to say)."""

    date_format: str | None
    note: str | None = None


def _text(values: pd.Series) -> pd.Series:
    """Return the values present as text, whole numbers without a trailing '.0'."""
    present = values.dropna()
    if pd.api.types.is_float_dtype(present) and (present == present.round()).all():
        present = present.astype("int64")
    return present.astype(str).str.strip()


def guess_date_format(values: pd.Series) -> DateGuess:
    """Return the format of dates written as three numbers (day, month, year in some
    order, the year last), or None with a note when they could be read either way."""
    text = _text(values)
    if text.empty:
        return DateGuess(None)
    fields = text.str.extract(_THREE_FIELDS)
    if fields[0].isna().any():
        return DateGuess(None)   # not all written as three numbers: the automatic reading
    first, second = fields[0].astype(int), fields[2].astype(int)
    separator = fields[1].iloc[0]
    if fields[1].nunique() > 1:
        return DateGuess(None)
    widths = set(fields[3].str.len())
    if len(widths) > 1:
        return DateGuess(None)   # years of four digits and of two: no one format
    year = "%Y" if widths == {4} else "%y"
    day_first, month_first = bool((first > 12).any()), bool((second > 12).any())
    if day_first != month_first:
        order, big = ("day", first) if day_first else ("month", second)
        found = f"%{order[0]}{separator}%{'m' if day_first else 'd'}{separator}{year}"
        decisive = text[(big > 12).to_numpy()].iloc[0]
        return DateGuess(found, f"the dates are written {order} first (like {decisive}): the spec "
                                f"reads them with input.date_format: \"{found}\"")
    example = text.iloc[0]
    day_format = f"%d{separator}%m{separator}{year}"
    if day_first and month_first:
        return DateGuess(None, f"the dates (like {example}) have a first field above 12 in some rows "
                               "and a second field above 12 in others, so no one order reads them "
                               f"all; set input.date_format (e.g. \"{day_format}\") and fix the rest")
    return DateGuess(None, f"the dates (like {example}) could be read either way, day or month "
                           "first; castline reads them month first: if they are day first, set "
                           f"input.date_format: \"{day_format}\"")


def has_offsets(values: pd.Series) -> bool:
    """Return whether the column holds times with an offset from UTC (or is time-zone aware)."""
    if isinstance(values.dtype, pd.DatetimeTZDtype):
        return True
    if not (values.dtype == object or pd.api.types.is_string_dtype(values)):
        return False
    text = values.dropna().astype(str)
    timed = text.str.contains(":", regex=False)   # no time, no offset: the regex is spared
    return bool(timed.any() and text[timed].str.contains(_OFFSET).any())


def numbers_look_like(values: pd.Series) -> str | None:
    """Return what a column of numbers in place of dates looks like, in words (None when
    it is not numbers)."""
    present = pd.to_numeric(values.dropna(), errors="coerce")
    if present.empty or present.isna().any():
        return None
    whole = bool((present == present.round()).all())
    low, high = float(present.min()), float(present.max())
    first = present.iloc[0]
    if whole and _SERIAL_DAYS[0] <= low and high <= _SERIAL_DAYS[1]:
        day = pd.Timestamp(SPREADSHEET_ORIGIN) + pd.Timedelta(days=int(first))
        return (f"spreadsheet serial day numbers ({int(first)} is {day:%Y-%m-%d}, counting days "
                f"from {SPREADSHEET_ORIGIN}); save the column as dates, or as text like {day:%Y-%m-%d}")
    for (start, stop), unit, word in ((_EPOCH_SECONDS, "s", "seconds"),
                                      (_EPOCH_MILLISECONDS, "ms", "milliseconds")):
        if whole and start <= low and high <= stop:
            moment = pd.Timestamp(int(first), unit=unit)
            return (f"Unix time, {word} since 1970-01-01 UTC ({int(first)} is "
                    f"{moment:%Y-%m-%d %H:%M} UTC); write the column as dates, like "
                    f"{moment:%Y-%m-%d}")
    if whole and 100_001 <= low and high <= 999_912 and (present % 100).between(1, 12).all():
        return "year and month written as one number (YYYYMM); set input.date_format: \"%Y%m\""
    return "numbers, not dates; write the column as dates, like 2019-01-31"


def read_dates(values: pd.Series, date_format: str | None) -> pd.Series:
    """Return the column as dates without a time zone: those with an offset converted to
    UTC (those without are taken as they are), NaT where a value cannot be read or is empty.

    With a format every value must match it; without one each is read on its own.
    """
    if pd.api.types.is_datetime64_any_dtype(values) and date_format is None:
        parsed = values
    else:
        text = _text(values).reindex(values.index)
        parsed = pd.to_datetime(text, format=date_format or "mixed", errors="coerce", utc=True)
    if isinstance(parsed.dtype, pd.DatetimeTZDtype):
        parsed = parsed.dt.tz_convert("UTC").dt.tz_localize(None)
    return parsed


def reading_note(written, period, date_format: str | None) -> str:
    """Return how the dates were read, for a month given twice: the format given, or the
    automatic reading with the key that would change it ('' for dates stored as dates)."""
    if date_format is not None:
        return f"; the dates were read with input.date_format \"{date_format}\""
    if not isinstance(written, str):
        return ""
    shown = f"; {written!r} was read as {period}; "
    fields = _THREE_FIELDS.match(written)
    if fields:
        separator = fields.group(2)
        year = "%Y" if len(fields.group(4)) == 4 else "%y"
        return (f"{shown}the dates were {AUTOMATIC}: if they are day first, set "
                f"input.date_format: \"%d{separator}%m{separator}{year}\"")
    return f"{shown}the dates were read automatically (input.date_format sets how they are written)"


def first_unparsed_date(raw: RawInput, values: pd.Series) -> tuple[int | None, str, int]:
    """Return the row, value and count of the dates not written like the column's first one."""
    parsed = pd.to_datetime(values, errors="coerce")   # the format of the first date, for all
    bad = parsed.isna() & values.notna()
    if not bad.any():
        return None, "(a value that is not a date)", 1
    index = int(np.flatnonzero(bad.to_numpy())[0])
    first = values.dropna().iloc[0]
    hint = ("; if the dates are day first, set input.date_format"
            if isinstance(first, str) and _THREE_FIELDS.match(first) else "")
    return raw.location(index), (f"{values.iloc[index]!r} (not written like the first date, "
                                 f"{first!r}{hint})"), int(bad.sum())
