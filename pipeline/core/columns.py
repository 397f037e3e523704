"""The names castline gives its own columns, and reading them.

The checked frame holds the user's columns and these: each row's period (month,
quarter or week), its series and its line in the input file.

Every name here begins with a space. The reader strips the spaces around every column
name it reads (``stages/ingest.read_table``), so no user's column can ever be named so:
a driver, target, series key or date column named ``period``, ``series`` or
``source_row`` is the user's own and is never overwritten. What castline writes uses
plain words (``period``, ``series``) chosen by the writer, never these names.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

PERIOD = " period"
SERIES = " series"
ROW = " source_row"


def internal(word: str) -> str:
    """Return a column name for castline's own use, set on a frame that also holds the
    user's columns (e.g. whether a row has an actual): no user's column can have it."""
    return " " + word.strip()


# The series column as the terms, the messages and the model file name it: by its plain
# word (model files written before the names above began with a space did so too, and a
# file of either kind loads).
_PLAIN = {SERIES: "series"}
_LOADED = {word: name for name, word in _PLAIN.items()}


def plain_name(column: str) -> str:
    """Return how castline shows and stores a column its features read: the user's own name
    for the user's column, a plain word for castline's series column."""
    return _PLAIN.get(column, column)


def loaded_name(column: str) -> str:
    """Return the column a model file's name for castline's series column reads."""
    return _LOADED.get(column, column)


def period_ordinals(frame: pd.DataFrame) -> np.ndarray:
    """Return each row's period as an ordinal: periods since the one holding 1970-01-01
    (months, quarters or ISO weeks; see core/cadence.py)."""
    return np.asarray(frame[PERIOD].array.asi8, dtype=np.int64)
