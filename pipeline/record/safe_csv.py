"""CSV files castline writes for people to open: text cells cannot run as formulas.

A spreadsheet reads a cell that begins with ``=``, ``+``, ``-`` or ``@`` as a
formula, so a series name or a problem value taken from a hostile input file
could run one when the CSV is opened. Text cells that begin so get a single
quote in front (the remedy the OWASP "CSV Injection" page recommends); numbers
are never touched. Every CSV castline writes goes through :func:`write_csv`, or
:func:`write_csvs` for a run's many tables at once.
"""

from __future__ import annotations

import functools
import shutil
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from pipeline.core.forked import PAYS_FROM, called, map_shared

PIECE_CELLS = 250_000   # a large table is written in runs of rows of about this many cells

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


def _number_text(frame: pd.DataFrame) -> pd.DataFrame:
    """Return the frame with its float64 columns as the text pandas would write for them:
    Python's shortest repr of each number (numpy's, which pandas uses, is the same text and
    takes about twice as long), missing numbers as empty cells."""
    floats = [position for position, dtype in enumerate(frame.dtypes) if dtype == np.float64]
    if not floats:
        return frame
    out = frame.copy(deep=False)
    for position in floats:
        values = frame.iloc[:, position].to_numpy()
        text = np.array(list(map(repr, values.tolist())), dtype=object)
        text[np.isnan(values)] = ""
        out.isetitem(position, pd.Series(text, index=frame.index, dtype=object))
    return out


def write_csv(frame: pd.DataFrame, target, **options) -> None:
    """Write the frame as CSV (no index unless asked) with its text cells neutralised."""
    options.setdefault("index", False)
    frame = neutralised(frame)
    if options.get("float_format") is None and options.get("na_rep", "") == "":
        frame = _number_text(frame)
    frame.to_csv(target, **options)


def _cut(frame: pd.DataFrame) -> list[tuple[int, int]]:
    """Return the runs of rows a table is written in: one unless it is large and every column's
    text is each cell's own (numbers, text; not dates, whose format pandas picks per column)."""
    rows = len(frame)
    if frame.size <= PIECE_CELLS or not all(
            pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_string_dtype(dtype) for dtype in frame.dtypes):
        return [(0, rows)]
    step = max(1, PIECE_CELLS // max(1, frame.shape[1]))
    return [(start, min(start + step, rows)) for start in range(0, rows, step)]


def write_csvs(tables: Sequence[tuple[pd.DataFrame, Path]]) -> None:
    """Write each (frame, path) as ``write_csv`` writes it, the same bytes: a large table in runs of
    rows (``_cut``), each a hidden part file beside its path, joined in order; the runs of every
    table shared with a forked copy of this process when they are work enough (core.forked)."""
    jobs, weights, joined = [], [], []
    for frame, path in tables:
        path = Path(path)
        runs = _cut(frame)
        if len(runs) == 1:
            jobs.append(functools.partial(write_csv, frame, path))
            weights.append(frame.size + 1)
            continue
        parts = [path.with_name(f".{path.name}.part{number}") for number in range(len(runs))]
        for number, ((start, end), part) in enumerate(zip(runs, parts, strict=True)):
            jobs.append(functools.partial(write_csv, frame.iloc[start:end], part, header=number == 0))
            weights.append((end - start) * frame.shape[1] + 1)
        joined.append((path, parts))
    # The heaviest first: map_shared times the first job here to judge whether sharing pays.
    order = sorted(range(len(jobs)), key=lambda i: -weights[i])
    map_shared(called, [jobs[i] for i in order], [weights[i] for i in order], least=PAYS_FROM)
    for path, parts in joined:
        with open(path, "wb") as whole:
            for part in parts:
                with open(part, "rb") as piece:
                    shutil.copyfileobj(piece, whole, 1 << 20)
                part.unlink()
