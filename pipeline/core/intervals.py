"""Prediction intervals, two ways: analytic (OLS) and empirical (from out-of-sample errors)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.stats

LEVELS = (0.80, 0.95)
MIN_ERRORS = 8   # fewer out-of-sample errors than this at a horizon give no empirical interval


def percent(level: float) -> str:
    """Return 80 for 0.8."""
    return f"{level * 100:g}"


def back_from(values, transform: str = "none") -> np.ndarray:
    """Return values on the target's own scale from the scale a model fits (``transform``:
    none, log or log1p; the inverse of ``TargetTransform.forward``)."""
    values = np.asarray(values, dtype=float)
    if transform == "log":
        return np.exp(values)
    if transform == "log1p":
        return np.expm1(values)
    return values


def analytic_bounds(centre, se, df, level: float, transform: str = "none") -> tuple[np.ndarray, np.ndarray]:
    """Return the two-sided prediction interval centre ± t(df)·se, on the target's scale.

    ``centre`` and ``se`` are on the scale the model fits; with a log or log1p target the
    interval found there is turned back by the inverse transform (quantiles survive a
    monotone transform), so it is centred on the median, exp(centre), not on the smeared
    mean the point forecast states.
    """
    multiplier = scipy.stats.t.ppf(0.5 + level / 2, df)
    centre = np.asarray(centre, dtype=float)
    return (back_from(centre - multiplier * se, transform),
            back_from(centre + multiplier * se, transform))


def empirical_offsets(residuals: pd.DataFrame, level: float) -> dict[int, tuple[float, float]]:
    """Return, per horizon, the residual quantiles bounding the central share ``level``.

    ``residuals`` holds columns horizon and residual: actual − prediction, what must be
    added to a prediction to reach the actual (the opposite sign of an error, which is
    prediction − actual everywhere in castline). Horizons with fewer than MIN_ERRORS
    residuals are left out.
    """
    tail = (1 - level) / 2
    offsets = {}
    for horizon, group in residuals.groupby("horizon"):
        values = group["residual"].to_numpy(float)
        if len(values) >= MIN_ERRORS:
            offsets[int(horizon)] = (float(np.quantile(values, tail)),
                                     float(np.quantile(values, 1 - tail)))
    return offsets


def empirical_bounds(forecast: np.ndarray, horizons: np.ndarray, residuals: pd.DataFrame,
                     level: float) -> tuple[np.ndarray, np.ndarray]:
    """Return forecast + the residual quantiles of its horizon (NaN where too few residuals)."""
    offsets = empirical_offsets(residuals, level)
    if not offsets and len(residuals) >= MIN_ERRORS:  # no time order (k-fold): all together
        offsets = empirical_offsets(residuals.assign(horizon=0), level)
    low = np.full(len(forecast), np.nan)
    high = np.full(len(forecast), np.nan)
    if not offsets:
        return low, high
    known = np.array(sorted(offsets))
    # Each row takes the furthest measured horizon not beyond its own (beyond the backtest's
    # horizons, the furthest measured; before the first, the first).
    use = np.maximum(np.searchsorted(known, np.asarray(horizons), side="right") - 1, 0)
    below = np.array([offsets[k][0] for k in known])
    above = np.array([offsets[k][1] for k in known])
    forecast = np.asarray(forecast, float)
    return forecast + below[use], forecast + above[use]


def _quantiles_by_horizon(horizons: np.ndarray, residuals: np.ndarray,
                          tails: list[float]) -> tuple[np.ndarray, np.ndarray]:
    """Return the horizons with at least MIN_ERRORS residuals, sorted, and each one's
    residual quantiles at ``tails`` (one row per horizon), as ``empirical_offsets`` computes
    them; with no such horizon but MIN_ERRORS residuals in all (no time order: k-fold), the
    quantiles of all of them together, under horizon 0 (as ``empirical_bounds``)."""
    order = np.argsort(horizons, kind="stable")
    keys, starts, counts = np.unique(horizons[order], return_index=True, return_counts=True)
    ordered = residuals[order]
    kept = [(key, start, count) for key, start, count in zip(keys, starts, counts) if count >= MIN_ERRORS]
    if not kept:
        if len(residuals) < MIN_ERRORS:
            return np.zeros(0), np.zeros((0, len(tails)))
        return np.zeros(1), np.quantile(residuals, tails)[None, :]
    return (np.array([key for key, _, _ in kept], float),
            np.array([np.quantile(ordered[start:start + count], tails) for _, start, count in kept]))


def _earlier_rows(rank: np.ndarray, period_of: np.ndarray, index: int, origin: str,
                  time_ordered: bool) -> np.ndarray:
    """Return which rows an interval stated at the origin numbered ``index`` may learn from:
    those of earlier origins and, when the origins are months, for months already past."""
    mask = rank < index
    if time_ordered:
        mask &= period_of <= origin
    return mask


def _empirical_coverage(own: pd.DataFrame) -> dict[float, tuple[int, int]]:
    """Return, per level, how many backtest actuals fell inside the empirical interval an
    origin would have stated from the errors of earlier origins (for months already past
    at it, when the origins are months), and how many were scored."""
    origins = sorted(own["origin"].unique())
    time_ordered = all(str(o)[:4].isdigit() for o in origins)
    rank = np.searchsorted(np.array(origins, dtype=object), own["origin"].to_numpy(object))
    period_of = own["period"].astype(str).to_numpy()
    horizon = own["horizon"].to_numpy(float)
    prediction = own["prediction"].to_numpy(float)
    actual = own["actual"].to_numpy(float)
    residual = actual - prediction
    tails = [t for level in LEVELS for t in ((1 - level) / 2, 1 - (1 - level) / 2)]
    counts = {level: [0, 0] for level in LEVELS}
    for index, origin in enumerate(origins):
        mask = _earlier_rows(rank, period_of, index, str(origin), time_ordered)
        if mask.sum() < MIN_ERRORS:
            continue
        known, quantiles = _quantiles_by_horizon(horizon[mask], residual[mask], tails)
        if not len(known):
            continue
        now = rank == index
        # Each row takes the furthest measured horizon not beyond its own (as empirical_bounds).
        use = np.maximum(np.searchsorted(known, horizon[now], side="right") - 1, 0)
        for number, level in enumerate(LEVELS):
            low = prediction[now] + quantiles[use, 2 * number]
            high = prediction[now] + quantiles[use, 2 * number + 1]
            counts[level][0] += int(((actual[now] >= low) & (actual[now] <= high)).sum())
            counts[level][1] += int(now.sum())
    return {level: (inside, scored) for level, (inside, scored) in counts.items()}


def coverage(predictions: pd.DataFrame) -> pd.DataFrame:
    """Return, per model, method and level, the share of backtest actuals inside the interval.

    Analytic intervals use each origin's own fit. Empirical intervals at an
    origin use only the errors of earlier origins for months already past at
    that origin, as a live run would.
    """
    rows = []
    for model, own in predictions.groupby("model", sort=False):
        empirical = _empirical_coverage(own)
        for level in LEVELS:
            with_se = own[np.isfinite(own["prediction_se"])]
            if len(with_se):
                low, high = analytic_bounds(with_se["prediction"].to_numpy(), with_se["prediction_se"].to_numpy(),
                                            with_se["df_resid"].to_numpy(), level)
                inside = (with_se["actual"] >= low) & (with_se["actual"] <= high)
                rows.append({"model": model, "method": "analytic", "level": level,
                             "coverage": float(inside.mean()), "n": len(with_se)})
            inside_count, scored = empirical[level]
            rows.append({"model": model, "method": "empirical", "level": level,
                         "coverage": inside_count / scored if scored else float("nan"), "n": scored})
    return pd.DataFrame(rows, columns=["model", "method", "level", "coverage", "n"])


def trusted_method(coverage: pd.DataFrame | None, model: str, forecast: pd.DataFrame) -> str:
    """Return the interval method to state for a model: of those its forecast rows carry, the
    one whose 95% backtest coverage came closest to 95%."""
    available = [m for m in ("analytic", "empirical")
                 if f"{m}_low_95" in forecast.columns and forecast[f"{m}_low_95"].notna().any()]
    if coverage is not None and len(coverage):
        own = coverage[(coverage["model"] == model) & (coverage["level"] == 0.95)
                       & coverage["coverage"].notna() & coverage["method"].isin(available)]
        if len(own):
            return str(own.assign(gap=(own["coverage"] - 0.95).abs()).sort_values("gap").iloc[0]["method"])
    return available[0] if available else "analytic"
