"""Features: turn driver columns into the numeric design a linear model fits.

Every transformer here follows the scikit-learn contract: ``fit`` learns from
the rows of one training window only (levels, reference levels, quantiles,
fill values, target means, means and standard deviations, the first month of
the trend, the values lags are taken from) and keeps what it learned in
attributes ending in ``_``; ``transform`` applies what was learned and never
learns. ``get_feature_names_out()`` names every column so that a coefficient
reads without a legend (``region: South``, ``month: March``,
``bags_sold, 12 months earlier``).

A fitted ``FeaturePlan`` remembers the window it was fitted on. Lags of the
target are taken only from the target values of that window, or from values
the caller hands over explicitly in ``known`` (predictions fed back, for a
recursive multi-step forecast; see ``with_predictions``). A target value in
the rows being transformed is never read, so transforming the rows after the
origin cannot see their actuals. Drivers of the rows being transformed are
inputs the analyst supplies for those months, and are used, as the unlagged
drivers are.
"""

from __future__ import annotations

import calendar as calendar_module
from collections.abc import Callable, Iterator
from contextlib import contextmanager

import numpy as np
import pandas as pd

from pipeline.core.columns import PERIOD, ROW, month_ordinals
from pipeline.core.design import Design
from pipeline.core.errors import DataError, SpecError
from pipeline.spec import (
    BASELINE_KINDS,
    LINEAR_KINDS,
    CalendarFeatures,
    CategoricalDriver,
    KeyPath,
    LaggedColumn,
    NumericDriver,
    Spec,
    format_key_path,
)

MONTH_NAMES = list(calendar_module.month_name)   # MONTH_NAMES[3] == "March"


# ------------------------------------------------------------------ small helpers

def _power_name(column: str, power: int) -> str:
    if power == 1:
        return column
    return f"({column})^{power}" if " " in column else f"{column}^{power}"


def _first_row(frame: pd.DataFrame, mask: np.ndarray) -> int | None:
    """Return the input row (file line) of the first row where mask holds."""
    if ROW not in frame.columns or not mask.any():
        return None
    row = frame[ROW].to_numpy()[np.flatnonzero(mask)[0]]
    return None if pd.isna(row) else int(row)


def _which_rows(frame: pd.DataFrame, mask: np.ndarray) -> str:
    """Return 'N of the M rows from 2019-01 to 2026-10' for the rows where mask holds."""
    text = f"{int(mask.sum())} of the {len(frame)} rows"
    if PERIOD in frame.columns and len(frame):
        text += f" from {frame[PERIOD].min()} to {frame[PERIOD].max()}"
    return text


def _months_phrase(count: int) -> str:
    return "1 month" if count == 1 else f"{count} months"


# ------------------------------------------------------------------ the target

class TargetTransform:
    """The scale the linear models fit the target on: as it is, log, or log(1 + value)."""

    def __init__(self, column: str, kind: str = "none") -> None:
        self.column = column
        self.kind = kind

    @property
    def name(self) -> str:
        """Return the transformed target's name, e.g. ``log(bags_sold)``."""
        return {"none": self.column, "log": f"log({self.column})",
                "log1p": f"log(1 + {self.column})"}[self.kind]

    def check(self, frame: pd.DataFrame) -> None:
        """Raise DataError at the first row whose target the transform cannot take."""
        if self.kind == "none" or self.column not in frame.columns:
            return
        values = frame[self.column].to_numpy(float)
        floor = 0.0 if self.kind == "log" else -1.0
        bad = values <= floor      # NaN compares False: months to forecast pass
        if bad.any():
            value = values[np.flatnonzero(bad)[0]]
            hint = "; target_transform: log1p takes zeros" if self.kind == "log" and value == 0 else ""
            raise DataError(f"{value:g} is not above {floor:g}, so target_transform: {self.kind} "
                            f"cannot be applied{hint}", column=self.column,
                            row=_first_row(frame, bad))

    def forward(self, values) -> np.ndarray:
        """Return the values on the scale the models fit."""
        values = np.asarray(values, dtype=float)
        if self.kind == "log":
            return np.log(values)
        if self.kind == "log1p":
            return np.log1p(values)
        return values

    def smearing_factor(self, residuals) -> float:
        """Return Duan's (1983) smearing factor, the mean of exp(residual); 1 with no log."""
        if self.kind == "none":
            return 1.0
        return float(np.mean(np.exp(np.asarray(residuals, dtype=float))))

    def to_mean(self, predicted, smearing: float) -> np.ndarray:
        """Return the mean of the target given predictions on the transformed scale.

        With log, E[y] = exp(prediction) · S; with log1p, E[1 + y] = exp(prediction) · S,
        so E[y] = exp(prediction) · S − 1 (Duan 1983, smearing estimate).
        """
        predicted = np.asarray(predicted, dtype=float)
        if self.kind == "log":
            return np.exp(predicted) * smearing
        if self.kind == "log1p":
            return np.exp(predicted) * smearing - 1.0
        return predicted


