"""Ordinary least squares, computed carefully.

The columns are scaled to unit length, the scaled design is factorised by
Householder QR (never the normal equations), and the solution is refined
against its own residuals. A column that is (numerically) a combination of
earlier columns is dropped and named, and the condition number of the scaled
design is reported.

When the scaled design's condition number κ exceeds ``REFINE_ABOVE_CONDITION``
(1,000), or the first-order bound on a coefficient's relative error in the scaled
design, ε·κ·max|z|/|zⱼ| (z the scaled coefficients, ε the double's machine
epsilon), leaves it fewer than ``REFINE_BELOW`` (8) digits, the fit is solved again
by ``models.refined``: the augmented system refined with its residuals in twice the
working precision. When ε·κ leaves (X'X)⁻¹ fewer than ``REFINE_COVARIANCE_BELOW``
(11) digits, it is refined too. With these, the eight NIST StRD linear datasets are
met to at least eleven significant digits on every coefficient and nine on every
standard error (tests/models/test_ols.py).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
import scipy.linalg

from pipeline.core.distributions import t_quantile, t_upper
from pipeline.core.execution import IN_PROCESS, Executor
from pipeline.core.progress import QUIET, Progress
from pipeline.core.scale import unit_scale
from pipeline.models.contract import Model
from pipeline.models.refined import refined_least_squares

INTERCEPT = "intercept"
# The rule, measured on 400 random polynomial designs against exact rational solutions
# (tests/models/test_precision_rule.py checks 60): where it leaves a fit to the ordinary solve,
# every coefficient within a factor of 100 of the largest (scaled) had at least 12.7 correct
# digits and every coefficient at least 10.0; refined, every one had 15. A lower condition
# number alone would refine the fits of ordinary data (a panel's at κ 30–60, the demo's at
# 106) for digits past the twelfth of coefficients far smaller than the others.
REFINE_ABOVE_CONDITION = 1e3
REFINE_BELOW = 8.0
REFINE_COVARIANCE_BELOW = 11.0
# A backtest scores predictions, whose relative error the condition number bounds (ε·κ) however
# small a coefficient is: the growing factor of the backtest's windows hands a window to the
# careful fit, which refines, when that bound leaves fewer digits than this (κ above 4.5e7).
# Eight is far more than the four digits an MAE is shown to, and keeps the growing factor for
# the nearly collinear designs it does well (a quadratic in a driver far from zero: κ ≈ 3e6).
PREDICTION_DIGITS = 8.0
MACHINE_EPSILON = float(np.finfo(float).eps)


@dataclass(frozen=True)
class Precision:
    """How the coefficients were solved, and how many of their digits are estimated right."""

    refined: bool            # solved again on the augmented system, residuals in twice the precision
    steps: int               # the refinement's corrections (0: not refined)
    digits: float            # estimated correct significant digits of the least accurate coefficient
    covariance_refined: bool = False   # (X'X)⁻¹, behind the standard errors, refined too

    def describe(self) -> str:
        if not self.refined:
            return (f"solved in double precision; the condition number allows about "
                    f"{self.digits:.0f} correct digits in every coefficient")
        covariance = "; the standard errors from refined solves too" if self.covariance_refined else ""
        return (f"refined in twice the working precision ({self.steps} step{'s' * (self.steps != 1)}); "
                f"about {self.digits:.0f} correct digits estimated in every coefficient{covariance}")


def needs_refining(condition, digits) -> np.ndarray | bool:
    """Return whether the rule refines a fit of this condition number and estimated digits
    (``ordinary_digits``); element-wise for stacks."""
    return (np.asarray(condition) > REFINE_ABOVE_CONDITION) | (np.asarray(digits) < REFINE_BELOW)


def ordinary_digits(condition, scaled_coef: np.ndarray) -> np.ndarray | float:
    """Return the fewest correct digits the double-precision solve is estimated to leave in a
    coefficient: −log₁₀(ε·κ·max|z|/|zⱼ|), z the coefficients of the unit-length columns (a
    coefficient of exactly zero is left out); at most 15. For a stack of fits, ``condition``
    holds one per fit and ``scaled_coef`` a row per fit."""
    z = np.abs(np.asarray(scaled_coef, float))
    stacked = z.ndim == 2
    z = np.atleast_2d(z)
    condition = np.broadcast_to(np.asarray(condition, float), z.shape[:1])
    present = z > 0
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        spread = (np.where(present, z, 0).max(axis=1, initial=0.0)
                  / np.where(present, z, np.inf).min(axis=1, initial=np.inf))
        worst = MACHINE_EPSILON * condition * spread
        digits = np.where(present.any(axis=1), np.minimum(15.0, -np.log10(worst)), 15.0)
    digits = np.where(np.isnan(digits), 0.0, digits)
    return digits if stacked else float(digits[0])


@dataclass(frozen=True)
class Collinearity:
    """A column left out of the fit because earlier columns already span it."""

    column: str
    combination_of: list[str]
    reason: str | None = None   # why, when not a combination of named columns

    def describe(self) -> str:
        if self.reason:
            return f"'{self.column}' is {self.reason}"
        if not self.combination_of:
            return f"'{self.column}' is all zeros after encoding; left out of the fit"
        others = ", ".join(f"'{name}'" for name in self.combination_of)
        return f"'{self.column}' is a linear combination of {others}; left out of the fit"


@dataclass(frozen=True)
class LeastSquaresFit:
    """The estimates and the figures a reviewer asks of them."""

    names: list[str]
    coef: np.ndarray            # NaN for a dropped column
    stderr: np.ndarray          # NaN for a dropped column
    residuals: np.ndarray
    resid_sd: float
    r2: float
    adj_r2: float
    df_resid: int
    rank: int
    condition_number: float
    centered_r2: bool
    dropped: list[Collinearity] = field(default_factory=list)
    xtx_inverse: np.ndarray | None = None   # (X'X)⁻¹ on the columns' own scale; NaN for dropped
    leverage: np.ndarray | None = None      # diagonal of the hat matrix, per row
    precision: Precision | None = None      # how it was solved, and its estimated digits

    def rescaled(self, factor: float) -> LeastSquaresFit:
        """Return the fit of the target times ``factor``: the coefficients, their standard
        errors, the residuals and their SD scale with it; R², the leverage and the rest do not."""
        return replace(self, coef=self.coef * factor, stderr=self.stderr * factor,
                       residuals=self.residuals * factor, resid_sd=self.resid_sd * factor)

    @property
    def kept(self) -> np.ndarray:
        """Return the positions of the columns in the fit (not dropped)."""
        return np.flatnonzero(np.isfinite(self.coef))

    def coefficient_table(self, level: float = 0.95) -> pd.DataFrame:
        """Return estimate, standard error, t, p and the two-sided interval per term."""
        with np.errstate(divide="ignore", invalid="ignore"):
            t_values = self.coef / self.stderr
        if self.df_resid > 0:
            p_values = 2 * t_upper(np.abs(t_values), self.df_resid)
            multiplier = t_quantile(0.5 + level / 2, self.df_resid)
        else:
            p_values = np.full_like(self.coef, np.nan)
            multiplier = np.nan
        low = self.coef - multiplier * self.stderr
        high = self.coef + multiplier * self.stderr
        percent = f"{level * 100:g}"
        return pd.DataFrame({
            "term": self.names, "estimate": self.coef, "std_error": self.stderr,
            "t": t_values, "p_value": p_values,
            f"low_{percent}": low, f"high_{percent}": high,
        })


def _rank_tolerance(r: np.ndarray, n: int) -> float:
    diagonal = np.abs(np.diag(r))
    return max(n, r.shape[1]) * np.finfo(float).eps * max(diagonal.max(initial=0.0), 1.0)


def _columns_to_keep(scaled: np.ndarray, zero: np.ndarray, rank: int) -> np.ndarray:
    """Return a mask of the columns not spanned by the columns before them, at most ``rank``
    of them (the rank the pivoted factorisation found)."""
    r = scipy.linalg.qr(scaled, mode="r", check_finite=False)[0]
    r = r[: scaled.shape[1]]
    # With fewer rows than columns, the columns past the number of rows are dependent.
    diagonal = np.zeros(scaled.shape[1])
    diagonal[: min(r.shape)] = np.abs(np.diag(r))
    keep = (diagonal > _rank_tolerance(r, len(scaled))) & ~zero
    surplus = int(keep.sum()) - rank
    if surplus > 0:
        # Rounding in the unpivoted pass can leave a dependent column's part outside the
        # earlier columns just above the tolerance (a per-series constant beside the series
        # dummies, say): the columns with the smallest such parts are the dependent ones.
        candidates = np.flatnonzero(keep)
        keep[candidates[np.argsort(diagonal[candidates], kind="stable")[:surplus]]] = False
    return keep


def _solve(q: np.ndarray, r: np.ndarray, scaled: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the least-squares solution, refined twice against its own residuals."""
    beta = scipy.linalg.solve_triangular(r, q.T @ y, check_finite=False)
    for _ in range(2):
        correction = scipy.linalg.solve_triangular(r, q.T @ (y - scaled @ beta), check_finite=False)
        beta = beta + correction
    return beta


