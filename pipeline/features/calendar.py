"""Terms of the calendar: trend, month of year, quarter, Fourier pairs, working days."""

from __future__ import annotations

import calendar as calendar_module

import numpy as np
import pandas as pd

from pipeline.core.columns import PERIOD, month_ordinals
from pipeline.core.errors import DataError, ModelFileError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.rows import first_row

MONTH_NAMES = list(calendar_module.month_name)   # MONTH_NAMES[3] == "March"


class TrendTerm:
    """Months since the first month of the training window (0 in that month)."""

    def fit(self, frame: pd.DataFrame, y=None) -> TrendTerm:
        self.first_month_ = pd.Period(ordinal=int(month_ordinals(frame).min()), freq="M")
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        return (month_ordinals(frame) - self.first_month_.ordinal).astype(float)[:, None]

    def get_feature_names_out(self) -> list[str]:
        return [f"months since {self.first_month_}"]

    def to_dict(self, parts=()) -> dict:
        """Return what was learned, as stored in a model file."""
        return encode_fields({"first_month_": self.first_month_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> TrendTerm:
        """Return the fitted term ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            term = cls()
            term.first_month_ = fields.period("first_month_")
        return term


class _PeriodDummies:
    """A 0/1 column per calendar level seen in the window, less the reference (the first seen)."""

    word = ""
    levels = range(0)   # the levels there are (months 1 to 12, quarters 1 to 4)

    def _level(self, frame: pd.DataFrame) -> np.ndarray:
        raise NotImplementedError

    def _label(self, level: int) -> str:
        raise NotImplementedError

    def fit(self, frame: pd.DataFrame, y=None):
        seen = sorted(set(self._level(frame).tolist()))
        self.reference_ = seen[0]
        self.levels_ = seen[1:]
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        levels = self._level(frame)
        unseen = ~np.isin(levels, [self.reference_, *self.levels_])
        if unseen.any():
            raise DataError(f"{self.word} {self._label(int(levels[unseen][0]))} does not occur in "
                            "the training window, so it has no coefficient",
                            row=first_row(frame, unseen))
        if not self.levels_:
            return np.empty((len(frame), 0))
        return np.column_stack([(levels == level).astype(float) for level in self.levels_])

    def get_feature_names_out(self) -> list[str]:
        return [f"{self.word}: {self._label(level)}" for level in self.levels_]

    def to_dict(self, parts=()) -> dict:
        """Return what was learned, as stored in a model file."""
        return encode_fields({"reference_": self.reference_, "levels_": self.levels_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION):
        """Return the fitted dummies ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            dummies = cls()
            dummies.reference_ = fields.whole("reference_")
            dummies.levels_ = fields.wholes("levels_")
        seen = [dummies.reference_, *dummies.levels_]
        if not set(seen) <= set(cls.levels) or seen != sorted(set(seen)):
            raise ModelFileError(f"{cls.__name__}: its levels are not {cls.word}s in order")
        return dummies


class MonthDummies(_PeriodDummies):
    """A 0/1 column per month of the year, less January (or the first month the window holds)."""

    word = "month"
    levels = range(1, 13)

    def _level(self, frame: pd.DataFrame) -> np.ndarray:
        return frame[PERIOD].dt.month.to_numpy(int)

    def _label(self, level: int) -> str:
        return MONTH_NAMES[level]


class QuarterDummies(_PeriodDummies):
    """A 0/1 column per quarter, less the first quarter (or the first the window holds)."""

    word = "quarter"
    levels = range(1, 5)

    def _level(self, frame: pd.DataFrame) -> np.ndarray:
        return frame[PERIOD].dt.quarter.to_numpy(int)

    def _label(self, level: int) -> str:
        return f"Q{level}"


class FourierTerms:
    """Sine and cosine of 2π·k·month/12 for k = 1..harmonics (month = 1 for January).

    At k = 6 the sine is zero in every month and is left out.
    """

    def __init__(self, harmonics: int = 2) -> None:
        self.harmonics = harmonics

    def _pairs(self) -> list[tuple[str, int]]:
        pairs = []
        for k in range(1, self.harmonics + 1):
            if k < 6:
                pairs.append(("sin", k))
            pairs.append(("cos", k))
        return pairs

    def fit(self, frame: pd.DataFrame, y=None) -> FourierTerms:
        self.fitted_ = True   # a fixed function of the month: nothing to learn
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        month = frame[PERIOD].dt.month.to_numpy(float)
        columns = [(np.sin if kind == "sin" else np.cos)(2 * np.pi * k * month / 12)
                   for kind, k in self._pairs()]
        return np.column_stack(columns) if len(month) else np.empty((0, len(columns)))

    def get_feature_names_out(self) -> list[str]:
        return [f"{kind}(2π·{f'{k}·' if k > 1 else ''}month/12)" for kind, k in self._pairs()]

    def to_dict(self, parts=()) -> dict:
        """Return the settings, as stored in a model file."""
        return encode_fields({"harmonics": self.harmonics, "fitted_": self.fitted_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> FourierTerms:
        """Return the fitted terms ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            terms = cls(fields.whole("harmonics", minimum=1))
            if terms.harmonics > 6:
                raise fields.bad("harmonics", "at most 6")
            terms.fitted_ = _fitted(fields)
        return terms


def working_days_in_month(months: np.ndarray, closures=()) -> np.ndarray:
    """Return, for each month ordinal, its weekdays (Monday to Friday) not among the closures."""
    months = np.asarray(months, dtype=np.int64)
    closed = np.unique(np.asarray(list(closures), dtype="datetime64[D]"))
    counts = {}
    for month in np.unique(months):
        start = np.datetime64(pd.Period(ordinal=int(month), freq="M").start_time.date(), "D")
        days = np.arange(start, np.datetime64(pd.Period(ordinal=int(month) + 1, freq="M")
                                              .start_time.date(), "D"))
        weekday = (days.astype(np.int64) + 3) % 7          # 1970-01-01 was a Thursday; Monday = 0
        counts[int(month)] = int(((weekday < 5) & ~np.isin(days, closed)).sum())
    return np.array([counts[int(month)] for month in months], dtype=float)


class WorkingDays:
    """The number of working days in each month: weekdays, less the spec's closure dates."""

    def __init__(self, closures=()) -> None:
        self.closures = list(closures)

    def fit(self, frame: pd.DataFrame, y=None) -> WorkingDays:
        self.fitted_ = True   # a fixed function of the month: nothing to learn
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        return working_days_in_month(month_ordinals(frame), self.closures)[:, None]

    def get_feature_names_out(self) -> list[str]:
        return ["working days in the month"]

    def to_dict(self, parts=()) -> dict:
        """Return the settings (the closure dates), as stored in a model file."""
        return encode_fields({"closures": self.closures, "fitted_": self.fitted_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> WorkingDays:
        """Return the fitted term ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            closures = fields.value("closures")
            if not isinstance(closures, list) or not all(isinstance(day, pd.Timestamp) for day in closures):
                raise fields.bad("closures", "a list of dates")
            days = cls([day.date() for day in closures])
            days.fitted_ = _fitted(fields)
        return days


def _fitted(fields: StoredFields) -> bool:
    """Read the mark a term with nothing to learn sets when fitted."""
    if fields.raw("fitted_") is not True:
        raise fields.bad("fitted_", "true")
    return True