class TransformedTargetModel:
    """A model fitted on the transformed target, whose predictions are turned back into means.

    Fitting on log(y) and taking exp of the prediction estimates the median of
    y, not its mean; multiplying by the smearing factor mean(exp(residuals))
    of the training fit corrects that without assuming normal errors
    (Duan 1983, "Smearing estimate: a nonparametric retransformation method").
    """

    def __init__(self, model, transform: TargetTransform) -> None:
        self.model = model
        self.transform = transform
        self.label = getattr(model, "label", type(model).__name__)

    def fit(self, design: Design, y) -> TransformedTargetModel:
        scaled = self.transform.forward(y)
        self.model.fit(design, scaled)
        self.smearing_ = self.transform.smearing_factor(scaled - self.model.predict(design))
        return self

    def predict(self, design: Design) -> np.ndarray:
        return self.transform.to_mean(self.model.predict(design), self.smearing_)

    def coefficient_table(self) -> pd.DataFrame:
        return self.model.coefficient_table()

    @property
    def fit_(self):
        return getattr(self.model, "fit_", None)

    def describe(self) -> str:
        """Return the note the run summary carries about the retransformation."""
        return (f"fitted on {self.transform.name}; its predictions were turned back to "
                f"{self.transform.column} with Duan's (1983) smearing correction (factor "
                f"{self.smearing_:.4f}), so they estimate the mean rather than the median; its "
                f"coefficients, R² and residual SD are on the {self.transform.name} scale")


# ------------------------------------------------------------------ numeric drivers

class NumericTerms:
    """A numeric driver, filled, clipped, transformed and standardised, with its powers.

    The steps run in that order, each learning only in ``fit``: the fill value
    (mean or median of the window's values), the clip bounds (the window's
    quantiles), the centre and scale (the window's mean and standard
    deviation, after the transform). With filling, and when the window had
    rows without a value, a 0/1 column marks the rows that were filled (a
    window without any would give a column of zeros, which no fit can use).
    """

    def __init__(self, column: str, degree: int = 1, transform: str = "none",
                 clip_quantiles: list[float] | None = None, missing: str = "refuse",
                 standardise: bool = False) -> None:
        self.column = column
        self.degree = degree
        self.transform_kind = transform
        self.clip_quantiles = clip_quantiles
        self.missing = missing
        self.standardise = standardise

    def fit(self, frame: pd.DataFrame, y=None) -> NumericTerms:
        raw = frame[self.column].to_numpy(float)
        present = ~np.isnan(raw)
        if self.missing == "refuse" and not present.all():
            raise DataError("missing value; set missing: mean or median on the driver to fill it",
                            column=self.column, row=_first_row(frame, ~present))
        if not present.any():
            raise DataError("no training row has a value, so there is nothing to fill from",
                            column=self.column)
        observed = raw[present]
        self.marks_missing_ = self.missing != "refuse" and not present.all()
        self.fill_value_ = (None if self.missing == "refuse" else
                            float(np.mean(observed) if self.missing == "mean" else np.median(observed)))
        self.clip_bounds_ = (None if self.clip_quantiles is None else
                             tuple(float(q) for q in np.quantile(observed, self.clip_quantiles)))
        self.centre_, self.scale_ = 0.0, 1.0
        values = self._transformed(frame)   # also refuses a log of a value at or below 0
        if self.standardise:
            spread = float(np.std(values))
            self.centre_ = float(np.mean(values))
            self.scale_ = spread if spread > 0 else 1.0
        return self

    def _transformed(self, frame: pd.DataFrame) -> np.ndarray:
        """Return the values filled, clipped and transformed (not yet standardised)."""
        values = frame[self.column].to_numpy(float)
        missing = np.isnan(values)
        if missing.any():
            if self.fill_value_ is None:
                raise DataError("missing value; set missing: mean or median on the driver to "
                                "fill it", column=self.column, row=_first_row(frame, missing))
            values = np.where(missing, self.fill_value_, values)
        if self.clip_bounds_ is not None:
            values = np.clip(values, *self.clip_bounds_)
        if self.transform_kind != "none":
            floor = 0.0 if self.transform_kind == "log" else -1.0
            bad = values <= floor
            if bad.any():
                raise DataError(f"{values[np.flatnonzero(bad)[0]]:g} is not above {floor:g}, so "
                                f"transform: {self.transform_kind} cannot be applied",
                                column=self.column, row=_first_row(frame, bad))
            values = np.log(values) if self.transform_kind == "log" else np.log1p(values)
        return values

    def prepared(self, frame: pd.DataFrame) -> np.ndarray:
        """Return the driver after every step, before the powers."""
        return (self._transformed(frame) - self.centre_) / self.scale_

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        values = self.prepared(frame)
        with np.errstate(over="ignore"):   # a term too large is refused when the design is built
            columns = [values ** power for power in range(1, self.degree + 1)]
        if self.marks_missing_:
            columns.append(frame[self.column].isna().to_numpy(float))
        return np.column_stack(columns)

    def main_effect(self, frame: pd.DataFrame) -> np.ndarray:
        """Return the first-degree column, the one an interaction multiplies."""
        return self.prepared(frame)[:, None]

    @property
    def base_name(self) -> str:
        name = {"none": self.column, "log": f"log({self.column})",
                "log1p": f"log(1 + {self.column})"}[self.transform_kind]
        return f"standardised {name}" if self.standardise else name

    def get_feature_names_out(self) -> list[str]:
        names = [_power_name(self.base_name, power) for power in range(1, self.degree + 1)]
        if self.marks_missing_:
            names.append(f"{self.column} was missing")
        return names

    def main_effect_names(self) -> list[str]:
        return [self.base_name]

    def notes(self, frame: pd.DataFrame) -> list[str]:
        """Return what the design should say about rows that were filled."""
        missing = frame[self.column].isna().to_numpy()
        if self.missing == "refuse" or not missing.any():
            return []
        marked = (f", marked by '{self.column} was missing'" if self.marks_missing_ else
                  " (the training window had a value in every row, so no was-missing column)")
        return [f"{self.column}: {_which_rows(frame, missing)} had no value and were filled with "
                f"the {self.missing} of the training window ({self.fill_value_:.4g}){marked}"]