def _left_out(q, r, scaled, keep, zero, columns, names) -> list[Collinearity]:
    """Return the columns left out of the fit, each with the kept columns that span it."""
    dropped = []
    for index in np.flatnonzero(~keep):
        if zero[index]:
            dropped.append(Collinearity(names[index], []))
            continue
        weights = scipy.linalg.solve_triangular(r, q.T @ scaled[:, index], check_finite=False)
        partners = sorted((names[columns[j]] for j in np.flatnonzero(np.abs(weights) > 1e-8)),
                          key=names.index)
        dropped.append(Collinearity(names[index], partners))
    return dropped


def least_squares(matrix: np.ndarray, y: np.ndarray, names: list[str] | None = None,
                  *, centered_r2: bool = True, refine: bool | None = None) -> LeastSquaresFit:
    """Return the OLS fit of y on the columns of matrix (add an intercept column yourself).

    ``centered_r2`` is True when the columns include an intercept; R² is then
    measured about the mean of y, else about zero (the uncentred R²). ``refine``: None to
    refine in twice the working precision where the condition number says it is needed,
    True always (coefficients and (X'X)⁻¹), False never.
    """
    x = np.asarray(matrix, dtype=float)
    y = np.asarray(y, dtype=float)
    n, p = x.shape
    names = list(names) if names is not None else [f"x{i}" for i in range(p)]
    if n == 0 or p == 0:
        raise ValueError("least squares needs at least one row and one column")
    # Fitted at the target's unit scale (an exact power of two), so that sums of squares
    # neither underflow for a tiny target nor overflow for a huge one.
    size = unit_scale(y)
    if size != 1.0:
        return _least_squares(x, y / size, names, centered_r2, refine).rescaled(size)
    return _least_squares(x, y, names, centered_r2, refine)


