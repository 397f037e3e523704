"""Moving holidays and dated events, as numbers per period.

A moving holiday falls on different dates each year, so a period's sales move with
it: Easter lands in March one year and in April the next. Each holiday castline knows
is a fixed set of days counted from Western (Gregorian) Easter Sunday, as
``dateutil.easter.easter`` gives it. Its term in a period is the share of those days
that fall in the period: for the four days of Easter, 0, 1/4, 1/2, 3/4 or 1; for a
holiday of a single day, 1 in the period holding it and 0 elsewhere. Over the periods
of a year the shares of one year's holiday sum to 1.

The names, each a plain word of the spec's ``drivers.calendar.holidays``:

- ``easter``: Good Friday to Easter Monday, four days (Easter Sunday -2 to +1);
- ``good_friday``: Good Friday (Easter Sunday -2);
- ``easter_monday``: Easter Monday (Easter Sunday +1);
- ``ascension``: Ascension Day, a Thursday (Easter Sunday +39);
- ``whit_monday``: Whit Monday, the Monday after Pentecost (Easter Sunday +50);
- ``shrove_tuesday``: Shrove Tuesday, the day before Ash Wednesday (Easter Sunday -47);
- ``mothering_sunday``: Mothering Sunday as kept in the United Kingdom, the fourth
  Sunday of Lent (Easter Sunday -21).

A dated event (``drivers.calendar.events``) is the analyst's own list of dates; its
term in a period is how many of its dates (each counted once) fall in the period.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date

import numpy as np
import pandas as pd
from dateutil.easter import EASTER_WESTERN, easter

from pipeline.core.cadence import Cadence


@dataclass(frozen=True)
class Holiday:
    """A moving holiday: its days, counted from Easter Sunday, and its name in words."""

    name: str                  # the spec's word: "good_friday"
    words: str                 # how a sentence names it: "Good Friday"
    offsets: tuple[int, ...]   # its days, in days after Easter Sunday (negative: before)

    def days(self, year: int) -> np.ndarray:
        """Return the holiday's days in one year (datetime64[D])."""
        sunday = np.datetime64(easter_sunday(year), "D")
        return sunday + np.asarray(self.offsets, dtype="timedelta64[D]")


HOLIDAYS = {holiday.name: holiday for holiday in (
    Holiday("easter", "Easter", (-2, -1, 0, 1)),
    Holiday("good_friday", "Good Friday", (-2,)),
    Holiday("easter_monday", "Easter Monday", (1,)),
    Holiday("ascension", "Ascension Day", (39,)),
    Holiday("whit_monday", "Whit Monday", (50,)),
    Holiday("shrove_tuesday", "Shrove Tuesday", (-47,)),
    Holiday("mothering_sunday", "Mothering Sunday", (-21,)),
)}

HOLIDAY_NAMES = tuple(HOLIDAYS)


def easter_sunday(year: int) -> date:
    """Return Western (Gregorian) Easter Sunday of a year."""
    return easter(int(year), EASTER_WESTERN)


def _years(ordinals: np.ndarray, cadence: Cadence) -> range:
    """Return the years whose holidays may fall in the periods, one to spare either side."""
    firsts = cadence.first_days([ordinals.min(), ordinals.max() + 1])
    return range(int(str(firsts[0])[:4]) - 1, int(str(firsts[1])[:4]) + 2)


def _period_of(days: np.ndarray, cadence: Cadence) -> np.ndarray:
    """Return the ordinal of the period holding each day."""
    return np.asarray(pd.DatetimeIndex(days).to_period(cadence.freq).asi8, dtype=np.int64)


def holiday_shares(name: str, ordinals, cadence: Cadence) -> np.ndarray:
    """Return, for each period ordinal, the share (0 to 1) of the holiday's days it holds.

    A holiday of one day gives 1 in its period and 0 elsewhere. KeyError for a name
    castline does not know (the spec refuses those first).
    """
    holiday = HOLIDAYS[name]
    ordinals = np.asarray(ordinals, dtype=np.int64)
    if not len(ordinals):
        return np.zeros(0)
    shares: dict[int, float] = {}
    for year in _years(ordinals, cadence):
        held = _period_of(holiday.days(year), cadence)
        for period in held.tolist():
            shares[period] = shares.get(period, 0.0) + 1 / len(held)
    return np.array([shares.get(int(ordinal), 0.0) for ordinal in ordinals])


def dates_in_periods(dates, ordinals, cadence: Cadence) -> np.ndarray:
    """Return, for each period ordinal, how many of the dates fall in it (a date given
    twice counts once)."""
    ordinals = np.asarray(ordinals, dtype=np.int64)
    days = np.unique(np.asarray([np.datetime64(pd.Timestamp(day).date(), "D") for day in dates],
                                dtype="datetime64[D]"))
    if not len(days) or not len(ordinals):
        return np.zeros(len(ordinals))
    held, counts = np.unique(_period_of(days, cadence), return_counts=True)
    found = dict(zip(held.tolist(), counts.tolist(), strict=True))
    return np.array([float(found.get(int(ordinal), 0)) for ordinal in ordinals])
