"""The scale the linear models fit the target on, and turning predictions back."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.errors import DataError
from pipeline.core.stored import FORMAT_VERSION, StoredFields
from pipeline.features.rows import first_row

KINDS = ("none", "log", "log1p")


class TargetTransform:
    """The scale the linear models fit the target on: as it is, log, or log(1 + value)."""

    def __init__(self, column: str, kind: str = "none") -> None:
        self.column = column
        self.kind = kind

    def to_dict(self) -> dict:
        """Return the transform as a model file stores it."""
        return {"column": self.column, "kind": self.kind}

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION) -> TargetTransform:
        """Return the transform ``to_dict`` stored."""
        with StoredFields(data, "the target transform", version=version) as fields:
            return cls(fields.text("column"), fields.choice("kind", KINDS))

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
                            row=first_row(frame, bad))

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
