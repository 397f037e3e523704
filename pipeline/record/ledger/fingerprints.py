"""Each month's fingerprint in the ledger: a sha256 of the month's rows in a canonical form.

The canonical form (``period_fingerprints``): the month's rows ordered by series (a stable
sort, so rows of one series keep the file's order), every column the spec uses sorted by
name (the target included; the month, the series and line numbers left out), each cell as
text that does not depend on how its column was read: a number as Python's ``repr`` of it
as a float (``2.0``, ``1e-05``), a date and time in ISO form (``2024-01-01T00:00:00``), a
missing value as null, anything else as ``str`` of it; all of it written as
``json.dumps([columns, rows])`` (``", "`` between items, ASCII with escapes) and hashed as
UTF-8. Earlier ledgers hold fingerprints in this same form, so months compare across runs.

The cells are made column by column (numbers by ``repr`` mapped over the column's floats;
other values once per distinct value), not cell by cell: a panel of 5,000 series
× 120 months is some 5 million cells.
"""

from __future__ import annotations

import hashlib
import json
import math
from datetime import datetime

import numpy as np
import pandas as pd

from pipeline.core.cadence import label_of
from pipeline.core.columns import PERIOD, ROW, SERIES, internal
from pipeline.stages.check import CheckedData


def canonical(value) -> str | None:
    """Return a cell as text that does not depend on how the column's type was read."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, float | int | np.number) and not isinstance(value, bool | np.bool_):
        number = float(value)
        return None if math.isnan(number) else repr(number)
    if isinstance(value, pd.Timestamp | datetime):
        return value.isoformat()
    return str(value)


def _number_tokens(values: np.ndarray) -> np.ndarray:
    """Return the JSON text of each number's canonical cell: '"repr"', null where missing."""
    numbers = values.astype(np.float64, copy=False)
    tokens = np.array(list(map('"{!r}"'.format, numbers.tolist())), dtype=object)
    tokens[np.isnan(numbers)] = "null"
    return tokens


def cell_tokens(column: pd.Series) -> np.ndarray:
    """Return the JSON text of each cell of a column in canonical form (``canonical`` then
    ``json.dumps``): plain numpy numbers by their dtype at once, other values once per
    distinct value."""
    dtype = column.dtype
    if isinstance(dtype, np.dtype) and dtype.kind in "iuf":
        return _number_tokens(column.to_numpy())
    if isinstance(dtype, np.dtype) and dtype.kind == "O":   # values of any kind: each as itself
        return np.array([json.dumps(canonical(value)) for value in column], dtype=object)
    codes, distinct = pd.factorize(column, use_na_sentinel=True)
    tokens = np.array([json.dumps(canonical(value)) for value in distinct] + ["null"], dtype=object)
    return tokens[codes]   # the sentinel -1 reads the last: null


def period_fingerprints(data: CheckedData) -> pd.DataFrame:
    """Return, per month of the input, its rows with and without actuals and a sha256 of them
    in the canonical form the module describes.

    The hash covers every column the spec uses (the target included), rows ordered by
    series; line numbers are left out, so adding rows elsewhere changes no month's hash.
    """
    actual = internal("actual")   # a name no user's column has: a column "_actual" is hashed too
    rows = pd.concat([data.history.assign(**{actual: True}), data.future.assign(**{actual: False})],
                     ignore_index=True)
    columns = sorted(c for c in data.history.columns if c not in {PERIOD, SERIES, ROW})
    # One stable sort by month, then series, keeps each month's rows in the order a stable
    # sort of that month by series gives.
    rows = rows.sort_values([PERIOD, SERIES], kind="stable")
    periods, actuals = rows[PERIOD], rows[actual].to_numpy(bool)
    codes = pd.factorize(periods)[0]   # the months as integers: compared at once, not as objects
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]]) if len(rows) else np.zeros(0, int)
    tokens = [cell_tokens(rows[name]) for name in columns]
    lines = ["[" + ", ".join(cells) + "]" for cells in zip(*tokens, strict=True)] if columns \
        else ["[]"] * len(rows)
    head = "[" + json.dumps(columns) + ", ["
    out = []
    for start, end in zip(starts, [*starts[1:], len(rows)], strict=True):
        digest = hashlib.sha256((head + ", ".join(lines[start:end]) + "]]").encode("utf-8")).hexdigest()
        actual = int(actuals[start:end].sum())
        out.append({"period": label_of(periods.iloc[start]), "actual_rows": actual,
                    "planned_rows": int(end - start) - actual, "sha256": digest})
    return pd.DataFrame(out, columns=["period", "actual_rows", "planned_rows", "sha256"])
