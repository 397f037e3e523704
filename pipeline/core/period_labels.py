"""Period labels as the run folder, the ledger and the pages hold them, read back whatever the spacing.

castline writes a period as ``2024-03`` (a month), ``2024Q1`` (a quarter) or ``2024-W05`` (an ISO
week): a label says its own spacing (``cadence.cadence_of_label``). The pages and the ledger's
readers get labels, not Periods, so these helpers turn them into what they need: the spacing of a
column of labels, the same period a year earlier, each period's first day for a date axis, and
the period's place on a line of ordinals.

A week written as pandas writes one (``2024-01-29/2024-02-04``, its first and last day) is read
as that week too, and a year earlier is written back the same way, so that it matches the labels
beside it.
"""

from __future__ import annotations

import re
from collections.abc import Callable

import pandas as pd

from pipeline.core.cadence import MONTH, WEEK, Cadence, cadence_of_label

PANDAS_WEEK = re.compile(r"\d{4}-\d{2}-\d{2}/\d{4}-\d{2}-\d{2}")


def _read(label) -> tuple[Cadence, pd.Period, Callable]:
    """Return a label's spacing, its period and how to write a period as it is written."""
    text = str(label).strip()
    if PANDAS_WEEK.fullmatch(text):
        return WEEK, pd.Period(text[:10], freq=WEEK.freq), str
    cadence = cadence_of_label(text)
    return cadence, cadence.parse(text), cadence.label


def cadence_of_labels(labels, default: Cadence = MONTH) -> Cadence:
    """Return the spacing of a column of period labels (its first that reads as one), else ``default``."""
    for text in pd.Series(labels, dtype=object).dropna().astype(str).head(20):
        try:
            return _read(text)[0]
        except ValueError:
            continue
    return default


def year_before(label) -> str:
    """Return the label of the same period a year earlier: 12 months, 4 quarters or 52 weeks back."""
    cadence, period, write = _read(label)
    return write(period - cadence.season_lag)


def first_days(labels) -> pd.DatetimeIndex:
    """Return the first day of each labelled period (as a date axis places it)."""
    texts = pd.Series(labels, dtype=object).astype(str)
    cadence = cadence_of_labels(texts)
    if cadence.name != "week":
        return pd.PeriodIndex(texts.to_numpy(), freq=cadence.freq).to_timestamp()
    starts = {text: _read(text)[1].start_time for text in texts.unique()}
    return pd.DatetimeIndex([starts[text] for text in texts])


def ordinal_of(label) -> int:
    """Return a labelled period's ordinal (steps of its spacing since the period of 1970-01-01)."""
    return int(_read(label)[1].ordinal)
