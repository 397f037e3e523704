"""Date axes of quarters and ISO weeks: ticks at periods' first days, labelled as castline writes
the periods (``2024Q1``, ``2024-W05``). Months keep matplotlib's own date ticks (plots.date_axis)."""

from __future__ import annotations

import matplotlib.dates as mdates
import pandas as pd

from pipeline.core.cadence import Cadence


def period_ticks(axis, cadence: Cadence, most: int = 7) -> None:
    """Tick a date axis of quarters or ISO weeks at most ``most`` times (about), at periods' first
    days, each labelled as castline writes its period (``2024Q1``, ``2024-W05``). The step between
    ticks is a whole number of periods that divides a year (1 or 2 quarters; 1, 2, 4, 13 or 26
    weeks) or a whole number of years, and the ticks start where the step divides the period's
    place in its year (each Q1 or Q3; ISO week 1, 14, 27, 40; a year's first period), so that they
    fall on the same places each year."""
    low, high = (mdates.num2date(x).replace(tzinfo=None) for x in axis.get_xlim())
    first = pd.Timestamp(low).to_period(cadence.freq).ordinal
    last = pd.Timestamp(high).to_period(cadence.freq).ordinal
    count = max(last - first + 1, 1)
    year = cadence.season_lag
    within = [1, 2] if cadence.name == "quarter" else [1, 2, 4, 13, 26]
    steps = within + [year * n for n in (1, 2, 5, 10, 20, 50, 100)]
    step = next((s for s in steps if count / s <= most), steps[-1])
    # Ticks where the step divides (place in year − 1); a step of years, at each year's first period.
    start = next((o for o in range(first, first + year + 2)
                  if (int(cadence.of_year([o])[0]) == 1 if step >= year
                      else (int(cadence.of_year([o])[0]) - 1) % step == 0)), first)
    ticks = [cadence.period(o) for o in range(start, last + 1, step)]
    axis.set_xticks([mdates.date2num(p.start_time) for p in ticks])
    axis.set_xticklabels([cadence.label(p) for p in ticks], fontsize=7)
    axis.set_xlim(mdates.date2num(low), mdates.date2num(high))
