"""OLS fitted to each series on its own, many series at a time.

Series are cut into chunks of ``CHUNK_SERIES`` (in sorted order of their names),
and each chunk is one task for the run's executor (this process, worker
processes or a Dask cluster; see ``pipeline.core.execution``), which the model is
given when it is made, as is where it reports progress. Within a chunk, the
series whose designs have the same shape (rows and kept columns) are stacked
and factorised together by numpy's batched Householder QR: the columns of each
series scaled to unit length, the solution refined twice against its own
residuals, never the normal equations. A series whose design is short of full
rank is handed to the careful single fit (``least_squares``), which leaves out
and names the dependent columns; so is a series the single fit's precision rule
would refine (``needs_refining``: its condition number above 1,000, or too few
digits estimated in a coefficient), and the single fit refines it in twice the
working precision (``models.refined``).

Within one series, a column that does not vary is the intercept again: it is
left out of that series' fit (its intercept carries it). Columns that only
tell series apart (series levels and series slopes, for models over all
series) are never used. A series with no more rows than terms falls back to
its own mean, and says so.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.core.design import series_index
from pipeline.core.distributions import t_quantile, t_upper
from pipeline.core.errors import ModelFileError
from pipeline.core.execution import IN_PROCESS, Executor, InProcess
from pipeline.core.progress import QUIET, Progress
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode
from pipeline.models.contract import Model
from pipeline.models.ols import INTERCEPT, least_squares, needs_refining, ordinary_digits

CHUNK_SERIES = 250   # series per task; fixed, so every way of running does the same sums


@dataclass(frozen=True)
class ChunkTask:
    """The rows of a run of consecutive series, sorted by series, and how many each has."""

    matrix: np.ndarray      # rows × terms, intercept column first when fitted
    y: np.ndarray
    counts: np.ndarray      # rows per series, in order
    intercept: bool
    names: list[str]


@dataclass(frozen=True)
class ChunkFit:
    """Per series of a chunk: coefficients (0 where left out), (X'X)⁻¹, residual SD and df."""

    coef: np.ndarray        # series × terms; NaN where left out
    xtx_inverse: np.ndarray  # series × terms × terms; 0 where left out
    resid_sd: np.ndarray
    df_resid: np.ndarray
    rank: np.ndarray
    mean: np.ndarray        # each series' mean target (the fallback)
    sd: np.ndarray          # and its standard deviation
    fell_back: np.ndarray   # True: too few rows, the series' mean is used
    dropped: list[tuple[int, str]]   # (series position in chunk, why a column was left out)
    constant: np.ndarray | None = None   # series × terms: left out as not varying in the series
    refined: np.ndarray | None = None    # per series: refined in twice the working precision
    digits: np.ndarray | None = None     # per series: estimated correct digits of its coefficients


def _back_substitute(r: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Return x with r·x = b for a stack of upper-triangular r (g×p×p) and b (g×p×k)."""
    p = r.shape[-1]
    x = np.zeros_like(b)
    for i in range(p - 1, -1, -1):
        known = np.einsum("gj,gjk->gk", r[:, i, i + 1:], x[:, i + 1:]) if i + 1 < p else 0.0
        x[:, i] = (b[:, i] - known) / r[:, i, i][:, None]
    return x


def _rank_ok(r: np.ndarray, n: int) -> np.ndarray:
    """Return, per stacked R factor, whether its diagonal shows full rank (as least_squares)."""
    diagonal = np.abs(np.diagonal(r, axis1=1, axis2=2))
    tolerance = max(n, r.shape[-1]) * np.finfo(float).eps * np.maximum(diagonal.max(axis=1), 1.0)
    return (diagonal > tolerance[:, None] * 1e3).all(axis=1)


def _fit_stack(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, ...] | None:
    """Return coef, (X'X)⁻¹, the root of the RSS, a full-rank flag, the estimated digits of the
    coefficients (``ordinary_digits``) and whether the precision rule refines the fit
    (``needs_refining``), for a stack g×n×p of designs."""
    norms = np.sqrt(np.einsum("gnp,gnp->gp", x, x))
    scaled = x / norms[:, None, :]
    q, r = np.linalg.qr(scaled)
    ok = _rank_ok(r, x.shape[1])
    safe_r = np.where(ok[:, None, None], r, np.eye(r.shape[-1]))
    # R⁻¹ by back substitution once; every solve below multiplies by it, and the two
    # refinement steps against the residuals (as the single careful fit takes) restore
    # what the explicit inverse costs in accuracy.
    identity = np.broadcast_to(np.eye(r.shape[-1]), r.shape).copy()
    r_inverse = _back_substitute(safe_r, identity)
    def solve(values: np.ndarray) -> np.ndarray:   # R⁻¹·Qᵀ·values, per series
        return np.einsum("gij,gj->gi", r_inverse, np.einsum("gnj,gn->gj", q, values))

    beta = solve(y)
    for _ in range(2):
        beta = beta + solve(y - np.einsum("gnp,gp->gn", scaled, beta))
    residual = y - np.einsum("gnp,gp->gn", scaled, beta)
    # The root of the RSS, summed at each series' own scale: the squares of a target of
    # 1e-300 would underflow, of 1e145 overflow.
    size = np.abs(residual).max(axis=1, initial=0.0)
    size = np.where(size > 0, size, 1.0)
    unit = residual / size[:, None]
    rss_root = size * np.sqrt(np.einsum("gn,gn->g", unit, unit))
    unscaled = np.einsum("gij,gkj->gik", r_inverse, r_inverse)
    xtx_inverse = unscaled / (norms[:, :, None] * norms[:, None, :])
    # Each condition number bounded above by ‖R‖_F·‖R⁻¹‖_F, from what is at hand; only where
    # that bound calls for refining is the condition number itself computed (its SVD).
    condition = np.sqrt(np.einsum("gij,gij->g", safe_r, safe_r) * np.einsum("gij,gij->g", r_inverse, r_inverse))
    digits = ordinary_digits(condition, beta)
    doubtful = np.flatnonzero(needs_refining(condition, digits))
    if doubtful.size:
        singular = np.linalg.svd(safe_r[doubtful], compute_uv=False)
        with np.errstate(divide="ignore"):
            condition[doubtful] = singular[:, 0] / singular[:, -1]
        digits[doubtful] = ordinary_digits(condition[doubtful], beta[doubtful])
    return beta / norms, xtx_inverse, rss_root, ok, digits, needs_refining(condition, digits)


def _series_moments(y: np.ndarray, counts: np.ndarray, starts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return each series' mean and standard deviation (NaN for a series with no rows)."""
    series = len(counts)
    present = counts > 0
    sums = np.add.reduceat(y, starts[present]) if present.any() else np.zeros(0)
    mean = np.full(series, np.nan)
    mean[present] = sums / counts[present]
    sd = np.full(series, np.nan)
    squares = np.add.reduceat((y - np.repeat(mean[present], counts[present])) ** 2,
                              starts[present]) if present.any() else np.zeros(0)
    with np.errstate(invalid="ignore", divide="ignore"):
        sd[present] = np.sqrt(squares / (counts[present] - 1))
    return mean, sd


def _kept_columns(task: ChunkTask, counts: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Return, per series, the columns its fit keeps: a column constant within a series
    repeats its intercept (or, without one, is all zeros) and is left out."""
    series, terms = len(counts), task.matrix.shape[1]
    present = counts > 0
    keep = np.zeros((series, terms), bool)
    if present.any():
        high = np.maximum.reduceat(task.matrix, starts[present], axis=0)
        low = np.minimum.reduceat(task.matrix, starts[present], axis=0)
        varies = high > low
        nonzero = (high != 0) | (low != 0)
        kept = varies if task.intercept else varies | nonzero
        if task.intercept:
            kept[:, 0] = True
        keep[present] = kept
    return keep


class _ChunkNumbers:
    """The numbers of every series' fit in a chunk, filled in as the fits are made."""

    def __init__(self, series: int, terms: int) -> None:
        self.coef = np.full((series, terms), np.nan)
        self.xtx_inverse = np.zeros((series, terms, terms))
        self.resid_sd = np.full(series, np.nan)
        self.df_resid = np.zeros(series, int)
        self.rank = np.zeros(series, int)
        self.refined = np.zeros(series, bool)
        self.digits = np.full(series, np.nan)


def _fit_stacked(task: ChunkTask, y: np.ndarray, keep: np.ndarray, counts: np.ndarray,
                 starts: np.ndarray, fell_back: np.ndarray, numbers: _ChunkNumbers) -> list[int]:
    """Fit, stacked, the series with the same rows and kept columns; return the positions of
    those a stacked fit could not take (short of full rank, or to be refined by the precision
    rule: ``needs_refining``), for the careful single fit."""
    groups: dict[tuple, list[int]] = {}
    for position in np.flatnonzero(~fell_back):
        groups.setdefault((int(counts[position]), keep[position].tobytes()), []).append(position)
    careful: list[int] = []
    for (rows, _), members in groups.items():
        members = np.asarray(members)
        columns = np.flatnonzero(keep[members[0]])
        index = starts[members][:, None] + np.arange(rows)
        stack = task.matrix[index][:, :, columns]
        with np.errstate(all="ignore"):
            beta, inverse, rss_root, ok, digits, refine = _fit_stack(stack, y[index])
        ok &= ~refine
        good = members[ok]
        numbers.digits[good] = digits[ok]
        numbers.coef[np.ix_(good, columns)] = beta[ok]
        numbers.xtx_inverse[np.ix_(good, columns, columns)] = inverse[ok]
        numbers.df_resid[good] = rows - len(columns)
        numbers.rank[good] = len(columns)
        numbers.resid_sd[good] = rss_root[ok] / np.sqrt(rows - len(columns))
        careful += members[~ok].tolist()
    return careful


def _fit_carefully(task: ChunkTask, y: np.ndarray, keep: np.ndarray, counts: np.ndarray,
                   starts: np.ndarray, careful: list[int], fell_back: np.ndarray,
                   numbers: _ChunkNumbers) -> list[tuple[int, str]]:
    """Fit each series short of full rank on its own (columns spanned by others dropped);
    return the columns dropped, by series position."""
    dropped: list[tuple[int, str]] = []
    for position in sorted(careful):
        rows = slice(starts[position], starts[position] + counts[position])
        columns = np.flatnonzero(keep[position])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            fit = least_squares(task.matrix[rows][:, columns], y[rows],
                                [task.names[c] for c in columns], centered_r2=task.intercept)
        if fit.df_resid <= 0:
            fell_back[position] = True
            continue
        kept_here = columns[fit.kept]
        numbers.coef[position, kept_here] = fit.coef[fit.kept]
        numbers.xtx_inverse[np.ix_([position], kept_here, kept_here)] = \
            fit.xtx_inverse[np.ix_(fit.kept, fit.kept)]
        numbers.df_resid[position], numbers.rank[position], numbers.resid_sd[position] = \
            fit.df_resid, fit.rank, fit.resid_sd
        numbers.refined[position], numbers.digits[position] = fit.precision.refined, fit.precision.digits
        dropped += [(position, item.describe()) for item in fit.dropped]
    return dropped


def fit_series_chunk(task: ChunkTask) -> ChunkFit:
    """Return the OLS fit of every series in the task (a pure function of its numbers)."""
    counts = np.asarray(task.counts, int)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(int)
    y = np.asarray(task.y, float)
    mean, sd = _series_moments(y, counts, starts)
    keep = _kept_columns(task, counts, starts)
    width = keep.sum(axis=1)
    fell_back = (counts <= width) | (width == 0)   # no column to fit on: the mean
    numbers = _ChunkNumbers(len(counts), task.matrix.shape[1])
    careful = _fit_stacked(task, y, keep, counts, starts, fell_back, numbers)
    dropped = _fit_carefully(task, y, keep, counts, starts, careful, fell_back, numbers)
    numbers.coef[fell_back] = np.nan
    numbers.xtx_inverse[fell_back] = 0.0
    constant = ~keep & ~fell_back[:, None]
    numbers.refined[fell_back], numbers.digits[fell_back] = False, np.nan
    return ChunkFit(numbers.coef, numbers.xtx_inverse, numbers.resid_sd, numbers.df_resid,
                    numbers.rank, mean, sd, fell_back, dropped, constant, numbers.refined,
                    numbers.digits)


class PerSeriesOLS(Model):
    """OLS on the feature design, one fit per series; predictions use each row's own series."""

    def __init__(self, fit_intercept: bool = True, *, executor: Executor = IN_PROCESS,
                 progress: Progress = QUIET) -> None:
        self.fit_intercept = fit_intercept
        self.executor = executor     # where the chunks of series are fitted
        self.progress = progress     # where the count of series fitted goes

    @classmethod
    def from_choice(cls, choice, *, fit_intercept: bool = True, executor: Executor = IN_PROCESS,
                    progress: Progress = QUIET) -> PerSeriesOLS:
        return cls(fit_intercept=fit_intercept, executor=executor, progress=progress)

    def _columns(self, design) -> np.ndarray:
        matrix = np.asarray(design.matrix, float)
        if design.series_level is not None and design.series_level.any():
            matrix = matrix[:, ~design.series_level]
        if self.fit_intercept:
            full = np.empty((len(matrix), matrix.shape[1] + 1))
            full[:, 0] = 1.0
            full[:, 1:] = matrix
            return full
        return matrix

    def fit(self, design, y) -> PerSeriesOLS:
        y = np.asarray(y, float)
        names = ([INTERCEPT] if self.fit_intercept else []) + [
            name for name, own in zip(design.names, design.series_level
                                      if design.series_level is not None else
                                      np.zeros(len(design.names), bool)) if not own]
        codes, series = series_index(design)
        order = np.argsort(codes, kind="stable")
        matrix = self._columns(design)[order]
        ordered_y = y[order]
        counts = np.bincount(codes, minlength=len(series))
        bounds = np.concatenate([[0], np.cumsum(counts)])
        tasks = []
        for first in range(0, len(series), CHUNK_SERIES):
            last = min(first + CHUNK_SERIES, len(series))
            rows = slice(bounds[first], bounds[last])
            tasks.append(ChunkTask(matrix[rows], ordered_y[rows], counts[first:last],
                                   self.fit_intercept, names))
        self.progress.start("series fitted", len(series))
        fits = []
        runner = self.executor
        # Here, a few chunks at a time so the bar moves; elsewhere, all at once, since each
        # hand-over to worker processes or a cluster has a cost of its own.
        step = 8 if isinstance(runner, InProcess) else max(len(tasks), 1)
        for start in range(0, len(tasks), step):
            batch = tasks[start:start + step]
            fits += runner.map(fit_series_chunk, batch)
            self.progress.advance("series fitted", int(sum(len(t.counts) for t in batch)))
        self.names_ = names
        self.series_ = pd.Index(series)
        self.coef_ = np.vstack([f.coef for f in fits])
        self.xtx_inverse_ = np.concatenate([f.xtx_inverse for f in fits])
        self.resid_sd_ = np.concatenate([f.resid_sd for f in fits])
        self.df_resids_ = np.concatenate([f.df_resid for f in fits])
        self.rank_ = np.concatenate([f.rank for f in fits])
        self.means_ = np.concatenate([f.mean for f in fits])
        self.sds_ = np.concatenate([f.sd for f in fits])
        self.fell_back_ = np.concatenate([f.fell_back for f in fits])
        self.refined_ = np.concatenate([f.refined for f in fits])
        self.digits_ = np.concatenate([f.digits for f in fits])
        self.rows_ = counts
        self.overall_mean_ = float(y.mean()) if len(y) else np.nan
        offsets = np.cumsum([0] + [len(t.counts) for t in tasks])
        self.dropped_ = [(str(series[offsets[k] + position]), why)
                         for k, f in enumerate(fits) for position, why in f.dropped]
        # Only the columns constant within a series (not those collinear with others there).
        left_out = np.vstack([f.constant for f in fits])
        self.constant_terms_ = sorted({names[j] for j in np.flatnonzero(left_out.any(axis=0))})
        return self

    @property
    def fallbacks_(self) -> pd.DataFrame:
        """Return the series fitted by their mean instead: rows they had, terms they needed."""
        terms = len(self.names_)
        return pd.DataFrame({"series": np.asarray(self.series_[self.fell_back_], object),
                             "rows": self.rows_[self.fell_back_], "terms": terms})

    def _lookup(self, design) -> np.ndarray:
        return self.series_.get_indexer(np.asarray(design.series))

    def predict(self, design) -> np.ndarray:
        code = self._lookup(design)
        x = self._columns(design)
        known = code >= 0
        out = np.full(len(x), self.overall_mean_)
        rows = np.flatnonzero(known)
        coef = np.nan_to_num(self.coef_[code[rows]], nan=0.0)
        out[rows] = (x[rows] * coef).sum(axis=1)
        fallback = rows[self.fell_back_[code[rows]]]
        out[fallback] = self.means_[code[fallback]]
        return out

    def to_dict(self) -> dict:
        """Return what the point forecasts need, as a model file stores it: the terms, the
        series, each one's coefficients (NaN where left out), mean and whether it fell back
        to it, and the mean over all series (for a series the fit never saw)."""
        return {"fit_intercept": self.fit_intercept, "names": list(self.names_),
                "series": [str(s) for s in self.series_], "coef": encode(self.coef_),
                "means": encode(self.means_), "fell_back": encode(self.fell_back_),
                "overall_mean": encode(self.overall_mean_)}

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION) -> PerSeriesOLS:
        """Return the model ``to_dict`` stored. It predicts as the fitted model did, but holds
        only what the point forecasts need: no standard errors, notes or coefficient table."""
        with StoredFields(data, "a model per series", version=version) as fields:
            model = cls(fit_intercept=fields.flag("fit_intercept"))
            model.names_ = fields.texts("names")
            model.series_ = pd.Index(fields.texts("series"), dtype=object)
            model.coef_ = fields.array("coef", "float64", ndim=2)
            model.means_ = fields.array("means", "float64", ndim=1)
            model.fell_back_ = fields.array("fell_back", "bool", ndim=1)
            model.overall_mean_ = fields.number("overall_mean")
        if not (model.coef_.shape == (len(model.series_), len(model.names_))
                and len(model.means_) == len(model.fell_back_) == len(model.series_)):
            raise ModelFileError("a model per series has lists of different lengths")
        return model

    def prediction_se(self, design) -> np.ndarray:
        """Return each row's s·sqrt(1 + x'(X'X)⁻¹x) from its own series' fit (for a series on
        its mean: s·sqrt(1 + 1/n)); NaN for a series the fit never saw."""
        code = self._lookup(design)
        x = self._columns(design)
        out = np.full(len(x), np.nan)
        rows = np.flatnonzero(code >= 0)
        codes = code[rows]
        spread = np.einsum("ij,ijk,ik->i", x[rows], self.xtx_inverse_[codes], x[rows])
        out[rows] = self.resid_sd_[codes] * np.sqrt(1.0 + spread)
        fallback = self.fell_back_[codes]
        with np.errstate(invalid="ignore", divide="ignore"):
            out[rows[fallback]] = (self.sds_[codes[fallback]]
                                   * np.sqrt(1.0 + 1.0 / self.rows_[codes[fallback]]))
        return out

    def residual_sd(self, design) -> np.ndarray:
        """Return each row's residual SD from its own series' fit (for a series on its mean:
        the SD of its target); NaN for a series the fit never saw."""
        code = self._lookup(design)
        out = np.full(len(code), np.nan)
        rows = np.flatnonzero(code >= 0)
        out[rows] = np.where(self.fell_back_, self.sds_, self.resid_sd_)[code[rows]]
        return out

    def residual_df(self, design) -> np.ndarray:
        """Return each row's residual degrees of freedom (its series' fit), NaN if unseen."""
        code = self._lookup(design)
        out = np.full(len(code), np.nan)
        rows = np.flatnonzero(code >= 0)
        df = np.where(self.fell_back_, self.rows_ - 1, self.df_resids_).astype(float)
        df[df <= 0] = np.nan
        out[rows] = df[code[rows]]
        return out

    def precision_note(self) -> str | None:
        """Return how many series' fits were refined in twice the working precision, and the
        fewest digits estimated among them (None when none was)."""
        refined = getattr(self, "refined_", None)
        if refined is None or not refined.any():
            return None
        count = int(refined.sum())
        return (f"{count} of {len(refined)} series' fits {'were' if count > 1 else 'was'} refined in "
                "twice the working precision, their condition numbers calling for it; at least "
                f"{np.nanmin(self.digits_[refined]):.0f} correct digits estimated in every coefficient")

    def notes(self) -> list[str]:
        """Return what a reader should know about the fits: terms left out, fallbacks."""
        found = []
        if self.constant_terms_:
            shown = ", ".join(f"'{n}'" for n in self.constant_terms_[:4]) + (
                f" and {len(self.constant_terms_) - 4} more" if len(self.constant_terms_) > 4 else "")
            found.append(f"{shown} do not vary within some series, so those series' fits leave "
                         "them out (the series' own intercept carries them)" if self.fit_intercept
                         else f"{shown} are all zeros within some series, so those series' fits "
                              "leave them out")
        if self.dropped_:
            series, why = self.dropped_[0]
            found.append(f"in {len({s for s, _ in self.dropped_})} series a term is a combination of "
                         f"others and is left out (e.g. series '{series}': {why})")
        return found

    def coefficient_table(self, level: float = 0.95) -> pd.DataFrame:
        """Return, per series and term, the estimate, standard error, t, p and interval."""
        series_count, terms = self.coef_.shape
        spread = np.einsum("gii->gi", self.xtx_inverse_)
        # s·sqrt(diag (X'X)⁻¹), never s² (it underflows for a target of 1e-300)
        stderr = np.where(np.isfinite(self.coef_), np.sqrt(np.maximum(spread, 0)) * self.resid_sd_[:, None],
                          np.nan)
        df = np.repeat(self.df_resids_.astype(float), terms)
        df[df <= 0] = np.nan
        with np.errstate(divide="ignore", invalid="ignore"):
            t_values = (self.coef_ / stderr).ravel()
            p_values = 2 * t_upper(np.abs(t_values), df)
            multiplier = t_quantile(0.5 + level / 2, df)
        estimate = self.coef_.ravel()
        percent = f"{level * 100:g}"
        return pd.DataFrame({
            "series": np.repeat(np.asarray(self.series_, object), terms),
            "term": np.tile(self.names_, series_count), "estimate": estimate,
            "std_error": stderr.ravel(), "t": t_values, "p_value": p_values,
            f"low_{percent}": estimate - multiplier * stderr.ravel(),
            f"high_{percent}": estimate + multiplier * stderr.ravel(),
        })
