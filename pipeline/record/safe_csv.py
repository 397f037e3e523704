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


def neutralised(frame: pd.DataFrame) -> pd.DataFrame:
    """Return a copy of the frame whose text cells and column names cannot start a formula."""
    out = frame.copy()
    for column in out.columns:
        if out[column].dtype == object or pd.api.types.is_string_dtype(out[column].dtype):
            out[column] = out[column].map(neutralise)
        elif isinstance(out[column].dtype, pd.CategoricalDtype):
            out[column] = out[column].astype(object).map(neutralise)
    out.columns = [neutralise(c) for c in out.columns]
    return out


def write_csv(frame: pd.DataFrame, target, **options) -> None:
    """Write the frame as CSV (no index unless asked) with its text cells neutralised."""
    options.setdefault("index", False)
    neutralised(frame).to_csv(target, **options)