def _least_squares(x: np.ndarray, y: np.ndarray, names: list[str], centered_r2: bool,
                   refine: bool | None) -> LeastSquaresFit:
    n, p = x.shape

    norms = np.sqrt(np.einsum("ij,ij->j", x, x))
    zero = norms == 0
    scale = np.where(zero, 1.0, norms)
    scaled = x / scale

    # Column pivoting gives the most accurate solve; when it finds the design
    # short of full rank, an unpivoted pass decides which columns to leave out,
    # so that the earlier column of a collinear pair (the intercept first) stays.
    q, r, pivot = scipy.linalg.qr(scaled, mode="economic", pivoting=True, check_finite=False)
    pivoted_rank = int((np.abs(np.diag(r)) > _rank_tolerance(r, n)).sum())
    full_rank = pivoted_rank == p and not zero.any()
    keep = np.ones(p, bool) if full_rank else _columns_to_keep(scaled, zero, pivoted_rank)
    kept = np.flatnonzero(keep)
    if not full_rank:
        q, r, pivot = scipy.linalg.qr(scaled[:, kept], mode="economic", pivoting=True,
                                      check_finite=False)
    columns = kept[pivot]
    beta_pivoted = _solve(q, r, scaled[:, columns], y)

    dropped = _left_out(q, r, scaled, keep, zero, columns, names)

    singular = scipy.linalg.svdvals(r, check_finite=False)
    condition = float(singular.max() / singular.min()) if singular.min() > 0 else np.inf
    rank = len(kept)
    r_inverse = scipy.linalg.solve_triangular(r, np.eye(rank), check_finite=False)
    unscaled = r_inverse @ r_inverse.T
    xtx_kept = unscaled / np.outer(scale[columns], scale[columns])
    coef_kept = beta_pivoted / scale[columns]
    residuals = y - scaled[:, columns] @ beta_pivoted
    digits = ordinary_digits(condition, beta_pivoted)
    precision = Precision(False, 0, digits)
    if refine or (refine is None and needs_refining(condition, digits)):
        covariance = bool(refine) or -np.log10(MACHINE_EPSILON * condition) < REFINE_COVARIANCE_BELOW
        refined = refined_least_squares(x[:, columns], y, covariance=covariance)
        coef_kept, residuals = refined.coef, refined.residuals
        if refined.covariance is not None:
            xtx_kept = refined.covariance
        precision = Precision(True, refined.steps, refined.digits, refined.covariance is not None)

    df_resid = n - rank
    rss = float(residuals @ residuals)
    sigma2 = rss / df_resid if df_resid > 0 else np.nan

    xtx_inverse = np.full((p, p), np.nan)
    xtx_inverse[np.ix_(columns, columns)] = xtx_kept
    leverage = np.einsum("ij,ij->i", q, q)

    coef = np.full(p, np.nan)
    stderr = np.full(p, np.nan)
    coef[columns] = coef_kept
    stderr[columns] = np.sqrt(np.maximum(np.diag(xtx_kept), 0.0) * sigma2)

    total = float(((y - y.mean()) ** 2).sum()) if centered_r2 else float(y @ y)
    r2 = 1.0 - rss / total if total > 0 else np.nan
    df_model_base = n - 1 if centered_r2 else n
    adj_r2 = 1.0 - (1.0 - r2) * df_model_base / df_resid if df_resid > 0 else np.nan

    return LeastSquaresFit(names=names, coef=coef, stderr=stderr, residuals=residuals,
                           resid_sd=float(np.sqrt(sigma2)), r2=r2, adj_r2=adj_r2,
                           df_resid=df_resid, rank=rank, condition_number=condition,
                           centered_r2=centered_r2, dropped=dropped, xtx_inverse=xtx_inverse,
                           leverage=leverage, precision=precision)


