"""How the features name rows and months in their messages."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.cadence import label_of
from pipeline.core.columns import PERIOD, ROW


def first_row(frame: pd.DataFrame, mask: np.ndarray) -> int | None:
    """Return the input row (file line) of the first row where mask holds."""
    if ROW not in frame.columns or not mask.any():
        return None
    row = frame[ROW].to_numpy()[np.flatnonzero(mask)[0]]
    return None if pd.isna(row) else int(row)


def which_rows(frame: pd.DataFrame, mask: np.ndarray) -> str:
    """Return 'N of the M rows from 2019-01 to 2026-10' for the rows where mask holds."""
    text = f"{int(mask.sum())} of the {len(frame)} rows"
    if PERIOD in frame.columns and len(frame):
        text += f" from {label_of(frame[PERIOD].min())} to {label_of(frame[PERIOD].max())}"
    return text


def months_phrase(count: int) -> str:
    return "1 month" if count == 1 else f"{count} months"
