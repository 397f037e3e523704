"""The contract every model follows, baselines and linear models alike.

In the spirit of scikit-learn's estimators: ``__init__`` only stores settings,
``fit(design, y)`` learns (state in attributes ending in ``_``) and returns
``self``, ``predict(design)`` never learns. What a model cannot give it answers
with None, never by lacking the method, so a caller never has to guess with
``hasattr``; a wrapper forwards every part of the contract. The catalogue
(``pipeline.core.catalogue``) names the class of each kind;
``tests/models/test_contract.py`` checks every entry against this contract.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.design import Design
from pipeline.core.execution import IN_PROCESS, Executor
from pipeline.core.progress import QUIET, Progress


class Model:
    """A model castline can backtest, forecast with and store."""

    fit_intercept: bool = False   # a model with an intercept sets it from the spec's intercept

    @classmethod
    def from_choice(cls, choice, *, fit_intercept: bool = True, executor: Executor = IN_PROCESS,
                    progress: Progress = QUIET) -> Model:
        """Return a new, unfitted model for a spec's model choice (or a bare kind name).

        ``executor`` and ``progress``: where a model that fits in tasks (one per chunk of
        series) runs them and reports how far it has got; the other models ignore them.
        """
        return cls()

    def fit(self, design: Design, y) -> Model:
        """Learn from the design and target of a training window; return self."""
        raise NotImplementedError

    def predict(self, design: Design) -> np.ndarray:
        """Return one prediction per row of the design, on the target's own scale."""
        raise NotImplementedError

    def prediction_se(self, design: Design) -> np.ndarray | None:
        """Return the standard error of each row's prediction on the scale the model fits, or
        None for a model that gives none (its forecasts then have no analytic interval).

        That scale is the target's own, except for the transformed-target wrapper
        (``models.transformed``), whose standard errors are on the transformed scale and
        go with its ``centre``, the prediction there, not with ``predict``.
        """
        return None

    def residual_sd(self, design: Design) -> np.ndarray | None:
        """Return, per row, the residual standard deviation of the fit behind its prediction
        (the estimate of the noise σ, without the parameters' uncertainty that
        ``prediction_se`` adds), or None where ``prediction_se`` gives none."""
        return None

    def residual_df(self, design: Design) -> float | np.ndarray | None:
        """Return the residual degrees of freedom behind each row's standard error (one
        number, or one per row), or None where ``prediction_se`` gives none."""
        return None

    def coefficient_table(self) -> pd.DataFrame:
        """Return the fitted terms: at least the columns term and estimate."""
        raise NotImplementedError

    def linear_coefficients(self) -> tuple[float, np.ndarray] | None:
        """Return the intercept (0 without one) and the slopes on the design's columns, for a
        model whose prediction is intercept + design · slopes; None for any other."""
        return None

    @property
    def least_squares_fit(self):
        """Return the fit's LeastSquaresFit (residuals, inference), or None for a model fitted
        otherwise."""
        return None

    def design_matrix(self, design: Design) -> np.ndarray:
        """Return the matrix the model fits: the design's columns, after an intercept column
        when the model fits one."""
        if self.fit_intercept:
            return np.column_stack([np.ones(len(design.matrix)), design.matrix])
        return design.matrix

    @property
    def inner(self) -> Model:
        """Return the model that does the fitting (itself, unless it is a wrapper)."""
        return self

    @property
    def fallbacks_(self) -> pd.DataFrame | None:
        """Return the series fitted by their own mean instead (a model per series), or None."""
        return None

    def notes(self) -> list[str]:
        """Return what the fit did that the run summary should say."""
        return []

    def describe(self) -> str | None:
        """Return a note the run summary carries about the model as a whole, or None."""
        return None
