"""A linear model fitted on the transformed target, its predictions turned back into means."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.design import Design
from pipeline.features.target import TargetTransform
from pipeline.models.contract import Model


class TransformedTargetModel(Model):
    """A model fitted on the transformed target, whose predictions are turned back into means.

    Fitting on log(y) and taking exp of the prediction estimates the median of
    y, not its mean; multiplying by the smearing factor mean(exp(residuals))
    of the training fit corrects that without assuming normal errors
    (Duan 1983, "Smearing estimate: a nonparametric retransformation method").

    It forwards every part of the contract to the model inside, except the standard
    error of a prediction: the inner model's is on the transformed scale, and a
    symmetric ± on the target's own scale does not follow from it, so it gives none
    (and says so in ``describe``); the empirical intervals still apply.
    """

    def __init__(self, model: Model, transform: TargetTransform) -> None:
        self.model = model
        self.transform = transform

    @property
    def fit_intercept(self) -> bool:
        return self.model.fit_intercept

    def fit(self, design: Design, y) -> TransformedTargetModel:
        scaled = self.transform.forward(y)
        self.model.fit(design, scaled)
        self.smearing_ = self.transform.smearing_factor(scaled - self.model.predict(design))
        return self

    def predict(self, design: Design) -> np.ndarray:
        return self.transform.to_mean(self.model.predict(design), self.smearing_)

    def prediction_se(self, design: Design) -> None:
        return None

    def residual_sd(self, design: Design) -> None:
        return None   # the inner model's is on the transformed scale, as its standard error

    def residual_df(self, design: Design) -> None:
        return None

    def coefficient_table(self) -> pd.DataFrame:
        return self.model.coefficient_table()

    def linear_coefficients(self) -> tuple[float, np.ndarray] | None:
        return self.model.linear_coefficients()

    @property
    def least_squares_fit(self):
        return self.model.least_squares_fit

    def design_matrix(self, design: Design) -> np.ndarray:
        return self.model.design_matrix(design)

    @property
    def inner(self) -> Model:
        return self.model.inner

    @property
    def fallbacks_(self) -> pd.DataFrame | None:
        return self.model.fallbacks_

    def notes(self) -> list[str]:
        return self.model.notes()

    def describe(self) -> str:
        """Return the note the run summary carries about the retransformation."""
        note = (f"fitted on {self.transform.name}; its predictions were turned back to "
                f"{self.transform.column} with Duan's (1983) smearing correction (factor "
                f"{self.smearing_:.4f}), so they estimate the mean rather than the median; its "
                f"coefficients, R² and residual SD are on the {self.transform.name} scale")
        if type(self.model).prediction_se is not Model.prediction_se:   # the inner model gives one
            note += ("; it gives no analytic interval (its standard errors are on the "
                     f"{self.transform.name} scale), only the empirical one")
        return note
