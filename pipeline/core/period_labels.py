"""Period labels as the run folder, the ledger and the pages hold them, read back whatever the spacing.

castline writes a period as ``2024-03`` (a month), ``2024Q1`` (a quarter) or ``2024-W05`` (an ISO
week): a label says its own spacing (``cadence.cadence_of_label``). The pages and the ledger's
readers get labels, not Periods, so these helpers turn them into what they need: the spacing of a
column of labels, the same period a year earlier, each period's first day for a date axis, and
the period's place on a line of ordinals.
"""

from __future__ import annotations

import pandas as pd

from pipeline.core.cadence import MONTH, Cadence, cadence_of_label, parse_label


def cadence_of_labels(labels, default: Cadence = MONTH) -> Cadence:
    """Return the spacing of a column of period labels (its first that reads as one), else ``default``."""
    for text in pd.Series(labels, dtype=object).dropna().astype(str).head(20):
        try:
            return cadence_of_label(text)
        except ValueError:
            continue
    return default


def year_before(label) -> str:
    """Return the label of the same period a year earlier: 12 months, 4 quarters or 52 weeks back."""
    cadence = cadence_of_label(str(label))
    return cadence.label(cadence.parse(str(label)) - cadence.season_lag)


def first_days(labels) -> pd.DatetimeIndex:
    """Return the first day of each labelled period (as a date axis places it)."""
    texts = pd.Series(labels, dtype=object).astype(str)
    cadence = cadence_of_labels(texts)
    if cadence.name != "week":
        return pd.PeriodIndex(texts.to_numpy(), freq=cadence.freq).to_timestamp()
    starts = {text: cadence.parse(text).start_time for text in texts.unique()}
    return pd.DatetimeIndex([starts[text] for text in texts])


def ordinal_of(label) -> int:
    """Return a labelled period's ordinal (steps of its spacing since the period of 1970-01-01)."""
    return int(parse_label(str(label)).ordinal)