# The name the OLS tests and earlier code know this transformer by.
PolynomialTerms = NumericTerms


# ------------------------------------------------------------------ categorical drivers

class _LevelEncoder:
    """What every categorical encoding shares: levels as text, rare levels grouped,
    a reference level, and the policy for a level the training rows did not hold."""

    def __init__(self, column: str, reference: str | None = None, group_below: int | None = None,
                 unseen: str = "stop") -> None:
        self.column = column
        self.reference = reference
        self.group_below = group_below
        self.unseen = unseen

    @property
    def group_label(self) -> str:
        return f"other (levels with fewer than {self.group_below} rows)"

    def _fit_levels(self, frame: pd.DataFrame) -> pd.Series:
        """Learn the levels, the grouped levels and the reference; return the training labels."""
        values = frame[self.column].astype(str)
        counts = values.value_counts()
        rare = sorted(level for level in counts.index
                      if self.group_below is not None and counts[level] < self.group_below)
        self.grouped_ = rare
        labels = values.where(~values.isin(rare), self.group_label) if rare else values
        grouped_counts = labels.value_counts()
        levels = sorted(grouped_counts.index)
        if self.reference is not None:
            if self.reference in rare:
                raise DataError(f"the reference level '{self.reference}' has fewer than "
                                f"{self.group_below} training rows, so it is grouped with the other "
                                "rare levels; choose another reference", column=self.column)
            if self.reference not in grouped_counts.index:
                raise DataError(f"the reference level '{self.reference}' does not occur in the "
                                f"training rows (levels: {', '.join(levels)})", column=self.column)
            self.reference_ = self.reference
        else:
            top = grouped_counts.max()
            self.reference_ = min(level for level in levels if grouped_counts[level] == top)
        self.known_levels_ = levels
        return labels

    def _labels(self, frame: pd.DataFrame) -> pd.Series:
        """Return each row's level as learned: rare levels grouped, unseen ones by the policy."""
        values = frame[self.column].astype(str)
        if self.grouped_:
            values = values.where(~values.isin(self.grouped_), self.group_label)
        unseen = ~values.isin(self.known_levels_)
        if unseen.any():
            if self.unseen == "stop":
                first = values[unseen].iloc[0]
                raise DataError(f"level '{first}' was not in the training rows (known: "
                                f"{', '.join(self.known_levels_)}); set unseen: use_reference to "
                                "treat such levels as the reference level",
                                column=self.column, row=_first_row(frame, unseen.to_numpy()))
            values = values.where(~unseen, self.reference_)
        return values

    def notes(self, frame: pd.DataFrame) -> list[str]:
        """Return a warning for each level met here that the training rows did not hold."""
        values = frame[self.column].astype(str)
        unseen = ~values.isin(self.known_levels_) & ~values.isin(self.grouped_)
        if self.unseen != "use_reference" or not unseen.any():
            return []
        levels = ", ".join(f"'{level}'" for level in sorted(values[unseen].unique()))
        return [f"{self.column}: level {levels} was not in the training rows; "
                f"{_which_rows(frame, unseen.to_numpy())} were treated as the reference level "
                f"'{self.reference_}'"]

    def main_effect(self, frame: pd.DataFrame) -> np.ndarray:
        return self.transform(frame)

    def main_effect_names(self) -> list[str]:
        return self.get_feature_names_out()


