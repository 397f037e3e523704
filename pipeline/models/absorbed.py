"""OLS with a level per series, the levels absorbed rather than fitted as columns.

A model over all series with its own level for each series is, written out, an OLS
on the drivers plus a 0/1 column per series: at 10,000 series × 120 months those
columns alone take 10 GB, and their QR far longer. The within transformation gives
the same fit without them (the Frisch–Waugh–Lovell theorem): subtract each series'
mean from the target and from every other column, fit OLS on what is left (no
intercept), and each series' level is its mean target less its mean drivers times
the slopes. Slopes, residuals and predictions are those of the fit with the
columns; so are the standard errors, once the degrees of freedom count the levels
(n − k − number of series).

The levels are reported as the fit with columns reports them, in treatment coding:
an intercept (the first series' level) and, for every other series, its difference
from the first. Their standard errors come from the same algebra:
Var(αₛ) = σ²/nₛ + x̄ₛ'Vx̄ₛ and Cov(αₛ, αᵣ) = x̄ₛ'Vx̄ᵣ for s ≠ r, with V the slopes'
covariance, because a series' mean target is uncorrelated with the slopes.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from pipeline.core.scale import unit_scale
from pipeline.models.ols import Collinearity, LeastSquaresFit, least_squares

LEVELS_REASON = "constant within every series, so the series levels already hold it; left out of the fit"


def group_means(values: np.ndarray, codes: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Return each group's mean of each column of ``values`` (groups × columns)."""
    values = np.asarray(values, float)
    flat = values.reshape(len(values), -1)
    groups = len(counts)
    sums = np.empty((groups, flat.shape[1]))
    for column in range(flat.shape[1]):
        sums[:, column] = np.bincount(codes, weights=flat[:, column], minlength=groups)
    means = sums / np.where(counts > 0, counts, 1)[:, None]
    return means.reshape((groups, *values.shape[1:]))


