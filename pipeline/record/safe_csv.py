"""CSV files castline writes for people to open: text cells cannot run as formulas, and every
file reads back as the rows written.

A spreadsheet reads a cell that begins with ``=``, ``+``, ``-``, ``@``, a tab or a carriage
return as a formula (the first four also after leading spaces), so a series name or a problem
value taken from a hostile input file could run one when the CSV is opened. Text cells that
begin so get a single quote in front (the remedy the OWASP "CSV Injection" page recommends);
numbers are never touched, so ``-3.5`` stays a number. Readers of the files (present.run_files)
keep the quote: a name reads back as the CSV shows it, the same in every table.

A cell holding the delimiter, a quote, a line feed or a carriage return is quoted (its quotes
doubled); a table with a carriage return in some cell has its lines end in CR LF (``line_end``).
Every CSV castline writes goes through :func:`write_csv`, or :func:`write_csvs` for a run's many
tables at once.
"""

from __future__ import annotations

import functools
import re
import shutil
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from pipeline.core.forked import PAYS_FROM, called, map_shared

PIECE_CELLS = 250_000   # a large table is written in runs of rows of about this many cells

# What starts a formula (OWASP "CSV Injection"): = + - @, a tab or a carriage return; the first four
# also after leading white space, which a spreadsheet may skip.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_FORMULA = re.compile(r"[\t\r]|\s*[=+\-@]")
# A cell whose first character is none of these (the formula starts and every character the
# pattern's white space matches, all below U+3001) cannot start a formula: a column's first
# characters are checked at once, and only the few cells that may are matched one by one.
_MAY_START = list(dict.fromkeys(FORMULA_STARTS + tuple(c for c in map(chr, range(0x3001)) if c.isspace())))
# Lines end in a line feed; a table with a carriage return in some cell is written with lines
# ending in CR LF instead, because the writer quotes a cell only for the characters of its line
# ending (and the delimiter and quote): a bare carriage return left unquoted splits the row in two
# for every CSV reader.
LINE_END = "\n"
LINE_END_WITH_CR = "\r\n"


def neutralise(value: Any) -> Any:
    """Return a text value that a spreadsheet will show as text; anything else as it is."""
    if isinstance(value, str) and _FORMULA.match(value):
        return "'" + value
    return value


def _text_column(column: pd.Series) -> pd.Series:
    """Return the column's distinct text to check: a categorical column's categories, else itself."""
    return column.cat.categories.to_series() if isinstance(column.dtype, pd.CategoricalDtype) else column


def _has_cr(column: pd.Series) -> bool:
    """Whether some text cell of the column holds a carriage return."""
    try:
        return bool(_text_column(column).str.contains("\r", regex=False).fillna(False).any())
    except AttributeError:   # an object column holding no text at all
        return False


def _starts(column: pd.Series) -> np.ndarray:
    """Return which cells of a column are text that starts a formula."""
    try:
        may = np.array(column.str[:1].isin(_MAY_START), dtype=bool)   # missing where not text: False
    except AttributeError:   # an object column holding no text at all
        return np.zeros(len(column), bool)
    if may.any():
        may[may] = [bool(_FORMULA.match(value)) for value in column[may]]
    return may


def _neutralised_column(column: pd.Series) -> pd.Series:
    """Return a column with its text cells neutralised: itself when none starts a formula (a check
    over the column, or a categorical column's categories, at once; only the cells that do are
    rewritten)."""
    if isinstance(column.dtype, pd.CategoricalDtype):
        if not _starts(_text_column(column)).any():
            return column
        column = column.astype(object)
    hit = _starts(column)
    if not hit.any():
        return column
    out = column.astype(object)   # a copy: the frame given is never changed
    out[hit] = [neutralise(value) for value in column[hit]]
    return out


def _is_text(column: pd.Series) -> bool:
    return column.dtype == object or pd.api.types.is_string_dtype(column.dtype) \
        or isinstance(column.dtype, pd.CategoricalDtype)


def neutralised(frame: pd.DataFrame) -> pd.DataFrame:
    """Return a copy of the frame whose text cells and column names cannot start a formula."""
    out = frame.copy(deep=False)
    for position in range(frame.shape[1]):
        column = frame.iloc[:, position]
        if _is_text(column):
            changed = _neutralised_column(column)
            if changed is not column:
                out.isetitem(position, changed)
    out.columns = [neutralise(c) for c in out.columns]
    return out


def line_end(frame: pd.DataFrame) -> str:
    """Return the line ending the frame is written with: CR LF when a text cell or a column name
    holds a carriage return (so the writer quotes that cell), else a line feed."""
    if any(isinstance(name, str) and "\r" in name for name in frame.columns):
        return LINE_END_WITH_CR
    for position in range(frame.shape[1]):
        column = frame.iloc[:, position]
        if _is_text(column) and _has_cr(column):
            return LINE_END_WITH_CR
    return LINE_END


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
    """Write the frame as CSV (no index unless asked) with its text cells neutralised, lines ending
    as ``line_end`` says unless a ``lineterminator`` is given."""
    options.setdefault("index", False)
    if "lineterminator" not in options:
        options["lineterminator"] = line_end(frame)
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
        ending = line_end(frame)   # the whole table's, so that every run of rows ends its lines alike
        for number, ((start, end), part) in enumerate(zip(runs, parts, strict=True)):
            jobs.append(functools.partial(write_csv, frame.iloc[start:end], part, header=number == 0,
                                          lineterminator=ending))
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
