"""Calendar terms of moving holidays and of the analyst's dated events.

``HolidayShares``: a column per holiday the spec names (``drivers.calendar.holidays``),
the share of the holiday's days in each period (see ``pipeline.core.holidays``).
``EventCounts``: a column per event (``drivers.calendar.events``), how many of its dates
fall in each period. Both are fixed functions of the period: fitting learns only the
spacing of the periods (for the columns' names) and which columns are zero in every row
of the training window. Such a column has no coefficient (the fit leaves an all-zero
column out, and says so), so a row to predict in which it is not zero is refused, naming
the holiday or event and the training window, rather than forecast as if it were absent.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.cadence import CADENCES, Cadence, cadence_named, cadence_of
from pipeline.core.columns import PERIOD
from pipeline.core.errors import DataError
from pipeline.core.holidays import HOLIDAYS, dates_in_periods, holiday_shares
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.rows import first_row


def _ordinals(frame: pd.DataFrame) -> np.ndarray:
    return np.asarray(frame[PERIOD].array.asi8, dtype=np.int64)


class _DatedTerms:
    """What the two terms share: a column per name, learned spacing, and the absent columns."""

    def _names(self) -> list[str]:
        raise NotImplementedError

    def _columns(self, ordinals: np.ndarray, cadence: Cadence) -> np.ndarray:
        raise NotImplementedError

    def _column_name(self, name: str, period: str) -> str:
        raise NotImplementedError

    def _absent_words(self, name: str) -> str:
        raise NotImplementedError

    def fit(self, frame: pd.DataFrame, y=None):
        cadence = cadence_of(frame)
        ordinals = _ordinals(frame)
        values = self._columns(ordinals, cadence)
        self.period_ = cadence.name
        self.absent_ = [name for name, column in zip(self._names(), values.T, strict=True)
                        if not column.any()]
        self.window_ = ([cadence.label(ordinals.min()), cadence.label(ordinals.max())]
                        if len(ordinals) else [])
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        cadence = cadence_of(frame)
        if cadence.name != self.period_:
            raise DataError(f"the rows are {cadence.plural}, but the {self._kind} terms were fitted "
                            f"on {cadence_named(self.period_).plural}")
        values = self._columns(_ordinals(frame), cadence)
        for place, name in enumerate(self._names()):
            present = values[:, place] != 0
            if name in self.absent_ and present.any():
                at = frame[PERIOD].iloc[int(np.argmax(present))]
                window = " to ".join(self.window_) or "none"
                raise DataError(f"{self._absent_words(name)} in {cadence.label(at)} but in no "
                                f"{self.period_} of the training window ({window}), so it has no "
                                "coefficient; train on a window that holds it, or leave it out",
                                row=first_row(frame, present))
        return values

    def get_feature_names_out(self) -> list[str]:
        return [self._column_name(name, self.period_) for name in self._names()]

    def _check_learned(self, fields: StoredFields) -> None:
        if self.period_ not in CADENCES:
            raise fields.bad("period_", "one of " + ", ".join(CADENCES))
        if not set(self.absent_) <= set(self._names()):
            raise fields.bad("absent_", f"among the {self._kind} of the term")
        if len(self.window_) not in (0, 2):
            raise fields.bad("window_", "the first and last periods of the window")


class HolidayShares(_DatedTerms):
    """The share of each moving holiday's days that falls in the period (a holiday of one
    day: 1 in its period, 0 elsewhere)."""

    _kind = "holidays"

    def __init__(self, names=()) -> None:
        self.names = list(names)

    def _names(self) -> list[str]:
        return self.names

    def _columns(self, ordinals: np.ndarray, cadence: Cadence) -> np.ndarray:
        columns = [holiday_shares(name, ordinals, cadence) for name in self.names]
        return np.column_stack(columns) if columns else np.empty((len(ordinals), 0))

    def _column_name(self, name: str, period: str) -> str:
        holiday = HOLIDAYS[name]
        if len(holiday.offsets) == 1:
            return f"{holiday.words} in the {period}"
        return f"share of {holiday.words} in the {period}"

    def _absent_words(self, name: str) -> str:
        return f"the holiday '{name}' falls"

    def to_dict(self, parts=()) -> dict:
        """Return the settings and what was learned, as stored in a model file."""
        return encode_fields({"names": self.names, "period_": self.period_, "absent_": self.absent_,
                              "window_": self.window_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> HolidayShares:
        """Return the fitted term ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            names = fields.texts("names")
            if not names or not set(names) <= set(HOLIDAYS) or len(set(names)) != len(names):
                raise fields.bad("names", "holidays castline knows, each once")
            term = cls(names)
            term.period_ = fields.text("period_")
            term.absent_ = fields.texts("absent_")
            term.window_ = fields.texts("window_")
            term._check_learned(fields)
        return term


class EventCounts(_DatedTerms):
    """How many of each dated event's dates fall in the period."""

    _kind = "events"

    def __init__(self, events=None) -> None:
        self.events = {name: list(dates) for name, dates in (events or {}).items()}

    def _names(self) -> list[str]:
        return list(self.events)

    def _columns(self, ordinals: np.ndarray, cadence: Cadence) -> np.ndarray:
        columns = [dates_in_periods(dates, ordinals, cadence) for dates in self.events.values()]
        return np.column_stack(columns) if columns else np.empty((len(ordinals), 0))

    def _column_name(self, name: str, period: str) -> str:
        return f"{name} dates in the {period}"

    def _absent_words(self, name: str) -> str:
        return f"the event '{name}' has a date"

    def to_dict(self, parts=()) -> dict:
        """Return the settings (the events' dates) and what was learned, as stored in a model file."""
        return encode_fields({"events": self.events, "period_": self.period_, "absent_": self.absent_,
                              "window_": self.window_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> EventCounts:
        """Return the fitted term ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            events = fields.value("events")
            if not isinstance(events, dict) or not events or not all(
                    isinstance(name, str) and isinstance(dates, list) and dates
                    and all(isinstance(day, pd.Timestamp) for day in dates)
                    for name, dates in events.items()):
                raise fields.bad("events", "a table of lists of dates by name")
            term = cls({name: [day.date() for day in dates] for name, dates in events.items()})
            term.period_ = fields.text("period_")
            term.absent_ = fields.texts("absent_")
            term.window_ = fields.texts("window_")
            term._check_learned(fields)
        return term

