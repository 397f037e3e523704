"""Terms of the calendar: trend, season (month, quarter or week of year), quarter, Fourier
pairs, working days; each counted in the data's periods (core/cadence.py)."""

from __future__ import annotations

import calendar as calendar_module

import numpy as np
import pandas as pd

from pipeline.core.cadence import MONTH, WEEK, Cadence, cadence_named, cadence_of, cadence_of_freq
from pipeline.core.columns import PERIOD, period_ordinals
from pipeline.core.errors import DataError, ModelFileError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.rows import first_row

MONTH_NAMES = list(calendar_module.month_name)   # MONTH_NAMES[3] == "March"


class TrendTerm:
    """Periods since the first period of the training window (0 in that period)."""

    def fit(self, frame: pd.DataFrame, y=None) -> TrendTerm:
        self.first_month_ = cadence_of(frame).period(period_ordinals(frame).min())
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        return (period_ordinals(frame) - self.first_month_.ordinal).astype(float)[:, None]

    def get_feature_names_out(self) -> list[str]:
        cadence = cadence_of_freq(self.first_month_)
        return [f"{cadence.plural} since {cadence.label(self.first_month_)}"]

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
        if cadence_of(frame) is WEEK:   # a week is in the quarter that holds most of its days
            thursday = WEEK.first_days(period_ordinals(frame)) + np.timedelta64(3, "D")
            return pd.DatetimeIndex(thursday).quarter.to_numpy(int)
        return frame[PERIOD].dt.quarter.to_numpy(int)

    def _label(self, level: int) -> str:
        return f"Q{level}"


class WeekDummies(_PeriodDummies):
    """A 0/1 column per ISO week of the year, less the first the window holds. Week 53, which
    only some years have, shares week 52's column: too rare to learn a term of its own."""

    word = "week"
    levels = range(1, 53)

    def _level(self, frame: pd.DataFrame) -> np.ndarray:
        return np.minimum(WEEK.of_year(period_ordinals(frame)), 52)

    def _label(self, level: int) -> str:
        return str(level)


class FourierTerms:
    """Sine and cosine pairs of the period's place in its year, for k = 1..harmonics.

    Months: 2π·k·month/12 (month = 1 for January); at k = 6 the sine is zero in every month
    and is left out. Quarters: 2π·k·quarter/4; at k = 2 the sine is zero and left out.
    Weeks: 2π·k·t/(365.25/7), t the week's Thursday (the day that places an ISO week in its
    year) in weeks since 1970-01-01, so the terms follow the solar year and a 53-week year
    shifts nothing.
    """

    def __init__(self, harmonics: int = 2, period: str = "month") -> None:
        self.harmonics = harmonics
        self.period = period

    def _pairs(self) -> list[tuple[str, int]]:
        half = {"month": 6, "quarter": 2}.get(self.period)   # where the sine vanishes
        pairs = []
        for k in range(1, self.harmonics + 1):
            if k != half:
                pairs.append(("sin", k))
            pairs.append(("cos", k))
        return pairs

    def fit(self, frame: pd.DataFrame, y=None) -> FourierTerms:
        self.period = cadence_of(frame).name
        self.fitted_ = True   # a fixed function of the period: nothing to learn
        return self

    def _place(self, frame: pd.DataFrame) -> tuple[np.ndarray, float]:
        """Return each row's place in its year and the length of the year in those units."""
        cadence = cadence_named(self.period)
        if self.period == "week":
            monday = cadence.first_days(period_ordinals(frame)).astype(np.int64)
            return (monday + 3) / 7.0, cadence.per_year
        return cadence.of_year(period_ordinals(frame)).astype(float), cadence.per_year

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        place, length = self._place(frame)
        columns = [(np.sin if kind == "sin" else np.cos)(2 * np.pi * k * place / length)
                   for kind, k in self._pairs()]
        return np.column_stack(columns) if len(place) else np.empty((0, len(columns)))

    def get_feature_names_out(self) -> list[str]:
        place = {"month": "month/12", "quarter": "quarter/4", "week": "week/52.18"}[self.period]
        return [f"{kind}(2π·{f'{k}·' if k > 1 else ''}{place})" for kind, k in self._pairs()]

    def to_dict(self, parts=()) -> dict:
        """Return the settings, as stored in a model file."""
        fields = {"harmonics": self.harmonics, "fitted_": self.fitted_}
        if self.period != "month":   # a monthly file is written as before periods were added
            fields["period"] = self.period
        return encode_fields(fields)

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> FourierTerms:
        """Return the fitted terms ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            period = fields.raw("period") if "period" in data else "month"
            if period not in MOST_PAIRS:
                raise fields.bad("period", "month, quarter or week")
            terms = cls(fields.whole("harmonics", minimum=1), period)
            if terms.harmonics > MOST_PAIRS[period]:
                raise fields.bad("harmonics", f"at most {MOST_PAIRS[period]}")
            terms.fitted_ = _fitted(fields)
        return terms


MOST_PAIRS = {"month": 6, "quarter": 2, "week": 26}


def working_days_in_month(months: np.ndarray, closures=(), cadence: Cadence = MONTH) -> np.ndarray:
    """Return, for each period ordinal, its weekdays (Monday to Friday) not among the closures."""
    months = np.asarray(months, dtype=np.int64)
    closed = np.unique(np.asarray(list(closures), dtype="datetime64[D]"))
    counts = {}
    for month in np.unique(months):
        days = cadence.days_in(month)
        weekday = (days.astype(np.int64) + 3) % 7          # 1970-01-01 was a Thursday; Monday = 0
        counts[int(month)] = int(((weekday < 5) & ~np.isin(days, closed)).sum())
    return np.array([counts[int(month)] for month in months], dtype=float)


class WorkingDays:
    """The number of working days in each period: weekdays, less the spec's closure dates."""

    def __init__(self, closures=()) -> None:
        self.closures = list(closures)

    period = "month"

    def fit(self, frame: pd.DataFrame, y=None) -> WorkingDays:
        self.period = cadence_of(frame).name
        self.fitted_ = True   # a fixed function of the period: nothing to learn
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        return working_days_in_month(period_ordinals(frame), self.closures,
                                     cadence_named(self.period))[:, None]

    def get_feature_names_out(self) -> list[str]:
        return [f"working days in the {self.period}"]

    def to_dict(self, parts=()) -> dict:
        """Return the settings (the closure dates), as stored in a model file."""
        fields = {"closures": self.closures, "fitted_": self.fitted_}
        if self.period != "month":   # a monthly file is written as before periods were added
            fields["period"] = self.period
        return encode_fields(fields)

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> WorkingDays:
        """Return the fitted term ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            closures = fields.value("closures")
            if not isinstance(closures, list) or not all(isinstance(day, pd.Timestamp) for day in closures):
                raise fields.bad("closures", "a list of dates")
            days = cls([day.date() for day in closures])
            days.period = fields.raw("period") if "period" in data else "month"
            if days.period not in MOST_PAIRS:
                raise fields.bad("period", "month, quarter or week")
            days.fitted_ = _fitted(fields)
        return days


def _fitted(fields: StoredFields) -> bool:
    """Read the mark a term with nothing to learn sets when fitted."""
    if fields.raw("fitted_") is not True:
        raise fields.bad("fitted_", "true")
    return True
