"""Numeric drivers: filled, clipped, transformed, standardised, with their powers."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.double_double import power2
from pipeline.core.errors import DataError, ModelFileError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.rows import first_row, which_rows

TRANSFORMS = ("none", "log", "log1p")
FILLS = ("refuse", "mean", "median")


def power_name(column: str, power: int) -> str:
    if power == 1:
        return column
    return f"({column})^{power}" if " " in column else f"{column}^{power}"




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
                            column=self.column, row=first_row(frame, ~present))
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
                                "fill it", column=self.column, row=first_row(frame, missing))
            values = np.where(missing, self.fill_value_, values)
        if self.clip_bounds_ is not None:
            values = np.clip(values, *self.clip_bounds_)
        if self.transform_kind != "none":
            floor = 0.0 if self.transform_kind == "log" else -1.0
            bad = values <= floor
            if bad.any():
                raise DataError(f"{values[np.flatnonzero(bad)[0]]:g} is not above {floor:g}, so "
                                f"transform: {self.transform_kind} cannot be applied",
                                column=self.column, row=first_row(frame, bad))
            values = np.log(values) if self.transform_kind == "log" else np.log1p(values)
        return values

    def prepared(self, frame: pd.DataFrame) -> np.ndarray:
        """Return the driver after every step, before the powers."""
        return (self._transformed(frame) - self.centre_) / self.scale_

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        # Each power is formed in twice the working precision and rounded once (the correctly
        # rounded power, not pow's nearly so), the one routine every design of this driver uses:
        # a run's fits and a model file's forecasts alike. A term too large (even inf) is
        # refused when the design is built.
        with np.errstate(over="ignore"):
            columns = power2(self.prepared(frame), self.degree)
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
        names = [power_name(self.base_name, power) for power in range(1, self.degree + 1)]
        if self.marks_missing_:
            names.append(f"{self.column} was missing")
        return names

    def main_effect_names(self) -> list[str]:
        return [self.base_name]

    def notes(self, frame: pd.DataFrame) -> list[str]:
        """Return what the design should say about rows that were filled."""
        if self.missing == "refuse":   # nothing was filled: the check refused empty cells
            return []
        missing = frame[self.column].isna().to_numpy()
        if not missing.any():
            return []
        marked = (f", marked by '{self.column} was missing'" if self.marks_missing_ else
                  " (the training window had a value in every row, so no was-missing column)")
        return [f"{self.column}: {which_rows(frame, missing)} had no value and were filled with "
                f"the {self.missing} of the training window ({self.fill_value_:.4g}){marked}"]

    def to_dict(self, parts=()) -> dict:
        """Return the settings and what was learned, as stored in a model file."""
        return encode_fields({
            "column": self.column, "degree": self.degree, "transform_kind": self.transform_kind,
            "clip_quantiles": self.clip_quantiles, "missing": self.missing,
            "standardise": self.standardise, "marks_missing_": self.marks_missing_,
            "fill_value_": self.fill_value_, "clip_bounds_": self.clip_bounds_,
            "centre_": self.centre_, "scale_": self.scale_})

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> NumericTerms:
        """Return the fitted terms ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            terms = cls(fields.text("column"), fields.whole("degree", minimum=1),
                        fields.choice("transform_kind", TRANSFORMS),
                        fields.numbers("clip_quantiles", optional=True, length=2),
                        fields.choice("missing", FILLS), fields.flag("standardise"))
            terms.marks_missing_ = fields.flag("marks_missing_")
            terms.fill_value_ = fields.number("fill_value_", optional=True)
            terms.clip_bounds_ = fields.numbers("clip_bounds_", optional=True, length=2, kind=tuple)
            terms.centre_ = fields.number("centre_")
            terms.scale_ = fields.number("scale_")
        if not terms.scale_ > 0:
            raise ModelFileError(f"{cls.__name__} of '{terms.column}': its scale is not above 0")
        if (terms.fill_value_ is None) != (terms.missing == "refuse"):
            raise ModelFileError(f"{cls.__name__}: a fill value is stored if and only if the "
                                 "driver's missing values are filled")
        return terms


