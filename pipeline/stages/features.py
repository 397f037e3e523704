"""Features: turn driver columns into the numeric design a linear model fits.

A feature plan follows the scikit-learn contract: ``fit`` learns from the rows
of one training window only (the levels of each category, the reference
level); ``transform`` applies what was learned and never learns. Fitting the
plan on a window therefore cannot see anything after it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import DataError
from ..spec import CategoricalDriver, NumericDriver, Spec
from .check import PERIOD, ROW


def _power_name(column: str, power: int) -> str:
    return column if power == 1 else f"{column}^{power}"


class OneHotEncoder:
    """One column per level of a category, less the reference level.

    The reference is the level named in the spec, or else the most frequent
    level in the training window (ties broken alphabetically).
    """

    def __init__(self, column: str, reference: str | None = None) -> None:
        self.column = column
        self.reference = reference

    def fit(self, frame: pd.DataFrame) -> OneHotEncoder:
        values = frame[self.column].astype(str)
        counts = values.value_counts()
        levels = sorted(counts.index)
        if self.reference is not None:
            if self.reference not in counts.index:
                raise DataError(f"the reference level '{self.reference}' does not occur in the "
                                f"training rows (levels: {', '.join(levels)})", column=self.column)
            reference = self.reference
        else:
            top = counts.max()
            reference = min(level for level in levels if counts[level] == top)
        self.reference_ = reference
        self.levels_ = [level for level in levels if level != reference]
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        values = frame[self.column].astype(str)
        known = set(self.levels_) | {self.reference_}
        unseen = ~values.isin(known)
        if unseen.any():
            first = frame.index[unseen.to_numpy()][0]
            row = frame.loc[first, ROW] if ROW in frame.columns else None
            raise DataError(f"level '{values[first]}' was not in the training rows "
                            f"(known: {', '.join(sorted(known))})", column=self.column,
                            row=int(row) if row is not None else None)
        return np.column_stack([(values == level).to_numpy(float) for level in self.levels_]) \
            if self.levels_ else np.empty((len(frame), 0))

    def get_feature_names_out(self) -> list[str]:
        return [f"{self.column}: {level}" for level in self.levels_]


class PolynomialTerms:
    """A numeric driver and, up to its degree, its powers."""

    def __init__(self, column: str, degree: int = 1) -> None:
        self.column = column
        self.degree = degree

    def fit(self, frame: pd.DataFrame) -> PolynomialTerms:
        self.fitted_ = True
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        values = frame[self.column].to_numpy(float)
        return np.column_stack([values ** power for power in range(1, self.degree + 1)])

    def get_feature_names_out(self) -> list[str]:
        return [_power_name(self.column, power) for power in range(1, self.degree + 1)]


@dataclass(frozen=True)
class Design:
    """The numbers a model is fitted on or predicts from, with their names."""

    matrix: np.ndarray
    names: list[str]
    series: np.ndarray
    period: np.ndarray | None = None   # month ordinals (months since 1970-01), when time-ordered


class FeaturePlan:
    """Every driver's transformer, in spec order, fitted together on one window."""

    def __init__(self, numeric: list[NumericDriver], categorical: list[CategoricalDriver],
                 series_column: str) -> None:
        self.numeric = numeric
        self.categorical = categorical
        self.series_column = series_column

    def fit(self, frame: pd.DataFrame) -> FeaturePlan:
        parts = [PolynomialTerms(d.column, d.degree) for d in self.numeric]
        parts += [OneHotEncoder(d.column, d.reference) for d in self.categorical]
        self.parts_ = [part.fit(frame) for part in parts]
        return self

    def transform(self, frame: pd.DataFrame) -> Design:
        blocks = [part.transform(frame) for part in self.parts_]
        matrix = np.hstack(blocks) if blocks else np.empty((len(frame), 0))
        period = frame[PERIOD].array.asi8 if PERIOD in frame.columns else None
        return Design(matrix=matrix, names=self.get_feature_names_out(),
                      series=frame[self.series_column].to_numpy(), period=period)

    def get_feature_names_out(self) -> list[str]:
        return [name for part in self.parts_ for name in part.get_feature_names_out()]


def plan_features(spec: Spec, series_column: str) -> FeaturePlan:
    """Return the unfitted feature plan the spec describes."""
    return FeaturePlan(list(spec.drivers.numeric), list(spec.drivers.categorical), series_column)
