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
    n = len(d)
    if n < 3 or horizon < 1:
        return ComparisonTest(float("nan"), float("nan"), n, horizon)
    centred = d - d.mean()
    autocov = [float(centred[k:] @ centred[: n - k]) / n for k in range(min(horizon, n))]
    long_run = autocov[0] + 2 * sum(autocov[1:])
    if long_run <= 0:  # the overlap correction can turn negative in short samples
        long_run = autocov[0]
    if long_run <= 0:
        same = bool(np.all(d == 0))
        return ComparisonTest(float("nan") if same else np.sign(d.mean()) * np.inf,
                              1.0 if same or d.mean() < 0 else 0.0, n, horizon)
    statistic = d.mean() / np.sqrt(long_run / n)
    correction = np.sqrt((n + 1 - 2 * horizon + horizon * (horizon - 1) / n) / n)
    corrected = float(statistic * correction)
    return ComparisonTest(corrected, float(scipy.stats.t.sf(corrected, df=n - 1)), n, horizon)