class OLSModel(Model):
    """OLS on the feature design, with or without an intercept."""

    def __init__(self, fit_intercept: bool = True) -> None:
        self.fit_intercept = fit_intercept
        self.absorbed_ = None   # an AbsorbedFit when the design's series levels are absorbed

    @classmethod
    def from_choice(cls, choice, *, fit_intercept: bool = True, executor: Executor = IN_PROCESS,
                    progress: Progress = QUIET) -> OLSModel:
        return cls(fit_intercept=fit_intercept)

    def _with_intercept(self, matrix: np.ndarray) -> np.ndarray:
        if self.fit_intercept:
            return np.column_stack([np.ones(len(matrix)), matrix])
        return matrix

    def fit(self, design, y: np.ndarray) -> OLSModel:
        self.absorbed_ = None
        if getattr(design, "absorbed_levels", None) is not None:
            return self._fit_absorbed(design, y)
        names = ([INTERCEPT] if self.fit_intercept else []) + list(design.names)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            self.fit_ = least_squares(self._with_intercept(design.matrix), y, names,
                                      centered_r2=self.fit_intercept)
        self.coef_ = np.nan_to_num(self.fit_.coef, nan=0.0)
        return self

    def _fit_absorbed(self, design, y: np.ndarray) -> OLSModel:
        """Fit with the series levels absorbed (pipeline/models/absorbed.py): the same fit as
        with a column per series, which would not fit in memory."""
        from pipeline.models.absorbed import absorbed_least_squares
        if not self.fit_intercept:
            raise ValueError("series levels are absorbed only beside an intercept")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            self.absorbed_ = absorbed_least_squares(design.matrix, y, design.series, list(design.names))
        self.level_column_, self.level_at_ = design.absorbed_levels, design.absorbed_at
        self.fit_ = self.absorbed_.slopes
        self.coef_ = np.nan_to_num(self.fit_.coef, nan=0.0)
        return self

    def _codes(self, design) -> np.ndarray:
        """Return each row's series as a position among the fitted series (−1: none)."""
        return pd.Index(self.absorbed_.series_names).get_indexer(np.asarray(design.series, dtype=object))

    def predict(self, design) -> np.ndarray:
        if self.absorbed_ is not None:
            return self.absorbed_.predict(design.matrix, self._codes(design))
        # Row by row, so a row's prediction does not depend on the rows beside it.
        return (self._with_intercept(design.matrix) * self.coef_).sum(axis=1)

    def prediction_se(self, design) -> np.ndarray:
        """Return the standard error of a new observation's prediction, s·sqrt(1 + x'(X'X)⁻¹x)."""
        if self.absorbed_ is not None:
            return self.absorbed_.prediction_se(design.matrix, self._codes(design))
        kept = self.fit_.kept
        x = self._with_intercept(design.matrix)[:, kept]
        inverse = self.fit_.xtx_inverse[np.ix_(kept, kept)]
        return self.fit_.resid_sd * np.sqrt(1.0 + np.einsum("ij,jk,ik->i", x, inverse, x))

    def residual_sd(self, design) -> np.ndarray:
        """Return the fit's residual SD s, once per row."""
        return np.full(len(design.matrix), self.fit_.resid_sd)

    def residual_df(self, design=None) -> int:
        return self.fit_.df_resid

    def coefficient_table(self) -> pd.DataFrame:
        table = self.fit_.coefficient_table()
        return table if self.absorbed_ is None else self.with_levels(table)

    def with_levels(self, table: pd.DataFrame, **sandwich) -> pd.DataFrame:
        """Return a table of the slopes with the absorbed levels in it, as the fit with a
        column per series reports them: the intercept first, each series' difference where
        the series terms are (their standard errors a sandwich's when ``sandwich`` names its
        within columns, scores, lags and order: see ``AbsorbedFit.level_table``)."""
        levels = self.absorbed_.level_table(**sandwich)
        levels["term"] = [INTERCEPT, *[f"{self.level_column_}: {name}"
                                       for name in self.absorbed_.series_names[1:]]]
        at = self.level_at_
        return pd.concat([levels.iloc[:1], table.iloc[:at], levels.iloc[1:], table.iloc[at:]],
                         ignore_index=True)

    def series_levels(self) -> tuple[np.ndarray, np.ndarray] | None:
        """Return the absorbed levels: the series and each one's difference from the first
        series' level (the intercept); None when the levels are columns of the design."""
        if self.absorbed_ is None:
            return None
        levels = self.absorbed_.levels
        return self.absorbed_.series_names, levels - levels[0]

    def linear_coefficients(self) -> tuple[float, np.ndarray]:
        coef = self.coef_
        if self.absorbed_ is not None:   # the first series' level; the others: series_levels
            return float(self.absorbed_.levels[0]), coef
        return (float(coef[0]), coef[1:]) if self.fit_intercept else (0.0, coef)

    def design_matrix(self, design) -> np.ndarray:
        if self.absorbed_ is None:
            return super().design_matrix(design)
        # The columns the slopes were fitted on: each less its series' mean in the fit.
        codes = self._codes(design)
        return np.asarray(design.matrix, float) - self.absorbed_.driver_means[np.where(codes >= 0, codes, 0)]

    @property
    def least_squares_fit(self) -> LeastSquaresFit:
        return self.fit_

    def describe(self) -> str | None:
        if self.absorbed_ is None:
            return None
        return (f"the {len(self.absorbed_.series_names):,} series levels are too many for a "
                "column each, so the fit absorbs them (it fits each series' deviations from its "
                "own means), which gives the same estimates; its condition number and VIFs are "
                "those of the drivers within series")


