"""A scenario's ``where``: which months to forecast a change applies to, each value compared
as its column holds it (numbers as numbers, dates as months, text as text)."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from pipeline.core.cadence import parse_label
from pipeline.core.columns import PERIOD
from pipeline.core.errors import UserError

SHOWN_VALUES = 6   # the values a message lists when a where value matches nothing


def _as_number(value) -> float | None:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if np.isfinite(number) else None


def _as_month(value, freq: str = "M") -> pd.Period | None:
    """Return the period (of the column's spacing) a wanted date or period label names."""
    try:
        return pd.Timestamp(str(value)).to_period(freq)
    except (TypeError, ValueError):
        try:
            return parse_label(str(value)).asfreq(freq) if freq != "W-SUN" else parse_label(str(value))
        except ValueError:
            return None


def _kind(values: pd.Series, is_date: bool) -> str:
    if is_date or isinstance(values.dtype, pd.PeriodDtype) or pd.api.types.is_datetime64_any_dtype(values):
        return "date"
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        return "number"
    return "text"


def _months(values: pd.Series) -> pd.Series:
    if isinstance(values.dtype, pd.PeriodDtype):
        return values
    return pd.to_datetime(values, errors="coerce", utc=True).dt.tz_localize(None).dt.to_period("M")


def where_mask(frame: pd.DataFrame, column: str, wanted, date_column: str | None = None) -> np.ndarray:
    """Return which rows hold one of the wanted values in the column, compared as the
    column's type: a number column by value (2, 2.0 and "2" are one value), the date column
    (or a column of dates) by month, any other column as text."""
    options = wanted if isinstance(wanted, list) else [wanted]
    is_date = column == date_column
    values = frame[PERIOD] if is_date and PERIOD in frame.columns else frame[column]
    kind = _kind(values, is_date)
    if kind == "number":
        numbers = [n for n in map(_as_number, options) if n is not None]
        return values.astype(float).isin(numbers).to_numpy()
    if kind == "date":
        freq = (pd.Period(ordinal=0, freq=values.dtype.freq).freqstr
                if isinstance(values.dtype, pd.PeriodDtype) else "M")
        months = [m for m in (_as_month(option, freq) for option in options) if m is not None]
        return _months(values).isin(months).to_numpy()
    texts = [str(option).strip() for option in options]
    return (values.notna() & values.astype(str).str.strip().isin(texts)).to_numpy()


def _shown(values: pd.Series, kind: str) -> str:
    present = values.dropna()
    if kind == "date":
        distinct = sorted(set(_months(present).dropna()))
    elif kind == "number":
        distinct = sorted(set(present.astype(float)))
    else:
        distinct = sorted(set(present.astype(str)))
    if not distinct:
        return "none: every cell is empty"
    words = [f"{v:g}" if isinstance(v, float) else str(v) for v in distinct[:SHOWN_VALUES]]
    more = len(distinct) - SHOWN_VALUES
    return ", ".join(words) + (f" and {more} more" if more > 0 else "")


def _written(wanted) -> str:
    return ", ".join(map(str, wanted)) if isinstance(wanted, list) else str(wanted)


def change_mask(frame: pd.DataFrame, change, scenario: str, date_column: str | None = None,
                fail: Callable[[tuple, str], UserError] | None = None) -> pd.Series:
    """Return which rows a scenario's change applies to: those matching every ``where``.

    A where value that matches no month to forecast is refused, naming its key and the
    values the months to forecast do hold; so is a combination no month holds together.
    ``fail`` makes the error for a key below the change (``("where", column)``)."""
    def refuse(key: tuple, message: str) -> UserError:
        message = f"scenario '{scenario}': {message}, so the change to {change.column} changes nothing"
        return fail(key, message) if fail else UserError(message)

    mask = np.ones(len(frame), bool)
    for column, wanted in change.where.items():
        matched = where_mask(frame, column, wanted, date_column)
        if not matched.any():
            is_date = column == date_column and PERIOD in frame.columns
            values = frame[PERIOD] if is_date else frame[column]
            raise refuse(("where", column), f"no month to forecast has {column} = {_written(wanted)} "
                                            f"(they hold: {_shown(values, _kind(values, is_date))})")
        mask &= matched
    if not mask.any():
        together = " and ".join(f"{c} = {_written(v)}" for c, v in change.where.items())
        raise refuse(("where",), f"no month to forecast has {together} together")
    return pd.Series(mask, index=frame.index)
