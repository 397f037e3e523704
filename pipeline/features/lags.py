"""Earlier values of the target or a driver, per series: lags, rolling means, differences."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.features.rows import months_phrase
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
                 label: str | None = None, of_target: bool = False, key: KeyPath = ()) -> None:
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
        names = [f"{label}, {months_phrase(k)} earlier" for k in self.lags]
        for width in self.rolling_means:
            names.append(f"{label}, mean of the {width} months before" if start == 1 else
                         f"{label}, mean of months {start} to {start + width - 1} earlier")
        names += [f"{label}, {months_phrase(start)} earlier minus {months_phrase(start + span)} "
                  "earlier" for span in self.differences]
        return names


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
