"""CSV files castline writes for people to open: text cells cannot run as formulas.

A spreadsheet reads a cell that begins with ``=``, ``+``, ``-`` or ``@`` as a
formula, so a series name or a problem value taken from a hostile input file
could run one when the CSV is opened. Text cells that begin so get a single
quote in front (the remedy the OWASP "CSV Injection" page recommends); numbers
are never touched. Every CSV castline writes goes through :func:`write_csv`.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

FORMULA_STARTS = ("=", "+", "-", "@")


def neutralise(value: Any) -> Any:
    """Return a text value that a spreadsheet will show as text; anything else as it is."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def _neutralised_column(column: pd.Series) -> pd.Series:
    """Return a column with its text cells neutralised: itself when none starts a formula (a check
    over the column at once; only the cells that do are rewritten)."""
    if isinstance(column.dtype, pd.CategoricalDtype):
        column = column.astype(object)
    try:
        starts = column.str.startswith(FORMULA_STARTS).fillna(False)   # missing where a cell is not text
    except AttributeError:   # an object column holding no text at all
        starts = column.map(lambda value: isinstance(value, str) and value.startswith(FORMULA_STARTS))
    hit = starts.to_numpy(bool)
    if not hit.any():
        return column
    out = column.astype(object)   # a copy: the frame given is never changed
    out[hit] = [neutralise(value) for value in column[hit]]
    return out


def neutralised(frame: pd.DataFrame) -> pd.DataFrame:
    """Return a copy of the frame whose text cells and column names cannot start a formula."""
    out = frame.copy(deep=False)
    for position in range(frame.shape[1]):
        column = frame.iloc[:, position]
        if column.dtype == object or pd.api.types.is_string_dtype(column.dtype) \
                or isinstance(column.dtype, pd.CategoricalDtype):
            changed = _neutralised_column(column)
            if changed is not column:
                out.isetitem(position, changed)
    out.columns = [neutralise(c) for c in out.columns]
    return out


def write_csv(frame: pd.DataFrame, target, **options) -> None:
    """Write the frame as CSV (no index unless asked) with its text cells neutralised."""
    options.setdefault("index", False)
    neutralised(frame).to_csv(target, **options)
