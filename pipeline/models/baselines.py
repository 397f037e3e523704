"""Baselines: what a planner falls back on without a model, each fitted per series.

The mean of the training months is the reference every run compares against. The others
need the rows' months (``design.period``) and so apply only to time-ordered
validation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.design import series_index
from pipeline.core.errors import ModelFileError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields, is_number
from pipeline.features.grouped import group_last, group_means
from pipeline.models.contract import Model

SEASON = 12       # months in a year; a design's own season is design.cadence.season_lag
MOST_SEASON = 52  # the longest season (weeks), the bound a model file's table is read against


def _by_series(design, y) -> pd.DataFrame:
    frame = pd.DataFrame({"series": design.series, "y": np.asarray(y, float)})
    if design.period is not None:
        frame["period"] = design.period
    return frame


def _series_means(design, y) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return the series the rows hold, in sorted order, each row's code into them, and each
    series' mean."""
    codes, names = series_index(design)
    values = np.asarray(y, float)
    count = np.bincount(codes, minlength=len(names))
    means = np.bincount(codes, weights=values, minlength=len(names)) / np.maximum(count, 1)
    return np.asarray(names, object), codes, means


class _PerSeriesBaseline(Model):
    """Shared prediction for baselines that store one number per series."""

    def predict(self, design) -> np.ndarray:
        return np.array([self.values_.get(s, self.fallback_)
                         for s in np.asarray(design.series).tolist()], float)

    def coefficient_table(self) -> pd.DataFrame:
        return pd.DataFrame({"term": [f"{self.word} of {s}" for s in self.values_],
                             "estimate": list(self.values_.values())})

    def to_dict(self) -> dict:
        """Return what was learned, as a model file stores it: each series' number and the
        number for a series the window did not hold."""
        return encode_fields({"values_": self.values_, "fallback_": self.fallback_})

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION):
        """Return the fitted baseline ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, version=version) as fields:
            model = cls()
            model.values_ = fields.number_map("values_")
            model.fallback_ = fields.number("fallback_")
        return model


class MeanBaseline(_PerSeriesBaseline):
    """Predicts, for each series, the mean of its target over the training window."""

    word = "mean"

    def fit(self, design, y) -> MeanBaseline:
        names, _, means = _series_means(design, y)
        self.values_ = dict(zip(names.tolist(), means.tolist()))
        self.fallback_ = float(np.mean(y))
        return self


class LastValue(_PerSeriesBaseline):
    """Predicts, for each series, its last value in the training window."""

    word = "last value"

    def fit(self, design, y) -> LastValue:
        codes, names = series_index(design)
        order = np.argsort(np.asarray(design.period), kind="stable")   # months in time order
        values = np.asarray(y, float)[order]
        self.values_ = dict(zip(names.tolist(), group_last(codes[order], values, len(names)).tolist()))
        self.fallback_ = float(values[-1])
        return self


class _ByMonthBaseline(Model):
    """Shared prediction and storage for baselines that store one number per (series, month of
    the year), falling back to the series' mean, then to the overall mean."""

    term = "month {month} of {series}"

    def predict(self, design) -> np.ndarray:
        months = (np.asarray(design.period) % design.cadence.season_lag).tolist()
        return np.array([self.values_.get((s, m), self.means_.get(s, self.fallback_))
                         for s, m in zip(np.asarray(design.series).tolist(), months)], float)

    def coefficient_table(self) -> pd.DataFrame:
        return pd.DataFrame({"term": [self.term.format(month=m + 1, series=s) for s, m in self.values_],
                             "estimate": list(self.values_.values())})

    def to_dict(self) -> dict:
        """Return what was learned, as a model file stores it: the value of each (series,
        month of the year from 0), each series' mean, and the overall mean."""
        return encode_fields({"values_": self.values_, "means_": self.means_,
                              "fallback_": self.fallback_})

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION):
        """Return the fitted baseline ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, version=version) as fields:
            model = cls()
            values = fields.value("values_")
            if not isinstance(values, dict) or not all(
                    isinstance(key, tuple) and len(key) == 2 and isinstance(key[0], str)
                    and isinstance(key[1], int) and not isinstance(key[1], bool)
                    and 0 <= key[1] < MOST_SEASON and is_number(value) for key, value in values.items()):
                raise fields.bad("values_", "a table of numbers by series and month of the year")
            model.values_ = {key: float(value) for key, value in values.items()}
            model.means_ = fields.number_map("means_")
            model.fallback_ = fields.number("fallback_")
        return model


class SeasonalNaive(_ByMonthBaseline):
    """Predicts, for each series, its value in the same month of the latest year in training.

    A month of the year that the training window lacks falls back to the series' mean.
    """

    def fit(self, design, y) -> SeasonalNaive:
        names, codes, means = _series_means(design, y)
        values = np.asarray(y, float)
        period = np.asarray(design.period)
        season = design.cadence.season_lag
        # The last value of each (series, month of the year), months in time order.
        order = np.argsort(period, kind="stable")[::-1]
        keys = codes[order].astype(np.int64) * season + period[order] % season
        unique, first = np.unique(keys, return_index=True)
        self.values_ = dict(zip(zip(names[unique // season].tolist(), (unique % season).tolist()),
                                values[order][first].tolist()))
        self.means_ = dict(zip(names.tolist(), means.tolist()))
        self.fallback_ = float(values.mean())
        return self


class CalendarMonthMean(_ByMonthBaseline):
    """Predicts, for each series, the mean of its training values in the same month of the year.

    The month of the year is ``design.period % 12`` (the quarter ``% 4``; for weeks the place
    in a 52-week cycle, ``% 52``, so a year back is 52 weeks back). A (series, month) the training window
    lacks falls back to the series' mean; a series it lacks, to the overall mean.
    """

    term = "mean of month {month} of {series}"

    def fit(self, design, y) -> CalendarMonthMean:
        names, codes, means = _series_means(design, y)
        values = np.asarray(y, float)
        season = design.cadence.season_lag
        keys = codes.astype(np.int64) * season + np.asarray(design.period) % season
        unique, inverse = np.unique(keys, return_inverse=True)
        month_means = (np.bincount(inverse, weights=values, minlength=len(unique))
                       / np.bincount(inverse, minlength=len(unique)))
        self.values_ = dict(zip(zip(names[unique // season].tolist(), (unique % season).tolist()),
                                month_means.tolist()))
        self.means_ = dict(zip(names.tolist(), means.tolist()))
        self.fallback_ = float(values.mean())
        return self


class TrailingMean(_PerSeriesBaseline):
    """Predicts, for each series, the mean of its last 12 months in the training window.

    A series' last 12 months are its rows whose month (``design.period``) is later than its own
    last month less 12, so fewer months for a series shorter than a year. A series the window
    lacks gets the mean of all the series' trailing months taken together.
    """

    word = "trailing 12-month mean"

    def fit(self, design, y) -> TrailingMean:
        codes, names = series_index(design)
        period = np.asarray(design.period, np.int64)
        last = np.full(len(names), np.iinfo(np.int64).min)
        np.maximum.at(last, codes, period)
        recent = period > last[codes] - design.cadence.season_lag
        values = np.asarray(y, float)[recent]
        # Summed as pandas' groupby sums them (group_means), so the means do not change by a bit.
        self.values_ = dict(zip(names.tolist(), group_means(codes[recent], values, len(names)).tolist()))
        self.fallback_ = float(values.sum() / len(values))
        return self


class Drift(Model):
    """Predicts, for each series, the straight line through its first and last training values."""


    def fit(self, design, y) -> Drift:
        frame = _by_series(design, y).sort_values("period", kind="stable")
        grouped = frame.groupby("series")
        first, last = grouped.first(), grouped.last()
        span = (last["period"] - first["period"]).replace(0, np.nan)
        slope = ((last["y"] - first["y"]) / span).fillna(0.0)
        self.last_ = last["y"].to_dict()
        self.last_period_ = last["period"].to_dict()
        self.slope_ = slope.to_dict()
        self.fallback_ = float(frame["y"].mean())
        return self

    def predict(self, design) -> np.ndarray:
        out = []
        for s, period in zip(design.series, design.period):
            if s not in self.last_:
                out.append(self.fallback_)
                continue
            out.append(self.last_[s] + self.slope_[s] * (period - self.last_period_[s]))
        return np.array(out, float)

    def coefficient_table(self) -> pd.DataFrame:
        return pd.DataFrame({"term": [f"slope per month of {s}" for s in self.slope_],
                             "estimate": list(self.slope_.values())})

    def to_dict(self) -> dict:
        """Return what was learned, as a model file stores it: per series, its last value,
        the month of it (an ordinal) and the slope; and the overall mean."""
        return encode_fields({"last_": self.last_, "last_period_": self.last_period_,
                              "slope_": self.slope_, "fallback_": self.fallback_})

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION) -> Drift:
        """Return the fitted baseline ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, version=version) as fields:
            model = cls()
            model.last_ = fields.number_map("last_")
            periods = fields.value("last_period_")
            if not isinstance(periods, dict) or not all(
                    isinstance(month, int) and not isinstance(month, bool) for month in periods.values()):
                raise fields.bad("last_period_", "a table of months by series")
            model.last_period_ = periods
            model.slope_ = fields.number_map("slope_")
            model.fallback_ = fields.number("fallback_")
        if not model.last_.keys() == model.last_period_.keys() == model.slope_.keys():
            raise ModelFileError(f"{cls.__name__}: its tables name different series")
        return model
