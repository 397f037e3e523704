"""Categorical drivers turned into numbers: one-hot, ordinal, or the target's smoothed mean."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.columns import plain_name
from pipeline.core.errors import DataError, ModelFileError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.grouped import positions_of
from pipeline.features.rows import first_row, which_rows

UNSEEN = ("stop", "use_reference")


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
    def name(self) -> str:
        """Return the column's name as terms and messages show it."""
        return plain_name(self.column)

    @property
    def group_label(self) -> str:
        return f"other (levels with fewer than {self.group_below} rows)"

    def _fit_levels(self, frame: pd.DataFrame) -> pd.Series:
        """Learn the levels, the grouped levels and the reference; return the training labels."""
        values = frame[self.column].astype(str)
        # Rows per level (a missing value, code −1, is no level, as value_counts leaves it out).
        codes, found = pd.factorize(values)
        counts = dict(zip(np.asarray(found, object).tolist(),
                          np.bincount(codes[codes >= 0], minlength=len(found)).tolist()))
        rare = sorted(level for level in counts
                      if self.group_below is not None and counts[level] < self.group_below)
        self.grouped_ = rare
        labels = values.where(~values.isin(rare), self.group_label) if rare else values
        grouped_counts = {level: n for level, n in counts.items() if level not in rare}
        if rare:
            grouped_counts[self.group_label] = (grouped_counts.get(self.group_label, 0)
                                                + sum(counts[level] for level in rare))
        levels = sorted(grouped_counts)
        if self.reference is not None:
            if self.reference in rare:
                raise DataError(f"the reference level '{self.reference}' has fewer than "
                                f"{self.group_below} training rows, so it is grouped with the other "
                                "rare levels; choose another reference", column=self.name)
            if self.reference not in grouped_counts:
                raise DataError(f"the reference level '{self.reference}' does not occur in the "
                                f"training rows (levels: {', '.join(levels)})", column=self.name)
            self.reference_ = self.reference
        else:
            top = max(grouped_counts.values(), default=np.nan)
            self.reference_ = min(level for level in levels if grouped_counts[level] == top)
        self.known_levels_ = levels
        return labels

    def _labels(self, frame: pd.DataFrame) -> pd.Series:
        """Return each row's level as learned: rare levels grouped, unseen ones by the policy."""
        values = frame[self.column].astype(str)
        if self.grouped_:
            values = values.where(~values.isin(self.grouped_), self.group_label)
        unseen = positions_of(self.known_levels_, values.to_numpy()) < 0
        if unseen.any():
            if self.unseen == "stop":
                first = values[unseen].iloc[0]
                raise DataError(f"level '{first}' was not in the training rows (known: "
                                f"{', '.join(self.known_levels_)}); set unseen: use_reference to "
                                "treat such levels as the reference level",
                                column=self.name, row=first_row(frame, unseen))
            values = values.where(~unseen, self.reference_)
        return values

    def notes(self, frame: pd.DataFrame) -> list[str]:
        """Return a warning for each level met here that the training rows did not hold."""
        if self.unseen != "use_reference":   # an unseen level stops the run before any note
            return []
        values = frame[self.column].astype(str)
        unseen = ~values.isin(self.known_levels_) & ~values.isin(self.grouped_)
        if not unseen.any():
            return []
        levels = ", ".join(f"'{level}'" for level in sorted(values[unseen].unique()))
        return [f"{self.name}: level {levels} was not in the training rows; "
                f"{which_rows(frame, unseen.to_numpy())} were treated as the reference level "
                f"'{self.reference_}'"]

    def _check_levels(self) -> None:
        """Refuse learned levels, read from a model file, that do not agree with one another."""
        known = set(self.known_levels_)
        reference_ok = self.reference_ in known if known else self.reference_ is None
        if not reference_ok or not set(self.grouped_).isdisjoint(known) or \
                not set(getattr(self, "levels_", ())) <= known:
            raise ModelFileError(f"{type(self).__name__} of '{self.name}': its learned levels do "
                                 "not agree with one another")

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
        codes = positions_of(self.levels_, labels.to_numpy())
        columns = np.zeros((len(frame), len(self.levels_)))
        rows = np.flatnonzero(codes >= 0)
        columns[rows, codes[rows]] = 1.0
        return columns

    def get_feature_names_out(self) -> list[str]:
        return [f"{self.name}: {level}" for level in self.levels_]

    def to_dict(self, parts=()) -> dict:
        """Return the settings and what was learned, as stored in a model file."""
        return encode_fields({
            "column": self.column, "reference": self.reference, "group_below": self.group_below,
            "unseen": self.unseen, "grouped_": self.grouped_, "reference_": self.reference_,
            "known_levels_": self.known_levels_, "levels_": self.levels_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> OneHotEncoder:
        """Return the fitted encoder ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            encoder = cls(fields.text("column"), fields.text("reference", optional=True),
                          fields.whole("group_below", minimum=1, optional=True),
                          fields.choice("unseen", UNSEEN))
            encoder.grouped_ = fields.texts("grouped_")
            encoder.reference_ = fields.text("reference_", optional=True)
            encoder.known_levels_ = fields.texts("known_levels_")
            encoder.levels_ = fields.texts("levels_")
        encoder._check_levels()
        return encoder


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
                            f"spec ({', '.join(self.order)})", column=self.name,
                            row=first_row(frame, outside.to_numpy()))
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
        return [f"{self.name}: rank ({', '.join(shown)})"]

    def to_dict(self, parts=()) -> dict:
        """Return the settings and what was learned, as stored in a model file."""
        return encode_fields({
            "column": self.column, "reference": self.reference, "group_below": self.group_below,
            "unseen": self.unseen, "order": self.order, "grouped_": self.grouped_,
            "known_levels_": self.known_levels_, "reference_": self.reference_,
            "ranks_": self.ranks_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> OrdinalEncoder:
        """Return the fitted encoder ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            column, reference = fields.text("column"), fields.text("reference", optional=True)
            if fields.raw("group_below") is not None:
                raise fields.bad("group_below", "empty (an ordinal encoding groups no levels)")
            encoder = cls(column, fields.texts("order"), reference, fields.choice("unseen", UNSEEN))
            encoder.grouped_ = fields.texts("grouped_")
            encoder.known_levels_ = fields.texts("known_levels_")
            encoder.reference_ = fields.text("reference_", optional=True)
            encoder.ranks_ = fields.number_map("ranks_")
        encoder._check_levels()
        if sorted(encoder.ranks_) != sorted(encoder.known_levels_):
            raise ModelFileError(f"{cls.__name__} of '{column}': its ranks are not those of its levels")
        return encoder


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
        return [f"{self.name}: smoothed mean of {self.target_name}"]

    def to_dict(self, parts=()) -> dict:
        """Return the settings and what was learned, as stored in a model file."""
        return encode_fields({
            "column": self.column, "reference": self.reference, "group_below": self.group_below,
            "unseen": self.unseen, "smoothing": self.smoothing, "target_name": self.target_name,
            "grouped_": self.grouped_, "reference_": self.reference_,
            "known_levels_": self.known_levels_, "overall_mean_": self.overall_mean_,
            "means_": self.means_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> TargetMeanEncoder:
        """Return the fitted encoder ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            column, reference = fields.text("column"), fields.text("reference", optional=True)
            group_below = fields.whole("group_below", minimum=1, optional=True)
            encoder = cls(column, fields.number("smoothing"), reference, group_below,
                          fields.choice("unseen", UNSEEN), fields.text("target_name"))
            encoder.grouped_ = fields.texts("grouped_")
            encoder.reference_ = fields.text("reference_", optional=True)
            encoder.known_levels_ = fields.texts("known_levels_")
            encoder.overall_mean_ = fields.number("overall_mean_")
            encoder.means_ = fields.number_map("means_")
        encoder._check_levels()
        if sorted(encoder.means_) != sorted(encoder.known_levels_):
            raise ModelFileError(f"{cls.__name__} of '{column}': its means are not those of its levels")
        return encoder
