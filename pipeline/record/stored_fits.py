"""The fitted linear models as a model file stores them: their numbers, their target
transform and, for a model over all series that absorbed its series levels, those levels
(see ``pipeline.record.model_file``)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.errors import ModelFileError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode
from pipeline.features.target import TargetTransform
from pipeline.models.per_series import PerSeriesOLS
from pipeline.models.transformed import TransformedTargetModel

# ------------------------------------------------------------ target transform

def _scale_from_dict(scale, version: int) -> tuple[TargetTransform | None, float]:
    """Return a stored model's target transform (or None) and its smearing factor."""
    if scale is None:
        return None, 1.0
    if not isinstance(scale, dict):
        raise ModelFileError("the target transform is not a JSON object")
    fields = dict(scale)
    smearing = fields.pop("smearing", None)
    if not isinstance(smearing, (int, float)) or isinstance(smearing, bool):
        raise ModelFileError("the target transform's smearing factor is missing or not a number")
    return TargetTransform.from_dict(fields, version), float(smearing)


def _scale_to_dict(transform: TargetTransform | None, smearing: float) -> dict | None:
    return None if transform is None else {**transform.to_dict(), "smearing": smearing}


# --------------------------------------------------------------- linear models

class StoredLinear:
    """A fitted linear model reduced to its numbers: intercept plus coefficients, and the
    target transform (with its smearing factor) that turns its predictions into means."""

    def __init__(self, intercept: float, coef: np.ndarray, names: list[str],
                 transform: TargetTransform | None = None, smearing: float = 1.0,
                 levels: tuple[list[str], np.ndarray] | None = None) -> None:
        self.intercept_ = float(intercept)
        self.coef_ = np.asarray(coef, float)
        self.names_ = list(names)
        self.transform = transform
        self.smearing_ = float(smearing)
        # Series levels the fit absorbed (not columns of the design): each series and its
        # difference from the intercept; a series not among them gets the intercept alone.
        self.levels_ = levels

    @classmethod
    def from_model(cls, model, names: list[str]) -> StoredLinear:
        """Return the numbers of a fitted linear model (wrapped in its target transform or not)."""
        intercept, slopes = model.linear_coefficients()
        transform = model.transform if isinstance(model, TransformedTargetModel) else None
        smearing = model.smearing_ if transform is not None else 1.0
        absorbed = getattr(model.inner, "series_levels", lambda: None)()
        levels = None if absorbed is None else ([str(name) for name in absorbed[0]], absorbed[1])
        return cls(intercept, slopes, names, transform, smearing, levels)

    def to_dict(self) -> dict:
        """Return the numbers as a model file stores them (the names are the file's
        feature_names)."""
        stored = {"intercept": encode(self.intercept_), "coef": encode(self.coef_),
                  "target_transform": _scale_to_dict(self.transform, self.smearing_)}
        if self.levels_ is not None:
            stored["series_levels"] = {"series": self.levels_[0], "difference": encode(self.levels_[1])}
        return stored

    @classmethod
    def from_dict(cls, data: dict, names: list[str], version: int = FORMAT_VERSION) -> StoredLinear:
        """Return the model ``to_dict`` stored, whose coefficients go with the names."""
        with StoredFields(data, "a linear model", version=version) as fields:
            intercept = fields.number("intercept")
            coef = fields.array("coef", "float64", ndim=1)
            transform, smearing = _scale_from_dict(fields.raw("target_transform"), version)
            levels = None
            if "series_levels" in data:
                with StoredFields(fields.raw("series_levels"), "the series levels", version=version) as own:
                    levels = (own.texts("series"), own.array("difference", "float64", ndim=1))
                if len(levels[0]) != len(levels[1]):
                    raise ModelFileError(f"the model has {len(levels[1])} series levels for "
                                         f"{len(levels[0])} series")
        if len(coef) != len(names):
            raise ModelFileError(f"the model has {len(coef)} coefficients for {len(names)} features")
        return cls(intercept, coef, names, transform, smearing, levels)

    def predict(self, design) -> np.ndarray:
        # The same arithmetic as the run's own OLS prediction, so the numbers agree exactly.
        matrix = np.column_stack([np.ones(len(design.matrix)), design.matrix])
        if matrix.shape[1] != len(self.coef_) + 1:
            raise ModelFileError(f"the model has {len(self.coef_)} coefficients for "
                                 f"{matrix.shape[1] - 1} features")
        predicted = (matrix * np.concatenate([[self.intercept_], self.coef_])).sum(axis=1)
        if self.levels_ is not None:
            at = pd.Index(self.levels_[0]).get_indexer(np.asarray(design.series, dtype=object).astype(str))
            predicted = predicted + np.where(at >= 0, self.levels_[1][at], 0.0)
        return self.transform.to_mean(predicted, self.smearing_) if self.transform else predicted


class StoredPerSeries:
    """A model per series reduced to what its point forecasts need; predicts as it did."""

    def __init__(self, model: PerSeriesOLS, transform: TargetTransform | None = None,
                 smearing: float = 1.0) -> None:
        self.model = model
        self.transform = transform
        self.smearing_ = float(smearing)

    @classmethod
    def from_model(cls, model) -> StoredPerSeries:
        """Return a fitted model per series (wrapped in its target transform or not)."""
        if isinstance(model, TransformedTargetModel):
            return cls(model.model, model.transform, model.smearing_)
        return cls(model)

    def to_dict(self) -> dict:
        """Return the model as a model file stores it: PerSeriesOLS's fields and the target
        transform."""
        return {**self.model.to_dict(), "target_transform": _scale_to_dict(self.transform, self.smearing_)}

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION) -> StoredPerSeries:
        """Return the model ``to_dict`` stored."""
        if not isinstance(data, dict) or "target_transform" not in data:
            raise ModelFileError("a model per series: the field 'target_transform' is missing")
        own = dict(data)
        transform, smearing = _scale_from_dict(own.pop("target_transform"), version)
        return cls(PerSeriesOLS.from_dict(own, version), transform, smearing)

    def predict(self, design) -> np.ndarray:
        predicted = self.model.predict(design)
        return self.transform.to_mean(predicted, self.smearing_) if self.transform else predicted