def within(values: np.ndarray, codes: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return the values less their group's mean, and the means (two passes: the second
    removes what rounding left of the mean in the first)."""
    means = group_means(values, codes, counts)
    centred = values - means[codes]
    again = group_means(centred, codes, counts)
    return centred - again[codes], means + again


@dataclass(frozen=True)
class AbsorbedFit:
    """An OLS fit with a level per series: the slopes' fit on the within-transformed
    columns, each series' level, and what predictions and standard errors need."""

    # On the within-transformed columns; df, SEs, R² and leverage count the levels.
    slopes: LeastSquaresFit
    levels: np.ndarray             # αₛ per series, in the order of ``series_names``
    series_names: np.ndarray
    counts: np.ndarray             # rows per series in the fit
    driver_means: np.ndarray       # x̄ₛ per series (series × columns)
    residual_ss: float
    total_ss: float
    codes: np.ndarray              # each fitted row's series, a position in ``series_names``

    @property
    def n(self) -> int:
        return len(self.slopes.residuals)

    @property
    def df_resid(self) -> int:
        return self.slopes.df_resid

    @property
    def resid_sd(self) -> float:
        return self.slopes.resid_sd

    def _kept_inverse(self) -> tuple[np.ndarray, np.ndarray]:
        """Return the kept columns and (X̃'X̃)⁻¹ on them."""
        kept = self.slopes.kept
        return kept, self.slopes.xtx_inverse[np.ix_(kept, kept)]

    def predict(self, matrix: np.ndarray, codes: np.ndarray) -> np.ndarray:
        """Return predictions for rows whose series are ``codes`` into ``series_names``
        (−1: a series the fit did not hold, given the first series' level)."""
        # As a model file computes it (pipeline/record/model_file.py), so the two agree exactly:
        # the first series' level with the slopes, then the series' difference from it.
        matrix = np.asarray(matrix, float)
        with_one = np.empty((len(matrix), matrix.shape[1] + 1))
        with_one[:, 0] = 1.0
        with_one[:, 1:] = matrix
        coef = np.concatenate([[self.levels[0]], np.nan_to_num(self.slopes.coef, nan=0.0)])
        difference = self.levels - self.levels[0]
        return (with_one * coef).sum(axis=1) + np.where(codes >= 0, difference[np.where(codes >= 0, codes, 0)], 0.0)

    def prediction_se(self, matrix: np.ndarray, codes: np.ndarray) -> np.ndarray:
        """Return s·sqrt(1 + 1/nₛ + (x − x̄ₛ)'(X̃'X̃)⁻¹(x − x̄ₛ)) for new rows: the standard
        error of a new observation's prediction, as the fit with series columns gives it."""
        kept, inverse = self._kept_inverse()
        own = np.where(codes >= 0, codes, 0)
        apart = np.asarray(matrix, float)[:, kept] - self.driver_means[own][:, kept]
        spread = 1.0 / self.counts[own] + np.einsum("ij,jk,ik->i", apart, inverse, apart)
        return self.resid_sd * np.sqrt(1.0 + spread)

    def _sandwich_variances(self, within: np.ndarray, scores: np.ndarray, lags: int,
                            order: np.ndarray | None) -> tuple[float, np.ndarray]:
        """Return the sandwich variances of the first level and of each level's difference
        from it. Each is a linear function c'y of the target, so its variance is
        Σᵢⱼ wᵢⱼ cᵢcⱼuᵢuⱼ, with cᵢ = δₛ/nₛ − δᵣ/nᵣ − x̃ᵢ'bₛ, bₛ = (X̃'X̃)⁻¹(x̄ₛ − x̄ᵣ), uᵢ the
        rows' ``scores`` (e/(1 − h) for HC3, e for HAC) and wᵢⱼ Bartlett's weight 1 − ℓ/(L+1)
        for rows ℓ ≤ L = ``lags`` apart within a series in time order (``order``), as the
        slopes' sandwich weighs them; expanded into sums by series: V (u·u), H (u·u·x̃) and
        the slopes' meat M. ``within``: the rows' within-series columns that were kept."""
        kept, inverse = self._kept_inverse()
        groups, n = len(self.counts), self.counts
        rows = np.lexsort((np.arange(len(scores)) if order is None else np.asarray(order), self.codes))
        code, u, x = self.codes[rows], np.asarray(scores, float)[rows], np.asarray(within, float)[rows]
        ux = x * u[:, None]
        own = np.bincount(code, weights=u * u, minlength=groups)                           # V
        pulled = group_means(ux * u[:, None], code, n) * n[:, None]                        # H
        meat = ux.T @ ux                                                                   # M
        for lag in range(1, lags + 1):
            same = np.flatnonzero(code[lag:] == code[:-lag])   # pairs (k, k + lag) in one series
            weight = 1.0 - lag / (lags + 1)
            products = u[same] * u[same + lag]
            own += 2 * weight * np.bincount(code[same], weights=products, minlength=groups)
            pulled += weight * group_means((x[same] + x[same + lag]) * products[:, None], code[same], n) \
                * n[:, None]
            across = ux[same + lag].T @ ux[same]
            meat += weight * (across + across.T)
        means = self.driver_means[:, kept]
        first = inverse @ means[0]
        reference = own[0] / n[0] ** 2 - 2 / n[0] * pulled[0] @ first + first @ meat @ first
        apart = (means - means[0]) @ inverse
        difference = (own / n ** 2 + own[0] / n[0] ** 2 - 2 / n * np.einsum("ij,ij->i", pulled, apart)
                      + 2 / n[0] * apart @ pulled[0] + np.einsum("ij,jk,ik->i", apart, meat, apart))
        return reference, difference

    def level_table(self, level: float = 0.95, within: np.ndarray | None = None,
                    scores: np.ndarray | None = None, lags: int = 0,
                    order: np.ndarray | None = None) -> pd.DataFrame:
        """Return the levels as the fit with columns reports them: the first series' level as
        the intercept, each other series' difference from it, with standard errors: classical,
        or with ``scores`` a sandwich's (see ``_sandwich_variances``: HC3 with e/(1 − h) and no
        lags, HAC with e, its lags and the rows' time order)."""
        kept, inverse = self._kept_inverse()
        means = self.driver_means[:, kept]
        apart = means - means[0]
        # The variances per unit of the target's scale (squares of a target of 1e-300 or
        # 1e145 would underflow or overflow), the standard errors then times that scale.
        if scores is not None:
            size = unit_scale(scores)
            reference_variance, difference_variance = self._sandwich_variances(
                within, np.asarray(scores, float) / size, lags, order)
        else:
            size = self.resid_sd
            reference_variance = 1.0 / self.counts[0] + means[0] @ inverse @ means[0]
            difference_variance = (1.0 / self.counts + 1.0 / self.counts[0]
                                   + np.einsum("ij,jk,ik->i", apart, inverse, apart))
        stderr = size * np.sqrt(np.r_[reference_variance, difference_variance[1:]])
        estimate = np.r_[self.levels[0], self.levels[1:] - self.levels[0]]
        table = LeastSquaresFit(
            names=["intercept", *[str(name) for name in self.series_names[1:]]], coef=estimate,
            stderr=stderr, residuals=self.slopes.residuals, resid_sd=self.resid_sd, r2=np.nan,
            adj_r2=np.nan, df_resid=self.df_resid, rank=self.slopes.rank,
            condition_number=np.nan, centered_r2=True).coefficient_table(level)
        return table


