"""Prediction intervals, two ways: analytic (OLS) and empirical (from out-of-sample errors).

The empirical interval is split conformal (Vovk, Gammerman & Shafer 2005; Lei, G'Sell,
Rinaldo, Tibshirani & Wasserman 2018), read on each series' own scale:

- every backtest error becomes a score: its absolute residual divided by the series' scale
  learned in that training window (the MASE scale, the in-sample MAE of the seasonal naive
  forecast), or, for a log or log1p target, the absolute residual on that scale;
- at each horizon the bound is the ⌈(n + 1)·level⌉-th smallest of the n scores, which covers
  at least ``level`` of new errors exchangeable with them;
- a row's interval is its point ± that bound × its series' scale (on the log scale, turned
  back), so it always holds the point, and a target never below zero gets no bound below zero
  (unless the point forecast itself is below zero, as a drift line can be: the bound then
  stops at the point).

A level needs the n with ⌈(n + 1)·level⌉ ≤ n: 4 errors for 80%, 19 for 95%. castline reads
each horizon's bound from at least FEWEST_ERRORS (39) errors, so that the 95% bound is not
simply the largest error seen; a horizon with fewer borrows the errors of its neighbours
(h + 1, h − 1, h + 2, ...) until it has them, and the run says which horizons did.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from pipeline.core.catalogue import model_label
from pipeline.core.distributions import t_quantile

LEVELS = (0.80, 0.95)
FEWEST_ERRORS = 39   # errors a horizon's empirical bound is read from, borrowing neighbours' if need be
SHORTFALL = 0.05     # backtest coverage this far below nominal is warned about
SIZE_GROUPS = ("small", "middle", "large")   # thirds of the series by their mean actual


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
    df = np.asarray(df, dtype=float)
    if df.ndim:   # one t quantile per distinct df (a model per series has one per series)
        values, where = np.unique(df, return_inverse=True)
        multiplier = t_quantile(0.5 + level / 2, values)[where.reshape(df.shape)]
    else:
        multiplier = t_quantile(0.5 + level / 2, df)
    centre = np.asarray(centre, dtype=float)
    return (back_from(centre - multiplier * se, transform),
            back_from(centre + multiplier * se, transform))


def needed_errors(level: float) -> int:
    """Return the fewest errors whose conformal bound at ``level`` exists: the smallest n with
    ⌈(n + 1)·level⌉ ≤ n (4 at 80%, 19 at 95%)."""
    n = 1
    while _rank(n, level) > n:
        n += 1
    return n


def _rank(n: int, level: float) -> int:
    """Return ⌈(n + 1)·level⌉, guarded against the float error of (n + 1)·level."""
    return math.ceil((n + 1) * level - 1e-9)


def conformal_bound(scores, level: float) -> float:
    """Return the ⌈(n + 1)·level⌉-th smallest of the n scores (split conformal: Lei et al.
    2018, section 2.2), or NaN when that rank exceeds n (too few scores for the level)."""
    scores = np.asarray(scores, dtype=float)
    rank = _rank(len(scores), level)
    if rank > len(scores):
        return float("nan")
    return float(np.partition(scores, rank - 1)[rank - 1])


def conformal_bounds(scores: np.ndarray, levels) -> list[float]:
    """Return ``conformal_bound(scores, level)`` for each level, from one partial sort."""
    ranks = [_rank(len(scores), level) for level in levels]
    usable = sorted({rank - 1 for rank in ranks if rank <= len(scores)})
    if not usable:
        return [float("nan")] * len(ranks)
    ordered = np.partition(scores, usable)
    return [float(ordered[rank - 1]) if rank <= len(scores) else float("nan") for rank in ranks]


def usable_scales(scale) -> np.ndarray:
    """Return the series' scales with those unknown or zero (a series constant in its window,
    or no time order) replaced by the median of the usable ones, or by 1 when none is."""
    scale = np.asarray(scale, dtype=float)
    good = np.isfinite(scale) & (scale > 0)
    if good.all():
        return scale
    return np.where(good, scale, float(np.median(scale[good])) if good.any() else 1.0)


def error_scores(actual, prediction, scale, transform: str = "none") -> np.ndarray:
    """Return each error's score: |actual − prediction| / scale, or, for a log or log1p
    target, |f(actual) − f(prediction)| on that scale. A score that cannot be formed (a
    prediction at or below zero for a log target) is infinite: it counts as a miss."""
    actual = np.asarray(actual, dtype=float)
    prediction = np.asarray(prediction, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        if transform in ("log", "log1p"):
            forward = np.log if transform == "log" else np.log1p
            scores = np.abs(forward(actual) - forward(prediction))
        else:
            scores = np.abs(actual - prediction) / np.asarray(scale, dtype=float)
    return np.where(np.isnan(scores), np.inf, scores)


def scaled_bounds(point, bound, scale, transform: str = "none",
                  floor: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Return point ± bound × scale (for a log or log1p target, the bound taken on that scale
    and turned back), the low bound kept at or above ``floor`` unless the point is below it."""
    point = np.asarray(point, dtype=float)
    bound = np.asarray(bound, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        if transform in ("log", "log1p"):
            forward = np.log if transform == "log" else np.log1p
            centre = forward(point)
            low, high = back_from(centre - bound, transform), back_from(centre + bound, transform)
        else:
            low, high = point - bound * scale, point + bound * scale
    return floored(low, point, floor), high


def floored(low, point, floor: float | None) -> np.ndarray:
    """Return the low bounds raised to ``floor`` (0 for a target never below zero), but never
    above the point forecast itself."""
    low = np.asarray(low, dtype=float)
    if floor is None:
        return low
    with np.errstate(invalid="ignore"):
        return np.where(np.isnan(low), low, np.maximum(low, np.minimum(floor, np.asarray(point, float))))


def _pooled_bounds(horizons: np.ndarray, scores: np.ndarray, levels=LEVELS
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Return the horizons that have errors (sorted), and for each the conformal bound at every
    level (one row per horizon), how many errors it was read from and the first and last
    horizon those came from: its own, and its neighbours' while it has fewer than
    FEWEST_ERRORS (the further-ahead neighbour first at equal distance)."""
    if not len(scores):
        empty = np.zeros(0)
        return empty, np.zeros((0, len(levels))), empty, empty, empty
    order = np.argsort(horizons, kind="stable")
    keys, starts, counts = np.unique(horizons[order], return_index=True, return_counts=True)
    ordered = scores[order]
    bounds = np.full((len(keys), len(levels)), np.nan)
    used, first, last = np.zeros(len(keys), int), keys.copy(), keys.copy()
    for index in range(len(keys)):
        low = high = index
        total = counts[index]
        while total < FEWEST_ERRORS and (low > 0 or high < len(keys) - 1):
            ahead = keys[high + 1] - keys[index] if high < len(keys) - 1 else np.inf
            behind = keys[index] - keys[low - 1] if low > 0 else np.inf
            if ahead <= behind:
                high += 1
                total += counts[high]
            else:
                low -= 1
                total += counts[low]
        pool = ordered[starts[low]:starts[high] + counts[high]]
        bounds[index] = conformal_bounds(pool, levels)
        used[index], first[index], last[index] = len(pool), keys[low], keys[high]
    return keys, bounds, used, first, last


def horizon_bounds(horizons, scores, levels=LEVELS) -> pd.DataFrame:
    """Return, per horizon with errors, the conformal bound of the scores at each level, how
    many errors it was read from, and the horizons they came from (``_pooled_bounds``)."""
    keys, bounds, used, first, last = _pooled_bounds(np.asarray(horizons, float),
                                                     np.asarray(scores, float), levels)
    rows = [{"horizon": int(key), "level": level, "bound": float(bounds[i, j]), "errors": int(used[i]),
             "from_horizon": int(first[i]), "to_horizon": int(last[i])}
            for i, key in enumerate(keys) for j, level in enumerate(levels)]
    return pd.DataFrame(rows, columns=["horizon", "level", "bound", "errors", "from_horizon", "to_horizon"])


def _nearest_measured(known: np.ndarray, horizons) -> np.ndarray:
    """Return, per row, the position of the furthest measured horizon not beyond its own
    (beyond the backtest's horizons, the furthest measured; before the first, the first)."""
    return np.maximum(np.searchsorted(known, np.asarray(horizons, float), side="right") - 1, 0)


def empirical_bounds(point, horizons, scale, table: pd.DataFrame, level: float, transform: str = "none",
                     floor: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Return each row's empirical interval at ``level`` from a ``horizon_bounds`` table: its
    point ± the bound of its horizon × its series' scale (NaN where too few errors)."""
    point = np.asarray(point, dtype=float)
    own = table[np.isclose(table["level"], level)].sort_values("horizon") if len(table) else table
    if not len(own):
        return np.full(len(point), np.nan), np.full(len(point), np.nan)
    use = _nearest_measured(own["horizon"].to_numpy(float), horizons)
    return scaled_bounds(point, own["bound"].to_numpy(float)[use], scale, transform, floor)


def borrowing_note(table: pd.DataFrame, furthest: int | None = None, plural: str = "months") -> str | None:
    """Return what the run says about horizons whose empirical bound borrowed its neighbours'
    errors, and months beyond the backtest's furthest horizon (None when nothing to say)."""
    if not len(table):
        return None
    one = table.drop_duplicates("horizon")
    borrowed = one[(one["from_horizon"] != one["horizon"]) | (one["to_horizon"] != one["horizon"])]
    parts = []
    if len(borrowed):
        # Consecutive horizons that borrowed from the same months ahead are named once: 1–5 (1–10).
        runs: list[list] = []
        for h, a, b in borrowed[["horizon", "from_horizon", "to_horizon"]].itertuples(index=False):
            if runs and runs[-1][1] == h - 1 and runs[-1][2:] == [a, b]:
                runs[-1][1] = h
            else:
                runs.append([h, h, a, b])
        listed = ", ".join(f"{first}{'' if first == last else f'–{last}'} ({a}–{b})"
                           for first, last, a, b in runs)
        parts.append(f"the empirical intervals at {plural} ahead {listed} had fewer than {FEWEST_ERRORS} "
                     f"backtest errors of their own and borrowed those of the {plural} ahead in brackets")
    last = int(one["horizon"].max())
    if furthest is not None and furthest > last > 0:
        parts.append(f"{plural} more than {last} ahead use the errors of {last} {plural} ahead, the "
                     "furthest the backtest measured")
    return "; ".join(parts) if parts else None


def interval_score(actual, low, high, level: float) -> np.ndarray:
    """Return each row's interval score: the width, plus 2/α times how far the actual fell
    outside (α = 1 − level; Winkler 1972; Gneiting & Raftery 2007, section 6.2). Lower is
    better: it rewards narrow intervals and charges for every miss."""
    actual, low, high = (np.asarray(v, dtype=float) for v in (actual, low, high))
    alpha = 1 - level
    return (high - low) + (2 / alpha) * np.maximum(low - actual, 0) + (2 / alpha) * np.maximum(actual - high, 0)


def _earlier_rows(rank: np.ndarray, period_of: np.ndarray, index: int, origin: str,
                  time_ordered: bool) -> np.ndarray:
    """Return which rows an interval stated at the origin numbered ``index`` may learn from:
    those of earlier origins and, when the origins are months, for months already past."""
    mask = rank < index
    if time_ordered:
        mask &= period_of <= origin
    return mask


def row_scales(own: pd.DataFrame) -> np.ndarray:
    """Return each backtest row's series scale in its window (``usable_scales`` per origin)."""
    scale = own["mase_scale"].to_numpy(float)
    out = np.empty(len(scale))
    for _, where in own.groupby("origin", sort=False).indices.items():
        out[where] = usable_scales(scale[where])
    return out


def _empirical_rows(own: pd.DataFrame, transform: str, floor: float | None) -> dict[float, tuple]:
    """Return, per level, each backtest row's empirical interval as the origin would have
    stated it from the errors of earlier origins (for months already past at it, when the
    origins are months); NaN where too few such errors."""
    origins = sorted(own["origin"].unique())
    time_ordered = all(str(o)[:4].isdigit() for o in origins)
    rank = np.searchsorted(np.array(origins, dtype=object), own["origin"].to_numpy(object))
    period_of = own["period"].astype(str).to_numpy()
    horizon = own["horizon"].to_numpy(float)
    prediction = own["prediction"].to_numpy(float)
    scale = row_scales(own)
    scores = error_scores(own["actual"].to_numpy(float), prediction, scale, transform)
    found = {level: (np.full(len(own), np.nan), np.full(len(own), np.nan)) for level in LEVELS}
    for index, origin in enumerate(origins):
        mask = _earlier_rows(rank, period_of, index, str(origin), time_ordered)
        if not mask.any():
            continue
        known, bounds, _, _, _ = _pooled_bounds(horizon[mask], scores[mask])
        now = np.flatnonzero(rank == index)
        use = _nearest_measured(known, horizon[now])
        for number, level in enumerate(LEVELS):
            low, high = scaled_bounds(prediction[now], bounds[use, number], scale[now], transform, floor)
            found[level][0][now], found[level][1][now] = low, high
    return found


def _analytic_rows(own: pd.DataFrame, transform: str, floor: float | None) -> dict[float, tuple]:
    """Return, per level, each backtest row's analytic interval from its origin's own fit (NaN
    for a row without a standard error)."""
    se = own["prediction_se"].to_numpy(float)
    prediction = own["prediction"].to_numpy(float)
    centre = own["centre"].to_numpy(float) if "centre" in own.columns else prediction
    centre = np.where(np.isfinite(centre), centre, prediction)
    found = {}
    with np.errstate(invalid="ignore"):
        for level in LEVELS:
            low, high = analytic_bounds(centre, se, own["df_resid"].to_numpy(float), level, transform)
            found[level] = (floored(low, prediction, floor), high)
    return found


def _size_groups(predictions: pd.DataFrame) -> pd.Series | None:
    """Return each series' third by its mean actual in the backtest (small, middle, large), or
    None with fewer than three series."""
    means = predictions.groupby("series", sort=False)["actual"].mean().abs().sort_values(kind="stable")
    if len(means) < 3:
        return None
    groups = np.empty(len(means), dtype=object)
    for name, part in zip(SIZE_GROUPS, np.array_split(np.arange(len(means)), 3)):
        groups[part] = name
    return pd.Series(groups, index=means.index)


def _summaries(model: str, method: str, level: float, inside: np.ndarray, score: np.ndarray,
               groups: dict[str, tuple[np.ndarray, list[str]]]) -> tuple[dict, list[dict]]:
    """Return one model's overall coverage row for a method and level, and its rows by each way of
    grouping in ``groups`` ({by: (each scored row's group number, -1 for none; the groups' names)},
    a group listed only when it has scored rows), from the scored rows' ``inside`` and ``score``."""
    n = len(inside)
    overall = {"model": model, "method": method, "level": level,
               "coverage": float(inside.sum(dtype=float) / n) if n else float("nan"),
               "n": n, "interval_score": float(score.sum() / n) if n else float("nan")}
    detail = []
    for by, (codes, names) in groups.items():
        keyed = codes >= 0
        held = np.bincount(codes[keyed], weights=inside[keyed].astype(float), minlength=len(names))
        counts = np.bincount(codes[keyed], minlength=len(names))
        for name, shares, count in zip(names, held, counts, strict=True):
            if count:
                detail.append({"model": model, "method": method, "level": level, "by": by, "group": name,
                               "coverage": float(shares / count), "n": int(count)})
    return overall, detail


def _groups(own: pd.DataFrame, sizes: pd.Series | None) -> dict[str, tuple[np.ndarray, list[str]]]:
    """Return how a model's backtest rows are grouped for coverage: by months ahead (not for
    k-fold, which has none) and by size of series (with three series or more), each row's
    group number (-1 for none) and the groups' names in order."""
    groups = {}
    horizon = own["horizon"]
    if not (horizon == 0).all():
        codes, names = pd.factorize(horizon.to_numpy(float), sort=True)
        groups["months ahead"] = (codes, [str(int(name)) for name in names])
    if sizes is not None:
        codes, names = pd.factorize(own["series"].map(sizes).to_numpy(), sort=True)
        groups["size of series"] = (codes, [str(name) for name in names])
    return groups


COVERAGE_COLUMNS = ["model", "method", "level", "coverage", "n", "interval_score"]
DETAIL_COLUMNS = ["model", "method", "level", "by", "group", "coverage", "n"]


def backtest_intervals(predictions: pd.DataFrame, transform: str = "none",
                       floor: float | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return, per model, method and level, the share of backtest actuals inside the interval
    and the mean interval score; and the same shares by months ahead and by size of series.

    Analytic intervals use each origin's own fit. Empirical intervals at an origin use only
    the errors of earlier origins for months already past at that origin, as a live run would.
    """
    sizes = _size_groups(predictions)
    overall, detail = [], []
    for model, own in predictions.groupby("model", sort=False):
        methods = {"empirical": _empirical_rows(own, transform, floor)}
        if np.isfinite(own["prediction_se"].to_numpy(float)).any():
            methods = {"analytic": _analytic_rows(own, transform, floor), **methods}
        actual = own["actual"].to_numpy(float)
        groups = _groups(own, sizes)
        for method, found in methods.items():
            for level in LEVELS:
                low, high = found[level]
                scored = np.isfinite(low) & np.isfinite(high)
                inside = (actual[scored] >= low[scored]) & (actual[scored] <= high[scored])
                score = interval_score(actual[scored], low[scored], high[scored], level)
                row, rows = _summaries(model, method, level, inside, score,
                                       {by: (codes[scored], names) for by, (codes, names) in groups.items()})
                overall.append(row)
                detail += rows
    return (pd.DataFrame(overall, columns=COVERAGE_COLUMNS), pd.DataFrame(detail, columns=DETAIL_COLUMNS))


def coverage(predictions: pd.DataFrame, transform: str = "none", floor: float | None = None) -> pd.DataFrame:
    """Return, per model, method and level, the share of backtest actuals inside the interval
    and the mean interval score (``backtest_intervals``'s first table)."""
    return backtest_intervals(predictions, transform, floor)[0]


def closest_method(coverage: pd.DataFrame | None, model: str, methods=("analytic", "empirical")) -> str | None:
    """Return, of ``methods``, the one whose 95% backtest coverage for the model came closest
    to 95% (None when none was scored)."""
    if coverage is None or not len(coverage):
        return None
    own = coverage[(coverage["model"] == model) & np.isclose(coverage["level"], 0.95)
                   & coverage["coverage"].notna() & coverage["method"].isin(list(methods))]
    if not len(own):
        return None
    return str(own.assign(gap=(own["coverage"] - 0.95).abs()).sort_values("gap", kind="stable").iloc[0]["method"])


def stated_interval_score(coverage: pd.DataFrame | None, model: str) -> float:
    """Return the mean 95% interval score in the backtest of the interval the pages state for
    a model (the kind closest to 95%), NaN when none was scored."""
    method = closest_method(coverage, model)
    if method is None:
        return float("nan")
    own = coverage[(coverage["model"] == model) & (coverage["method"] == method)
                   & np.isclose(coverage["level"], 0.95)]
    return float(own["interval_score"].iloc[0])


def shortfalls(coverage: pd.DataFrame | None, model: str, method: str | None) -> list[tuple[float, float]]:
    """Return the levels, with their backtest coverage, at which the interval stated for a
    model held more than SHORTFALL below nominal."""
    if coverage is None or not len(coverage) or method is None:
        return []
    own = coverage[(coverage["model"] == model) & (coverage["method"] == method) & coverage["coverage"].notna()]
    return [(float(level), float(value)) for level, value in zip(own["level"], own["coverage"])
            if value < level - SHORTFALL - 1e-12]


def shortfall_warning(coverage: pd.DataFrame | None, model: str, method: str | None) -> str | None:
    """Return the warning the run, the summary and the report give when the stated interval
    held more than 5 points below nominal in the backtest (None when it did not)."""
    found = shortfalls(coverage, model, method)
    if not found:
        return None
    held = " and ".join(f"the {percent(level)}% interval held {value:.0%} of the actuals"
                        for level, value in found)
    return (f"{model_label(model)}'s {method} intervals were too narrow in the backtest: {held}. Read them as "
            "narrower than they are, and allow more room for error than they show")


def trusted_method(coverage: pd.DataFrame | None, model: str, forecast: pd.DataFrame) -> str:
    """Return the interval method to state for a model: of those its forecast rows carry, the
    one whose 95% backtest coverage came closest to 95%."""
    available = [m for m in ("analytic", "empirical")
                 if f"{m}_low_95" in forecast.columns and forecast[f"{m}_low_95"].notna().any()]
    return closest_method(coverage, model, available) or (available[0] if available else "analytic")
