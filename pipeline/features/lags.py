"""Earlier values of the target or a driver, per series: lags, rolling means, differences."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_named
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.spec import (
    KeyPath,
)


class LagFeatures:
    """Earlier values of one column, per series: lags, rolling means and differences.

    Each feature is read from the month it names in the same series: lag k is
    the value k months earlier; the rolling mean over w is the mean of the w
    months ending ``start_lag`` months earlier; the difference over d is the
    value ``start_lag`` months earlier minus the value d months before that.
    A month that is not there (before the series starts, a gap, or after the
    origin for the target) makes the feature unavailable (NaN).

    ``fit`` keeps the column's values in the training window (``values_``),
    keyed by series and month: the values known at the origin.
    """

    def __init__(self, column: str, lags=(), rolling_means=(), differences=(), start_lag: int = 1,
                 label: str | None = None, of_target: bool = False, key: KeyPath = (),
                 period: str = "month") -> None:
        self.period = period   # the spacing counted back: month, quarter or week
        self.column = column
        self.lags = list(lags)
        self.rolling_means = list(rolling_means)
        self.differences = list(differences)
        self.start_lag = start_lag
        self.label = label or column
        self.of_target = of_target
        self.key = key

    def fit(self, values: pd.Series) -> LagFeatures:
        self.values_ = values.dropna()
        return self

    @staticmethod
    def _lookup(values: pd.Series, series: np.ndarray, months: np.ndarray, back: int) -> np.ndarray:
        wanted = pd.MultiIndex.from_arrays([series, months - back])
        return values.reindex(wanted).to_numpy(float)

    def transform(self, series: np.ndarray, months: np.ndarray,
                  extra: pd.Series | None = None) -> np.ndarray:
        """Return the features of rows given by series and month, from the window's values
        and any extra values (which take precedence where both hold a month)."""
        values = self.values_
        if extra is not None and len(extra):
            values = pd.concat([extra.dropna(), values])
            values = values[~values.index.duplicated(keep="first")]

        def back(k: int) -> np.ndarray:
            return self._lookup(values, series, months, k)

        start = self.start_lag
        columns = [back(k) for k in self.lags]
        columns += [np.mean([back(start + i) for i in range(width)], axis=0)
                    for width in self.rolling_means]
        columns += [back(start) - back(start + span) for span in self.differences]
        return np.column_stack(columns) if len(series) else np.empty((0, len(columns)))

    def reaches(self) -> list[tuple[int, KeyPath, str]]:
        """Return, per feature, the fewest months back it reads, its spec key and its name."""
        names = self.get_feature_names_out()
        shortest = [(k, self.key + ("lags", i)) for i, k in enumerate(self.lags)]
        shortest += [(self.start_lag, self.key + ("start_lag",))] * (
            len(self.rolling_means) + len(self.differences))
        return [(k, key, name) for (k, key), name in zip(shortest, names)]

    def get_feature_names_out(self) -> list[str]:
        label, start = self.label, self.start_lag
        cadence = cadence_named(self.period)
        phrase = cadence.count
        names = [f"{label}, {phrase(k)} earlier" for k in self.lags]
        for width in self.rolling_means:
            names.append(f"{label}, mean of the {phrase(width)} before" if start == 1 else
                         f"{label}, mean of {cadence.plural} {start} to {start + width - 1} earlier")
        names += [f"{label}, {phrase(start)} earlier minus {phrase(start + span)} "
                  "earlier" for span in self.differences]
        return names

    def to_dict(self, parts=()) -> dict:
        """Return the settings and the window's values, as stored in a model file."""
        fields = {
            "column": self.column, "lags": self.lags, "rolling_means": self.rolling_means,
            "differences": self.differences, "start_lag": self.start_lag, "label": self.label,
            "of_target": self.of_target, "key": self.key, "values_": self.values_}
        if self.period != "month":   # a monthly file is written as before periods were added
            fields["period"] = self.period
        return encode_fields(fields)

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> LagFeatures:
        """Return the fitted features ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            column = fields.text("column")
            lags, rolling = fields.wholes("lags", minimum=1), fields.wholes("rolling_means", minimum=2)
            differences, start = fields.wholes("differences", minimum=1), fields.whole("start_lag", minimum=1)
            label, of_target = fields.text("label"), fields.flag("of_target")
            key = fields.value("key")
            if not isinstance(key, tuple) or not all(isinstance(k, (str, int)) for k in key):
                raise fields.bad("key", "a spec key path")
            period = fields.raw("period") if "period" in data else "month"
            if period not in ("month", "quarter", "week"):
                raise fields.bad("period", "month, quarter or week")
            features = cls(column, lags, rolling, differences, start, label=label,
                           of_target=of_target, key=key, period=period)
            features.values_ = _window_values(fields)
        return features


def _window_values(fields: StoredFields) -> pd.Series:
    """Read the window's values back: numbers keyed by (series, month ordinal)."""
    values = fields.value("values_")
    index = values.index if isinstance(values, pd.Series) else None
    if index is None or index.nlevels != 2 or (len(values) and not (
            pd.api.types.is_numeric_dtype(values.dtype)
            and all(isinstance(s, str) for s in index.get_level_values(0))
            and pd.api.types.is_integer_dtype(index.get_level_values(1)))):
        raise fields.bad("values_", "numbers keyed by series and month")
    return values.astype(float)


def with_predictions(known: pd.DataFrame | None, rows: pd.DataFrame, predicted,
                     target: str) -> pd.DataFrame:
    """Return the known rows followed by ``rows`` with their target set to the predictions.

    This is the step of a recursive multi-step forecast: pass the result as
    ``known`` to ``FeaturePlan.transform`` for the next month, and the target's
    lags read the predictions where actuals are not known.
    """
    step = rows.copy()
    step[target] = np.asarray(predicted, dtype=float)
    return step if known is None else pd.concat([known, step], ignore_index=True)
