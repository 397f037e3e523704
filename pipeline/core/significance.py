"""Is a model's out-of-sample advantage over the mean baseline more than luck?

The Diebold–Mariano test (Diebold & Mariano 1995) with the small-sample
correction of Harvey, Leybourne & Newbold (1997).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.stats


@dataclass(frozen=True)
class ComparisonTest:
    """The statistic, its one-sided p-value and the sample it rests on."""

    statistic: float
    p_value: float
    n: int
    horizon: int


def diebold_mariano(loss_baseline, loss_model, horizon: int = 1) -> ComparisonTest:
    """Return the corrected Diebold–Mariano test of "the model's loss is lower".

    Sign convention: d_t = loss_baseline_t − loss_model_t, so a positive
    statistic means the model did better. The long-run variance of d uses the
    autocovariances up to lag horizon − 1 (h-step forecasts overlap); the
    statistic is scaled by sqrt((n + 1 − 2h + h(h − 1)/n) / n) and compared with
    Student's t on n − 1 degrees of freedom (Harvey, Leybourne & Newbold 1997).
    The p-value is one-sided: the chance of a statistic this large were the two
    equally good.
    """
    baseline = np.asarray(loss_baseline, dtype=float)
    model = np.asarray(loss_model, dtype=float)
    if baseline.shape != model.shape:
        raise ValueError("the two loss series differ in length")
    d = baseline - model
    statistic, p_value = diebold_mariano_by_group(d, np.array([0]), np.array([len(d)]), horizon) \
        if len(d) else (np.array([np.nan]), np.array([np.nan]))
    return ComparisonTest(float(statistic[0]), float(p_value[0]), len(d), horizon)


def diebold_mariano_by_group(differences: np.ndarray, starts: np.ndarray, sizes: np.ndarray,
                            horizon: int) -> tuple[np.ndarray, np.ndarray]:
    """Return, per group, the corrected statistic and its one-sided p-value (as in
    ``diebold_mariano``), for many groups at once.

    ``differences`` holds the loss differences (baseline − model) of every
    group, each group contiguous and in time order from ``starts`` for ``sizes``
    values. A group of fewer than 3 values gets NaN; when the long-run variance
    is not positive the lag-0 variance is used, and when that is 0 too the
    statistic is ±inf (NaN if every difference is 0) with p 0 or 1.
    """
    count = len(starts)
    if not count:
        return np.zeros(0), np.zeros(0)
    group = np.repeat(np.arange(count), sizes)
    n = sizes.astype(float)
    mean = (np.add.reduceat(differences, starts) if len(starts) else np.zeros(0)) / n
    centred = differences - mean[group]
    autocov = np.zeros((max(horizon, 1), count))
    for lag in range(max(horizon, 0)):
        # Products of values lag apart within the same group; a group shorter than the lag has none.
        same = group[lag:] == group[:len(group) - lag]
        products = centred[lag:][same] * centred[:len(group) - lag][same]
        autocov[lag] = np.bincount(group[lag:][same], weights=products, minlength=count) / n
    long_run = autocov[0] + 2 * autocov[1:].sum(axis=0)
    long_run = np.where(long_run <= 0, autocov[0], long_run)
    with np.errstate(invalid="ignore", divide="ignore"):
        statistic = mean / np.sqrt(long_run / n)
        correction = np.sqrt((n + 1 - 2 * horizon + horizon * (horizon - 1) / n) / n)
        corrected = statistic * correction
        p_value = scipy.stats.t.sf(corrected, df=n - 1)
        # No spread at all: the differences are all 0 (no evidence either way) or all one sign.
        flat = long_run <= 0
        all_zero = np.bincount(group, weights=(differences != 0).astype(float), minlength=count) == 0
        corrected = np.where(flat, np.where(all_zero, np.nan, np.sign(mean) * np.inf), corrected)
    p_value = np.where(flat, np.where(all_zero | (mean < 0), 1.0, 0.0), p_value)
    short = (sizes < 3) | (horizon < 1)
    return np.where(short, np.nan, corrected), np.where(short, np.nan, p_value)


def holm(p_values) -> np.ndarray:
    """Return Holm's (1979) step-down adjusted p-values, NaN left as NaN and not counted.

    With m tests ordered p_(1) ≤ … ≤ p_(m), the adjusted p_(i) is the largest of
    min(1, (m − j + 1)·p_(j)) over j ≤ i: rejecting where it is below α keeps the chance
    of any false claim among the m at most α, whatever their dependence.
    """
    p = np.asarray(p_values, dtype=float)
    adjusted = np.full(p.shape, np.nan)
    present = np.flatnonzero(np.isfinite(p))
    if not len(present):
        return adjusted
    order = present[np.argsort(p[present], kind="stable")]
    m = len(order)
    scaled = np.minimum(1.0, (m - np.arange(m)) * p[order])
    adjusted[order] = np.maximum.accumulate(scaled)
    return adjusted