class GrowingLeastSquares:
    """OLS over a window that grows block by block, without refitting from scratch.

    Keeps only the R factor of the QR factorisation of [X | y] (columns scaled
    by a fixed vector): adding a block of rows re-factorises the small stack of
    the old R over the new rows, so a backtest over many expanding origins costs
    about one pass of Householder QR over the data, at QR accuracy — never the
    normal equations.
    """

    def __init__(self, scale: np.ndarray) -> None:
        self.scale = np.asarray(scale, float)
        self.rows_ = 0
        self.r_ = np.empty((0, len(self.scale) + 1))

    BLOCK = 8192   # rows factorised at a time: small enough to stay in cache

    def add(self, matrix: np.ndarray, y: np.ndarray) -> GrowingLeastSquares:
        """Take in rows, a cache-sized block at a time."""
        columns = len(self.scale) + 1
        for start in range(0, len(matrix), self.BLOCK):
            rows = slice(start, start + self.BLOCK)
            stacked = np.empty((self.r_.shape[0] + len(matrix[rows]), columns))
            stacked[: self.r_.shape[0]] = self.r_
            stacked[self.r_.shape[0]:, :-1] = np.asarray(matrix[rows], float) / self.scale
            stacked[self.r_.shape[0]:, -1] = y[rows]
            self.r_ = scipy.linalg.qr(stacked, mode="r", overwrite_a=True,
                                      check_finite=False)[0][:columns]
            self.rows_ += len(matrix[rows])
        return self

    def solve(self) -> np.ndarray | None:
        """Return the coefficients for the rows taken in so far, or None when rank-deficient or
        when the window's condition number leaves its predictions fewer than
        ``PREDICTION_DIGITS`` correct digits (−log₁₀ ε·κ): the careful fit, which refines, then
        takes over."""
        p = len(self.scale)
        if self.rows_ <= p:
            return None
        r = self.r_[:p, :p]
        diagonal = np.abs(np.diag(r))
        if diagonal.min() <= _rank_tolerance(r, self.rows_) * 1e3:
            return None
        beta = scipy.linalg.solve_triangular(r, self.r_[:p, p], check_finite=False)
        # R with each column divided by its length is the R factor of this window's design
        # with unit-length columns, the one the single fit's condition number is of.
        singular = scipy.linalg.svdvals(r / np.sqrt(np.einsum("ij,ij->j", r, r)), check_finite=False)
        if -np.log10(MACHINE_EPSILON * singular[0] / singular[-1]) < PREDICTION_DIGITS:
            return None
        return beta / self.scale

    def prediction_se(self, matrix: np.ndarray) -> np.ndarray:
        """Return s·sqrt(1 + x'(X'X)⁻¹x) for new rows, from the grown R factor."""
        p = len(self.scale)
        r = self.r_[:p, :p]
        z = scipy.linalg.solve_triangular(r, (np.asarray(matrix, float) / self.scale).T,
                                          trans="T", check_finite=False)
        # |R[p, p]| is the root of the residual sum of squares (never squared: it underflows
        # for a target of 1e-300).
        residual_root = float(abs(self.r_[p, p])) if self.r_.shape[0] > p else 0.0
        s = residual_root / np.sqrt(self.rows_ - p)
        return s * np.sqrt(1.0 + np.einsum("ij,ij->j", z, z))


def expanding_ols_predictions(matrix: np.ndarray, y: np.ndarray, months: np.ndarray,
                              origins: list[int], tests: list[np.ndarray]
                              ) -> list[tuple[np.ndarray, np.ndarray, int]] | None:
    """Return, per origin, OLS predictions for its test rows, their standard errors and the
    residual df, fitting on every row up to the origin; one QR factor grows across origins.

    ``matrix`` (intercept column included), ``y`` and ``months`` are sorted by month;
    ``origins`` are month ordinals in increasing order; ``tests`` the test rows' designs.
    Returns None when a window is rank-deficient or needs a refined solve (the careful fit
    must take over).
    """
    norms = np.sqrt(np.einsum("ij,ij->j", matrix, matrix))
    solver = GrowingLeastSquares(np.where(norms > 0, norms, 1.0))
    taken = 0
    out = []
    for origin, test in zip(origins, tests):
        end = int(np.searchsorted(months, origin, side="right"))
        solver.add(matrix[taken:end], y[taken:end])
        taken = end
        beta = solver.solve()
        if beta is None:
            return None
        out.append(((test * beta).sum(axis=1), solver.prediction_se(test), solver.rows_ - matrix.shape[1]))
    return out
