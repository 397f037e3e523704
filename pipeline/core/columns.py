"""The names castline gives its own columns, and reading them.

The checked frame holds the user's columns and these: each row's month, its
series and its line in the input file.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

PERIOD = "period"
SERIES = "series"
ROW = "source_row"


def month_ordinals(frame: pd.DataFrame) -> np.ndarray:
    """Return each row's month as an ordinal (months since 1970-01)."""
    return np.asarray(frame[PERIOD].array.asi8, dtype=np.int64)
