"""A linear model fitted on the transformed target, its predictions turned back into means."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.design import Design
from pipeline.features.target import TargetTransform


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