class OneHotEncoder(_LevelEncoder):
    """One 0/1 column per level of a category, less the reference level.

    The reference is the level named in the spec, or else the most frequent
    level in the training window (ties broken alphabetically).
    """

    def fit(self, frame: pd.DataFrame, y=None) -> OneHotEncoder:
        self._fit_levels(frame)
        self.levels_ = [level for level in self.known_levels_ if level != self.reference_]
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        labels = self._labels(frame)
        # One column per level, filled by each row's position among the levels (the
        # reference row has none): one pass over the rows, however many levels there are.
        codes = pd.Index(self.levels_).get_indexer(labels.to_numpy())
        columns = np.zeros((len(frame), len(self.levels_)))
        rows = np.flatnonzero(codes >= 0)
        columns[rows, codes[rows]] = 1.0
        return columns

    def get_feature_names_out(self) -> list[str]:
        return [f"{self.column}: {level}" for level in self.levels_]


class OrdinalEncoder(_LevelEncoder):
    """A category with a natural order, as the place of its level in that order (0 = lowest).

    The order comes from the spec. A training level missing from the order is
    refused; a level in the order but not in the training rows keeps its place.
    """

    def __init__(self, column: str, order: list[str], reference: str | None = None,
                 unseen: str = "stop") -> None:
        super().__init__(column, reference=reference, group_below=None, unseen=unseen)
        self.order = order

    def fit(self, frame: pd.DataFrame, y=None) -> OrdinalEncoder:
        values = frame[self.column].astype(str)
        outside = ~values.isin(self.order)
        if outside.any():
            raise DataError(f"level '{values[outside].iloc[0]}' is not in the order given in the "
                            f"spec ({', '.join(self.order)})", column=self.column,
                            row=_first_row(frame, outside.to_numpy()))
        self.grouped_ = []
        self.known_levels_ = list(self.order)
        if self.reference is not None:
            self.reference_ = self.reference
        else:   # the most frequent level, ties broken by the order
            counts = values.value_counts()
            self.reference_ = max(self.order, key=lambda level: (counts.get(level, 0),
                                                                 -self.order.index(level)))
        self.ranks_ = {level: float(place) for place, level in enumerate(self.order)}
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        return self._labels(frame).map(self.ranks_).to_numpy(float)[:, None]

    def get_feature_names_out(self) -> list[str]:
        shown = [f"{level} = {place}" for place, level in enumerate(self.order)]
        if len(shown) > 4:
            shown = shown[:2] + ["…"] + shown[-1:]
        return [f"{self.column}: rank ({', '.join(shown)})"]


class TargetMeanEncoder(_LevelEncoder):
    """A category as the smoothed mean of the target in each level, learned in the window.

    With n training rows in a level whose mean is m_level, the overall mean
    m_all and a smoothing weight w, the level's value is
    (n · m_level + w · m_all) / (n + w): a level with few rows is pulled
    towards the overall mean. The target is taken on the scale the models fit.
    """

    def __init__(self, column: str, smoothing: float = 10.0, reference: str | None = None,
                 group_below: int | None = None, unseen: str = "stop",
                 target_name: str = "the target") -> None:
        super().__init__(column, reference=reference, group_below=group_below, unseen=unseen)
        self.smoothing = smoothing
        self.target_name = target_name

    def fit(self, frame: pd.DataFrame, y=None) -> TargetMeanEncoder:
        if y is None:
            raise ValueError("target-mean encoding is fitted with the target")
        labels = self._fit_levels(frame)
        target = pd.Series(np.asarray(y, dtype=float), index=frame.index)
        self.overall_mean_ = float(target.mean())
        stats = target.groupby(labels.to_numpy()).agg(["count", "mean"])
        weight = self.smoothing
        smoothed = (stats["count"] * stats["mean"] + weight * self.overall_mean_) / (stats["count"] + weight)
        self.means_ = {str(level): float(value) for level, value in smoothed.items()}
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        return self._labels(frame).map(self.means_).to_numpy(float)[:, None]

    def get_feature_names_out(self) -> list[str]:
        return [f"{self.column}: smoothed mean of {self.target_name}"]


# ------------------------------------------------------------------ interactions

