"""Products of two drivers' terms."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.categorical import _LevelEncoder
from pipeline.features.numeric import NumericTerms

DRIVERS = (NumericTerms, _LevelEncoder)   # the parts an interaction may multiply


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
        # One product of two doubles, which IEEE arithmetic already rounds correctly: unlike a
        # driver's powers (core.double_double.power2), nothing here needs twice the precision.
        columns = [left[:, i] * right[:, j] for i in range(left.shape[1]) for j in range(right.shape[1])]
        return np.column_stack(columns) if columns else np.empty((len(frame), 0))

    def get_feature_names_out(self) -> list[str]:
        return [f"{a} × {b}" for a in self.first.main_effect_names()
                for b in self.second.main_effect_names()]

    def to_dict(self, parts=()) -> dict:
        """Return the two drivers, as references to their places in ``parts``, as stored."""
        return encode_fields({"first": self.first, "second": self.second, "fitted_": self.fitted_}, parts)

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> InteractionTerms:
        """Return the terms ``to_dict`` stored (``parts``: the features read before, which the
        two drivers are among)."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            terms = cls(fields.part("first", DRIVERS), fields.part("second", DRIVERS))
            if fields.raw("fitted_") is not True:
                raise fields.bad("fitted_", "true")
            terms.fitted_ = True
        return terms
