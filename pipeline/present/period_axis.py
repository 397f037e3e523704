"""Date axes of quarters and ISO weeks: ticks at periods' first days, labelled as castline writes
the periods (``2024Q1``, ``2024-W05``). Months keep matplotlib's own date ticks (plots.date_axis)."""

from __future__ import annotations

import matplotlib.dates as mdates
import pandas as pd

from pipeline.core.cadence import Cadence


def period_ticks(axis, cadence: Cadence, most: int = 7) -> None:
    """Tick a date axis of quarters or ISO weeks at most ``most`` times (about), at periods' first
    days, each labelled as castline writes its period (``2024Q1``, ``2024-W05``). The step between
    ticks is a whole number of periods that divides a year where it can (1, 2 quarters or a year;
    1, 2, 4, 13, 26 weeks or a year), so that the ticks fall on the same places each year."""
    low, high = (mdates.num2date(x).replace(tzinfo=None) for x in axis.get_xlim())
    first = cadence.period(pd.Timestamp(low).to_period(cadence.freq).ordinal)
    count = max(int(pd.Timestamp(high).to_period(cadence.freq).ordinal - first.ordinal) + 1, 1)
    steps = [1, 2, 4] if cadence.name == "quarter" else [1, 2, 4, 13, 26, 52]
    step = next((s for s in steps if count / s <= most), steps[-1] * -(-count // (steps[-1] * most)))
    # Start at a period whose place in its year the step divides: each January, or ISO week 1, 14, 27, 40.
    start = first.ordinal
    while step in (2, 4, 13, 26, 52) and (int(cadence.of_year([start])[0]) - 1) % step:
        start += 1
    ticks = [cadence.period(o) for o in range(start, first.ordinal + count + 1, step)]
    places = [mdates.date2num(p.start_time) for p in ticks]
    axis.set_xticks(places)
    axis.set_xticklabels([cadence.label(p) for p in ticks], fontsize=7)
    axis.set_xlim(mdates.date2num(low), mdates.date2num(high))