class InteractionTerms:
    """The products of two fitted drivers' first-degree columns (a category: each of its columns)."""

    def __init__(self, first, second) -> None:
        self.first = first
        self.second = second

    def fit(self, frame: pd.DataFrame, y=None) -> InteractionTerms:
        self.fitted_ = True   # both drivers are fitted already; nothing more to learn
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        left, right = self.first.main_effect(frame), self.second.main_effect(frame)
        columns = [left[:, i] * right[:, j] for i in range(left.shape[1]) for j in range(right.shape[1])]
        return np.column_stack(columns) if columns else np.empty((len(frame), 0))

    def get_feature_names_out(self) -> list[str]:
        return [f"{a} × {b}" for a in self.first.main_effect_names()
                for b in self.second.main_effect_names()]


# ------------------------------------------------------------------ series effects

class SeriesTerms(OneHotEncoder):
    """For models over all series at once: the series one-hot encoded (a 0/1 column per
    series but the first, its own level), and, for named numeric drivers, that driver times
    each of those columns (its own slope). The first series in sorted order is the
    reference, as in a treatment coding.

    A series the training window did not hold gets the reference series' level and slopes,
    and a note says so.
    """

    def __init__(self, series_column: str, intercepts: bool = True, slopes=()) -> None:
        super().__init__(series_column, unseen="use_reference")
        self.intercepts = intercepts
        self.slopes = list(slopes)   # fitted NumericTerms, whose first-degree column is used

    def fit(self, frame: pd.DataFrame, y=None) -> SeriesTerms:
        self._fit_levels(frame)
        self.reference_ = self.known_levels_[0] if self.known_levels_ else None
        self.levels_ = self.known_levels_[1:]
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        dummies = super().transform(frame)
        blocks = [dummies] if self.intercepts else []
        blocks += [dummies * part.main_effect(frame) for part in self.slopes]
        return np.hstack(blocks) if blocks else np.empty((len(frame), 0))

    def get_feature_names_out(self) -> list[str]:
        levels = super().get_feature_names_out()
        return (levels if self.intercepts else []) + [
            f"{part.base_name} × {level}" for part in self.slopes for level in levels]

    def notes(self, frame: pd.DataFrame) -> list[str]:
        labels = frame[self.column].astype(str)
        unseen = ~labels.isin(self.known_levels_)
        if not unseen.any():
            return []
        names = sorted(labels[unseen].unique())
        shown = ", ".join(f"'{name}'" for name in names[:5]) + (
            f" and {len(names) - 5} more" if len(names) > 5 else "")
        return [f"series {shown} had no training rows: the models over all series give "
                f"{_which_rows(frame, unseen.to_numpy())} the level and slopes of the first "
                f"series '{self.reference_}'"]


# ------------------------------------------------------------------ calendar

class TrendTerm:
    """Months since the first month of the training window (0 in that month)."""

    def fit(self, frame: pd.DataFrame, y=None) -> TrendTerm:
        self.first_month_ = pd.Period(ordinal=int(month_ordinals(frame).min()), freq="M")
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        return (month_ordinals(frame) - self.first_month_.ordinal).astype(float)[:, None]

    def get_feature_names_out(self) -> list[str]:
        return [f"months since {self.first_month_}"]


class _PeriodDummies:
    """A 0/1 column per calendar level seen in the window, less the reference (the first seen)."""

    word = ""

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
                            row=_first_row(frame, unseen))
        if not self.levels_:
            return np.empty((len(frame), 0))
        return np.column_stack([(levels == level).astype(float) for level in self.levels_])

    def get_feature_names_out(self) -> list[str]:
        return [f"{self.word}: {self._label(level)}" for level in self.levels_]


class MonthDummies(_PeriodDummies):
    """A 0/1 column per month of the year, less January (or the first month the window holds)."""

    word = "month"

    def _level(self, frame: pd.DataFrame) -> np.ndarray:
        return frame[PERIOD].dt.month.to_numpy(int)

    def _label(self, level: int) -> str:
        return MONTH_NAMES[level]


class QuarterDummies(_PeriodDummies):
    """A 0/1 column per quarter, less the first quarter (or the first the window holds)."""

    word = "quarter"

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