def absorbed_least_squares(matrix: np.ndarray, y: np.ndarray, series, names: list[str] | None = None
                           ) -> AbsorbedFit:
    """Return the OLS fit of y on the columns of ``matrix`` plus a level per series of
    ``series`` (an intercept is implied: do not add one), by the within transformation."""
    y = np.asarray(y, float)
    # Fitted at the target's unit scale (an exact power of two): see least_squares.
    size = unit_scale(y)
    fit = _absorbed_least_squares(np.asarray(matrix, float), y / size, series, names)
    if size == 1.0:
        return fit
    return replace(fit, slopes=fit.slopes.rescaled(size), levels=fit.levels * size,
                   residual_ss=fit.residual_ss * size * size, total_ss=fit.total_ss * size * size)


def _absorbed_least_squares(x: np.ndarray, y: np.ndarray, series, names: list[str] | None) -> AbsorbedFit:
    n, p = x.shape
    names = list(names) if names is not None else [f"x{i}" for i in range(p)]
    codes, series_names = pd.factorize(np.asarray(series), sort=True)
    counts = np.bincount(codes, minlength=len(series_names)).astype(float)
    groups = len(series_names)
    x_within, x_means = within(x, codes, counts)
    y_within, y_means = within(y, codes, counts)
    # A column constant within every series leaves only rounding after the transformation:
    # below the tolerance a pivoted QR of the columns with the levels would apply, it is zero.
    x_norms = np.sqrt(np.einsum("ij,ij->j", x, x)) if p else np.zeros(0)
    left = np.sqrt(np.einsum("ij,ij->j", x_within, x_within)) if p else np.zeros(0)
    x_within[:, left <= max(n, p + groups) * np.finfo(float).eps * x_norms] = 0.0
    if p:
        fit = least_squares(x_within, y_within, names, centered_r2=False)
    else:
        fit = LeastSquaresFit(names=[], coef=np.zeros(0), stderr=np.zeros(0), residuals=y_within,
                              resid_sd=np.nan, r2=np.nan, adj_r2=np.nan, df_resid=n, rank=0,
                              condition_number=1.0, centered_r2=False, xtx_inverse=np.zeros((0, 0)),
                              leverage=np.zeros(n))
    # The columns the within transformation left all zero are those constant within each series.
    dropped = [Collinearity(d.column, d.combination_of) if d.combination_of or x_norms[names.index(d.column)] == 0
               else Collinearity(d.column, [], reason=LEVELS_REASON) for d in fit.dropped]

    residuals = fit.residuals
    rss = float(residuals @ residuals)
    rank = fit.rank + groups
    df_resid = n - rank
    sigma2 = rss / df_resid if df_resid > 0 else np.nan
    inverse = fit.xtx_inverse if fit.xtx_inverse is not None else np.zeros((p, p))
    stderr = np.sqrt(np.diag(inverse) * sigma2) if p else np.zeros(0)
    total = float(((y - y.mean()) ** 2).sum())
    r2 = 1.0 - rss / total if total > 0 else np.nan
    adj_r2 = 1.0 - (1.0 - r2) * (n - 1) / df_resid if df_resid > 0 else np.nan
    slopes = LeastSquaresFit(
        names=names, coef=fit.coef, stderr=stderr, residuals=residuals,
        resid_sd=float(np.sqrt(sigma2)), r2=r2, adj_r2=adj_r2, df_resid=df_resid, rank=rank,
        condition_number=fit.condition_number, centered_r2=True, dropped=dropped,
        xtx_inverse=inverse, leverage=fit.leverage + 1.0 / counts[codes],   # the levels' part: 1/nₛ
        precision=fit.precision)
    beta = np.nan_to_num(fit.coef)
    levels = y_means - x_means @ beta if p else y_means
    return AbsorbedFit(slopes=slopes, levels=levels, series_names=np.asarray(series_names, dtype=object),
                       counts=counts, driver_means=x_means, residual_ss=rss, total_ss=total, codes=codes)
