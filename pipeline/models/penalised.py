"""Penalised and robust linear models, on standardised drivers.

Ridge, lasso and elastic net choose their penalty by an inner validation that
respects time: inside the training window, the latest months are held out, each
candidate penalty is fitted on the months before them, and the penalty with the
lowest squared error wins; the model is then refitted on the whole window.
Nothing outside the training window is ever seen.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import ElasticNet, HuberRegressor, Lasso, Ridge

from pipeline.core.execution import IN_PROCESS, Executor
from pipeline.core.progress import QUIET, Progress
from pipeline.models.contract import Model
from pipeline.models.ols import INTERCEPT

DEFAULT_PENALTIES = {
    "ridge": list(np.logspace(-3, 3, 13)),
    "lasso": list(np.logspace(-4, 0, 9)),
    "elastic_net": list(np.logspace(-4, 0, 9)),
}
INNER_SHARE = 0.2   # share of the training window's months held out to choose the penalty


class _Standardised(Model):
    """Centre and scale the drivers and the target on the window; without an intercept, only
    scale them (by their root mean square), since centring would put an intercept back."""

    def _learn_scaling(self, matrix: np.ndarray, y: np.ndarray) -> None:
        if self.fit_intercept:
            self.x_mean_ = matrix.mean(axis=0) if len(matrix) else np.zeros(matrix.shape[1])
            spread = matrix.std(axis=0)
            self.y_mean_ = float(np.mean(y))
            spread_y = float(np.std(y))
        else:
            self.x_mean_ = np.zeros(matrix.shape[1])
            spread = np.sqrt(np.mean(matrix ** 2, axis=0)) if len(matrix) else np.ones(matrix.shape[1])
            self.y_mean_ = 0.0
            spread_y = float(np.sqrt(np.mean(np.square(y)))) if len(y) else 1.0
        self.x_scale_ = np.where(spread > 0, spread, 1.0)
        self.y_scale_ = spread_y if spread_y > 0 else 1.0

    def _x(self, matrix: np.ndarray) -> np.ndarray:
        return (matrix - self.x_mean_) / self.x_scale_

    def _unscale(self, names: list[str]) -> pd.DataFrame:
        """Return coefficients on the drivers' own scale and on the standardised scale."""
        standard = np.asarray(self.estimator_.coef_, float) * self.y_scale_
        original = standard / self.x_scale_
        intercept = self.y_mean_ + float(self.estimator_.intercept_) * self.y_scale_ \
            - float(original @ self.x_mean_)
        if not self.fit_intercept:
            return pd.DataFrame({"term": list(names), "estimate": original,
                                 "estimate_standardised": standard})
        return pd.DataFrame({
            "term": [INTERCEPT] + list(names),
            "estimate": np.concatenate([[intercept], original]),
            "estimate_standardised": np.concatenate([[np.nan], standard]),
        })

    def linear_coefficients(self) -> tuple[float, np.ndarray]:
        estimates = self.coefficient_table()["estimate"].to_numpy(float)
        return (float(estimates[0]), estimates[1:]) if self.fit_intercept else (0.0, estimates)


class PenalisedModel(_Standardised):
    """Ridge, lasso or elastic net with the penalty chosen inside the training window."""

    def __init__(self, kind: str, penalties: list[float] | None = None, l1_share: float = 0.5,
                 fit_intercept: bool = True) -> None:
        self.kind = kind
        self.penalties = penalties
        self.l1_share = l1_share
        self.fit_intercept = fit_intercept

    @classmethod
    def from_choice(cls, choice, *, fit_intercept: bool = True, executor: Executor = IN_PROCESS,
                    progress: Progress = QUIET) -> PenalisedModel:
        if isinstance(choice, str):
            return cls(choice, fit_intercept=fit_intercept)
        return cls(choice.kind, penalties=choice.penalties, l1_share=choice.l1_share,
                   fit_intercept=fit_intercept)

    def _estimator(self, penalty: float):
        # The target and drivers are centred already when there is an intercept; the
        # estimator's own intercept is then zero and left out.
        if self.kind == "ridge":
            return Ridge(alpha=penalty, fit_intercept=self.fit_intercept)
        if self.kind == "lasso":
            return Lasso(alpha=penalty, max_iter=10000, fit_intercept=self.fit_intercept)
        return ElasticNet(alpha=penalty, l1_ratio=self.l1_share, max_iter=10000,
                          fit_intercept=self.fit_intercept)

    def _fit_scaled(self, matrix: np.ndarray, y: np.ndarray, penalty: float):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            return self._estimator(penalty).fit(self._x(matrix), (y - self.y_mean_) / self.y_scale_)

    def choose_penalty(self, design, y: np.ndarray) -> tuple[float, dict[float, float]]:
        """Return the penalty with the lowest inner-validation squared error, and every score."""
        candidates = self.penalties or DEFAULT_PENALTIES[self.kind]
        if design.period is None:
            order = np.arange(len(y))
        else:
            order = np.asarray(design.period)
        months = np.unique(order)
        held = max(1, int(round(len(months) * INNER_SHARE)))
        if len(months) - held < 2:
            return float(candidates[0]), {}
        cut = months[-held - 1]
        inner_train, inner_test = order <= cut, order > cut
        self._learn_scaling(design.matrix[inner_train], y[inner_train])
        scores = {}
        for penalty in candidates:
            fitted = self._fit_scaled(design.matrix[inner_train], y[inner_train], penalty)
            predicted = fitted.predict(self._x(design.matrix[inner_test])) * self.y_scale_ + self.y_mean_
            scores[float(penalty)] = float(np.mean((predicted - y[inner_test]) ** 2))
        best = min(scores, key=lambda p: (scores[p], -p))  # on a tie, the stronger penalty
        return best, scores

    def fit(self, design, y) -> PenalisedModel:
        y = np.asarray(y, float)
        self.names_ = list(design.names)
        self.penalty_, self.penalty_scores_ = self.choose_penalty(design, y)
        self._learn_scaling(design.matrix, y)
        self.estimator_ = self._fit_scaled(design.matrix, y, self.penalty_)
        return self

    def predict(self, design) -> np.ndarray:
        return self.estimator_.predict(self._x(design.matrix)) * self.y_scale_ + self.y_mean_

    def coefficient_table(self) -> pd.DataFrame:
        table = self._unscale(self.names_)
        table["penalty"] = self.penalty_
        return table


class HuberModel(_Standardised):
    """Linear regression with Huber's loss: large residuals count linearly, not squared."""

    def __init__(self, threshold: float = 1.35, fit_intercept: bool = True) -> None:
        self.threshold = threshold
        self.fit_intercept = fit_intercept

    @classmethod
    def from_choice(cls, choice, *, fit_intercept: bool = True, executor: Executor = IN_PROCESS,
                    progress: Progress = QUIET) -> HuberModel:
        threshold = 1.35 if isinstance(choice, str) else choice.huber_threshold
        return cls(threshold=threshold, fit_intercept=fit_intercept)

    def fit(self, design, y) -> HuberModel:
        y = np.asarray(y, float)
        self.names_ = list(design.names)
        self._learn_scaling(design.matrix, y)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            self.estimator_ = HuberRegressor(epsilon=self.threshold, alpha=0.0, max_iter=1000,
                                            fit_intercept=self.fit_intercept).fit(
                self._x(design.matrix), (y - self.y_mean_) / self.y_scale_)
        return self

    def predict(self, design) -> np.ndarray:
        return self.estimator_.predict(self._x(design.matrix)) * self.y_scale_ + self.y_mean_

    def coefficient_table(self) -> pd.DataFrame:
        return self._unscale(self.names_)