# ------------------------------------------------------------------ lags

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
        names = [f"{label}, {_months_phrase(k)} earlier" for k in self.lags]
        for width in self.rolling_means:
            names.append(f"{label}, mean of the {width} months before" if start == 1 else
                         f"{label}, mean of months {start} to {start + width - 1} earlier")
        names += [f"{label}, {_months_phrase(start)} earlier minus {_months_phrase(start + span)} "
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


# ------------------------------------------------------------------ the plan

def _spec_error(key: KeyPath, message: str) -> SpecError:
    return SpecError(message, key=format_key_path(key))


class FeaturePlan:
    """Every feature the spec asks for, in a fixed order, fitted together on one window.

    Order of the columns: numeric drivers, categorical drivers, interactions,
    calendar, lags. Use ``training_design`` for the rows a model is fitted on
    (rows whose lags are unavailable are left out and said so) and
    ``transform`` for the rows it predicts.
    """

    def __init__(self, numeric: list[NumericDriver], categorical: list[CategoricalDriver],
                 series_column: str, *, interactions: list[list[str]] = (),
                 calendar: CalendarFeatures | None = None, lags: list[LaggedColumn] = (),
                 target: str | None = None, target_transform: str = "none",
                 error: Callable[[KeyPath, str], SpecError] = _spec_error,
                 source: str | None = None, series_effects=None) -> None:
        self.numeric = list(numeric)
        self.categorical = list(categorical)
        self.series_column = series_column
        self.interactions = [list(pair) for pair in interactions]
        self.calendar = calendar
        self.lags = list(lags)
        self.target = target
        self.target_transform = target_transform
        self.error = error
        self.source = source
        self.series_effects = series_effects   # a SeriesEffects spec section, or None for none

    # -- fitting

    @contextmanager
    def _located(self) -> Iterator[None]:
        """Name the input file in a DataError raised by a transformer, which cannot know it."""
        try:
            yield
        except DataError as problem:
            if problem.file is None and self.source is not None:
                raise DataError(problem.message, file=self.source, column=problem.column,
                                row=problem.row) from None
            raise

    @property
    def target_scale(self) -> TargetTransform:
        return TargetTransform(self.target or "the target", self.target_transform)

    def _target_values(self, frame: pd.DataFrame) -> np.ndarray | None:
        if self.target is None or self.target not in frame.columns:
            return None
        return self.target_scale.forward(frame[self.target].to_numpy(float))

    def fit(self, frame: pd.DataFrame) -> FeaturePlan:
        with self._located():
            self.target_scale.check(frame)
            y = self._target_values(frame)
            numeric = {d.column: NumericTerms(d.column, d.degree, d.transform, d.clip_quantiles,
                                              d.missing, d.standardise).fit(frame)
                       for d in self.numeric}
            categorical = {d.column: self._encoder(d).fit(frame, y) for d in self.categorical}
            drivers = {**numeric, **categorical}
            parts = [*numeric.values(), *categorical.values()]
            parts += [InteractionTerms(drivers[a], drivers[b]).fit(frame) for a, b in self.interactions]
            parts += [part.fit(frame) for part in self._calendar_parts()]
            effects = self.series_effects
            if effects is not None and (effects.intercepts or effects.slopes):
                terms = SeriesTerms(self.series_column, effects.intercepts,
                                    [numeric[column] for column in effects.slopes]).fit(frame)
                self._check_series_terms(terms, frame)
                parts.append(terms)
            self.row_parts_ = parts
            self.lag_parts_ = [self._lag_part(index, lagged).fit(
                self._lag_values(lagged.column, frame, numeric))
                for index, lagged in enumerate(self.lags)]
            self.parts_ = [*self.row_parts_, *self.lag_parts_]
            self.numeric_parts_ = numeric
            self.window_end_ = (pd.Period(ordinal=int(month_ordinals(frame).max()), freq="M")
                                if PERIOD in frame.columns and len(frame) else None)
        return self

    # Series columns are dense: beyond this many cells in a window's design, the fit would
    # need gigabytes, and a model per series (or no series intercepts) is the way.
    LARGEST_SERIES_DESIGN = 100_000_000

    def _check_series_terms(self, terms: SeriesTerms, frame: pd.DataFrame) -> None:
        columns = len(terms.get_feature_names_out())
        if columns * len(frame) > self.LARGEST_SERIES_DESIGN:
            raise self.error(("drivers", "series_effects"),
                             f"{len(terms.levels_) + 1} series give the models over all series "
                             f"{columns} series columns on {len(frame)} rows, about "
                             f"{columns * len(frame) * 8 / 1e9:.0f} GB; fit per series instead "
                             "(models: [{kind: ols, per_series: true}]) or set intercepts: false")

    def _encoder(self, driver: CategoricalDriver):
        if driver.encoding == "ordinal":
            return OrdinalEncoder(driver.column, driver.order, driver.reference, driver.unseen)
        if driver.encoding == "target_mean":
            if self.target is None:
                raise ValueError("target-mean encoding needs the plan to know the target column")
            return TargetMeanEncoder(driver.column, driver.effective_smoothing, driver.reference,
                                     driver.group_below, driver.unseen, self.target_scale.name)
        return OneHotEncoder(driver.column, driver.reference, driver.group_below, driver.unseen)

    def _calendar_parts(self) -> list:
        calendar = self.calendar
        if calendar is None:
            return []
        parts: list = [TrendTerm()] if calendar.trend else []
        if calendar.month_of_year == "dummies":
            parts.append(MonthDummies())
        elif calendar.month_of_year == "fourier":
            parts.append(FourierTerms(calendar.effective_harmonics))
        if calendar.quarter:
            parts.append(QuarterDummies())
        if calendar.working_days:
            parts.append(WorkingDays(calendar.closures))
        return parts

    def _lag_part(self, index: int, lagged: LaggedColumn) -> LagFeatures:
        of_target = lagged.column == self.target
        label = self.target_scale.name if of_target else lagged.column
        return LagFeatures(lagged.column, lagged.lags, lagged.rolling_means, lagged.differences,
                           lagged.start_lag, label=label, of_target=of_target,
                           key=("drivers", "lags", index))

    def _lag_values(self, column: str, frame: pd.DataFrame, numeric: dict | None = None) -> pd.Series:
        """Return a lagged column's values keyed by (series, month): the target on the models'
        scale (rows without it left out), a driver filled as the driver is."""
        numeric = self.numeric_parts_ if numeric is None else numeric
        if column == self.target:
            rows = frame[frame[column].notna()]
            values = self.target_scale.forward(rows[column].to_numpy(float))
        else:
            rows = frame
            values = rows[column].to_numpy(float)
            fill = numeric[column].fill_value_ if column in numeric else None
            if fill is not None:
                values = np.where(np.isnan(values), fill, values)
        index = pd.MultiIndex.from_arrays([rows[self.series_column].to_numpy(), month_ordinals(rows)])
        return pd.Series(values, index=index, dtype=float)

    # -- transforming

    def _origin(self, known: pd.DataFrame | None) -> int | None:
        """Return the last month whose target is known: the window's, or a later one in known."""
        months = [self.window_end_.ordinal] if self.window_end_ is not None else []
        if known is not None and self.target in known.columns:
            has_target = known[self.target].notna().to_numpy()
            if has_target.any():
                months.append(int(month_ordinals(known)[has_target].max()))
        return max(months) if months else None

    def _check_reach(self, frame: pd.DataFrame, known: pd.DataFrame | None) -> None:
        """Stop with a SpecError if a lag of the target reads a month after the origin."""
        targets = [part for part in self.lag_parts_ if part.of_target]
        origin = self._origin(known)
        if not targets or origin is None or not len(frame):
            return
        ahead = int((month_ordinals(frame) - origin).max())
        for part in targets:
            for back, key, name in part.reaches():
                if back < ahead:
                    at = pd.Period(ordinal=origin, freq="M")
                    raise self.error(key, f"'{name}' reaches past the forecast origin ({at}): the "
                                          f"months predicted run up to {ahead} months after it, so "
                                          f"each lag of the target must be at least {ahead} months "
                                          "(a strategy that feeds predictions back month by month "
                                          "is not offered yet)")

    def feature_table(self, frame: pd.DataFrame, known: pd.DataFrame | None = None) -> pd.DataFrame:
        """Return the features of the rows as a table (columns named, the frame's index),
        with NaN where a lag is unavailable.

        ``known`` holds rows whose target is known beyond the training window
        (predictions fed back, see ``with_predictions``); target values in
        ``frame`` itself are never read.
        """
        with self._located():
            self._check_reach(frame, known)
            blocks = [part.transform(frame) for part in self.row_parts_]
            if self.lag_parts_:
                series = frame[self.series_column].to_numpy()
                months = month_ordinals(frame)
                for part in self.lag_parts_:
                    blocks.append(part.transform(series, months, self._extra_values(part, frame, known)))
        matrix = np.hstack(blocks) if blocks else np.empty((len(frame), 0))
        return pd.DataFrame(matrix, index=frame.index, columns=self.get_feature_names_out())

    def _extra_values(self, part: LagFeatures, frame: pd.DataFrame,
                      known: pd.DataFrame | None) -> pd.Series | None:
        """Return the values a lag may read beyond the window: for the target, those in
        known only; for a driver, those of the rows themselves and of known."""
        sources = [] if part.of_target else [frame]
        if known is not None:
            sources.append(known)
        if not sources:
            return None
        return pd.concat([self._lag_values(part.column, source) for source in sources])

    def _notes(self, frame: pd.DataFrame) -> list[str]:
        return [note for part in self.row_parts_ if hasattr(part, "notes") for note in part.notes(frame)]

    # Beyond this size a term's square, summed over many rows, overflows a float; the
    # check stage holds the input's own numbers to the same bound.
    LARGEST_TERM = 1e150

    def _design(self, frame: pd.DataFrame, matrix: np.ndarray, notes: list[str]) -> Design:
        if matrix.size:
            with np.errstate(invalid="ignore"):
                too_large = ~(np.abs(matrix) <= self.LARGEST_TERM)   # also catches inf and NaN
            if too_large.any():
                row, column = (int(i) for i in np.argwhere(too_large)[0])
                at = frame.iloc[row]
                raise DataError(f"the term '{self.get_feature_names_out()[column]}' is "
                                f"{matrix[row, column]:g} for {at[PERIOD]} (series "
                                f"'{at[self.series_column]}'), too large to fit; rescale the driver "
                                "or lower its degree", file=self.source,
                                row=_first_row(frame, np.arange(len(frame)) == row))
        period = month_ordinals(frame) if PERIOD in frame.columns else None
        series_level = np.concatenate([
            np.full(len(part.get_feature_names_out()), isinstance(part, SeriesTerms), bool)
            for part in self.parts_]) if self.parts_ else np.zeros(0, bool)
        return Design(matrix=matrix, names=self.get_feature_names_out(),
                      series=frame[self.series_column].to_numpy(), period=period, notes=tuple(notes),
                      series_level=series_level)

    def transform(self, frame: pd.DataFrame, known: pd.DataFrame | None = None) -> Design:
        """Return the design of rows to predict; stop if one of their lags is unavailable."""
        with np.errstate(over="ignore"):   # too large a term is refused in _design
            table = self.feature_table(frame, known)
        unavailable = table.isna().to_numpy()
        if unavailable.any():
            row, column = (int(i) for i in np.argwhere(unavailable)[0])
            at = frame.iloc[row]
            raise DataError(f"'{table.columns[column]}' is not available for {at[PERIOD]} (series "
                            f"'{at[self.series_column]}'): the month it reads is before the "
                            "series starts or missing", file=self.source,
                            row=_first_row(frame, np.arange(len(frame)) == row))
        return self._design(frame, table.to_numpy(), self._notes(frame))

    def training_design(self, frame: pd.DataFrame) -> tuple[Design, np.ndarray]:
        """Return the design and the target of the training rows a model can be fitted on.

        Rows whose lags reach before their series starts (the first months of
        each series, or months after a gap) are left out, and the design's
        notes say how many.
        """
        with self._located():
            self.target_scale.check(frame)
        with np.errstate(over="ignore"):
            table = self.feature_table(frame)
        usable = ~table.isna().any(axis=1).to_numpy()
        notes = self._notes(frame)
        if not usable.all():
            if not usable.any():
                raise DataError("no training row has every lag available: the lags reach further "
                                "back than the training window holds", file=self.source)
            left_out = frame[~usable]
            notes.append(f"{_which_rows(frame, ~usable)} were left out of every model's fit: their "
                         f"lags reach before the first month of their series or into a missing "
                         f"month (left out: {left_out[PERIOD].min()} to {left_out[PERIOD].max()})")
        kept = frame[usable]
        y = kept[self.target].to_numpy(float) if self.target in kept.columns else np.empty(0)
        return self._design(kept, table.to_numpy()[usable], notes), y

    def for_target(self, model, kind: str):
        """Return the model to fit: a linear model on the transformed target (its predictions
        turned back into means), a baseline on the target as it is."""
        if self.target_transform == "none" or kind in BASELINE_KINDS:
            return model
        return TransformedTargetModel(model, self.target_scale)

    @property
    def shortest_target_lag(self) -> int | None:
        """Return the fewest months back any feature reads the target, or None."""
        reaches = [back for part in self._unfitted_lag_parts() if part.of_target
                   for back, _, _ in part.reaches()]
        return min(reaches) if reaches else None

    def _unfitted_lag_parts(self) -> list[LagFeatures]:
        return [self._lag_part(index, lagged) for index, lagged in enumerate(self.lags)]

    def get_feature_names_out(self) -> list[str]:
        return [name for part in self.parts_ for name in part.get_feature_names_out()]


def plan_features(spec: Spec, series_column: str) -> FeaturePlan:
    """Return the unfitted feature plan the spec describes."""
    drivers = spec.drivers
    return FeaturePlan(list(drivers.numeric), list(drivers.categorical), series_column,
                       interactions=drivers.interactions, calendar=drivers.calendar,
                       lags=list(drivers.lags), target=spec.target,
                       target_transform=spec.target_transform, error=spec.error,
                       source=str(spec.input.file), series_effects=series_effects_of(spec))


def series_effects_of(spec: Spec):
    """Return the series effects the models over all series get, or None when they get none:
    with one series, with no such model, or when the series column is itself one-hot encoded."""
    pooled = [m for m in spec.models if m.kind in LINEAR_KINDS and not m.per_series]
    effects = spec.drivers.series_effects
    if not spec.input.series or not pooled:
        return None
    one_hot = {d.column for d in spec.drivers.categorical if d.encoding == "one_hot"}
    if len(spec.input.series) == 1 and spec.input.series[0] in one_hot:
        # The series' own levels are already columns; only the slopes are added.
        return effects.model_copy(update={"intercepts": False}) if effects.slopes else None
    return effects
