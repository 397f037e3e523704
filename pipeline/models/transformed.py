"""A linear model fitted on the transformed target, its predictions turned back into means.

Its standard errors stay on the transformed scale, with the prediction there (``centre``):
an analytic interval is found on that scale and turned back by the inverse transform
(``core.intervals.analytic_bounds``), so it is centred on the median, not on the mean.
"""

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

    It forwards every part of the contract to the model inside, the standard error of a
    prediction and its residual df included: unlike every other model's, these are on the
    transformed scale (log(y) or log(1 + y)), not the target's own, and go with the inner
    model's prediction on that scale, ``centre``, not with ``predict``. An analytic
    interval is centre ± t(df)·se there, turned back by the inverse transform
    (quantiles survive a monotone transform): its bounds are on the target's scale, it is
    centred on the median exp(centre) (exp(centre) − 1 for log1p), and the smeared mean
    ``predict`` states lies inside it but off its centre (``describe`` says so). A
    symmetric ± on the target's own scale does not follow from these standard errors.
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

    def centre(self, design: Design) -> np.ndarray:
        """Return the inner model's prediction on the transformed scale (log(y) or
        log(1 + y)), the centre of the analytic interval there; ``predict`` turns it back
        into the mean."""
        return self.model.predict(design)

    def prediction_se(self, design: Design) -> np.ndarray | None:
        """Return the inner model's standard errors, on the transformed scale (around
        ``centre``, not around ``predict``), or None where it gives none."""
        return self.model.prediction_se(design)

    def residual_sd(self, design: Design) -> None:
        return None   # the inner model's is on the transformed scale; fed-back recursion is not handled

    def residual_df(self, design: Design) -> float | np.ndarray | None:
        """Return the inner model's residual df, of its fit on the transformed scale."""
        return self.model.residual_df(design)

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
            back = "exp" if self.transform.kind == "log" else "exp(·) − 1"
            note += (f"; its analytic interval is found on the {self.transform.name} scale and "
                     f"turned back with {back}, so it is centred on the median of "
                     f"{self.transform.column}, while the forecast is the (smeared) mean")
        inner = self.model.describe()
        return f"{inner}; {note}" if inner else note
