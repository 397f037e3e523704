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


def analytic_bounds(prediction, se, df, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Return the two-sided prediction interval prediction ± t(df)·se."""
    multiplier = scipy.stats.t.ppf(0.5 + level / 2, df)
    return prediction - multiplier * se, prediction + multiplier * se


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


def coverage(predictions: pd.DataFrame) -> pd.DataFrame:
    """Return, per model, method and level, the share of backtest actuals inside the interval.

    Analytic intervals use each origin's own fit. Empirical intervals at an
    origin use only the errors of earlier origins for months already past at
    that origin, as a live run would.
    """
    rows = []
    for model, own in predictions.groupby("model", sort=False):
        for level in LEVELS:
            with_se = own[np.isfinite(own["prediction_se"])]
            if len(with_se):
                low, high = analytic_bounds(with_se["prediction"].to_numpy(), with_se["prediction_se"].to_numpy(),
                                            with_se["df_resid"].to_numpy(), level)
                inside = (with_se["actual"] >= low) & (with_se["actual"] <= high)
                rows.append({"model": model, "method": "analytic", "level": level,
                             "coverage": float(inside.mean()), "n": len(with_se)})
            inside_count, scored = 0, 0
            origins = sorted(own["origin"].unique())
            time_ordered = all(str(o)[:4].isdigit() for o in origins)
            origin_of = own["origin"].to_numpy()
            period_of = own["period"].astype(str).to_numpy()
            for index, origin in enumerate(origins):
                mask = np.isin(origin_of, origins[:index])
                if time_ordered:  # only errors of months already past at this origin
                    mask &= period_of <= str(origin)
                earlier = own[mask]
                if len(earlier) < MIN_ERRORS:
                    continue
                residuals = pd.DataFrame({"horizon": earlier["horizon"],
                                          "residual": earlier["actual"] - earlier["prediction"]})
                now = own[origin_of == origin]
                low, high = empirical_bounds(now["prediction"].to_numpy(), now["horizon"].to_numpy(),
                                             residuals, level)
                known = np.isfinite(low)
                actual = now["actual"].to_numpy()[known]
                inside_count += int(((actual >= low[known]) & (actual <= high[known])).sum())
                scored += int(known.sum())
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
