"""Is a model's out-of-sample advantage over a reference more than luck?

The test runs on one loss difference per forecast origin (reference loss − model loss,
averaged over the origin's rows), so that forecasts made at the same origin count once.
Rolling origins less than a horizon apart forecast the same months, so those differences
are dependent; the test's variance allows for it without choosing a number of lags:

1. AR(1) prewhitening (Andrews & Monahan 1992): the centred differences c_t are filtered
   as e_t = c_t − φ·c_{t−1}, φ the least-squares AR(1) coefficient with Kendall's (1954)
   small-sample bias correction φ + (1 + 3φ)/T, kept within ±0.9;
2. the long-run variance of e from its first B = 2 cosine terms, the equal-weighted
   cosine estimator (Müller 2007; Lazarus, Lewis, Stock & Watson 2018):
   Ω_e = (1/B)·Σ_j Λ_j², Λ_j = sqrt(2/n)·Σ_t (e_t − ē)·cos(π·j·(t − ½)/n);
   recoloured as Ω = Ω_e / (1 − φ)²;
3. the statistic mean(d) / sqrt(Ω / T), referred to Student's t with B degrees of freedom:
   fixed-smoothing critical values (Coroneo & Iacone 2020 advocate them for comparing
   forecasts in small samples).

B, the bias correction and the bound on φ were chosen by simulation (tests/core/
test_significance_size.py states the designs): at 36 origins the one-sided size at 5%
stays within 2–8% for AR(1) differences with φ up to 0.9, including the overlap of
12-month horizons; at φ = 0.95 it is near 10%. Few terms buy that size with power: the
test needs a clear advantage to call it more than luck. There is no fallback: the
variance is a sum of squares, and a test on too few origins is not run (``MIN_ORIGINS``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pipeline.core.distributions import t_upper
from pipeline.core.scale import row_unit_scales

COSINE_TERMS = 2        # B: the variance's degrees of freedom
PHI_BOUND = 0.9         # the prewhitening coefficient is kept within ±0.9
MIN_ORIGINS = 12        # fewer origins give no p-value
METHOD = ("a one-sided t-test on the mean loss difference per origin, its variance from "
          f"{COSINE_TERMS} cosine terms after AR(1) prewhitening, against Student's t with "
          f"{COSINE_TERMS} degrees of freedom (fixed-smoothing: Müller 2007, Lazarus, Lewis, "
          "Stock & Watson 2018, Coroneo & Iacone 2020; prewhitening: Andrews & Monahan 1992)")


@dataclass(frozen=True)
class ComparisonTest:
    """The statistic, its one-sided p-value and the number of origins it rests on."""

    statistic: float
    p_value: float
    n: int


def _cosine_basis(n: int, terms: int) -> np.ndarray:
    """Return the n × terms matrix sqrt(2/n)·cos(π·j·(t − ½)/n), t = 1..n, j = 1..terms."""
    t = np.arange(1, n + 1)[:, None] - 0.5
    return np.sqrt(2.0 / n) * np.cos(np.pi * np.arange(1, terms + 1)[None, :] * t / n)


def origin_tests(differences: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return, per row of ``differences`` (groups × origins, origins in time order), the
    statistic of "the model's loss is lower" and its one-sided p-value, as the module
    describes. Rows with fewer than 3 origins, or with every difference 0, get NaN; when
    the differences do not vary after filtering (all one sign, no noise) the statistic is
    ±inf and p is 0 or 1."""
    d = np.atleast_2d(np.asarray(differences, float))
    # The test does not depend on the unit of the losses: each row is taken at its unit scale,
    # so that the squares in its variance neither underflow nor overflow.
    d = d / row_unit_scales(d)[:, None]
    groups, count = d.shape
    if count < 3:
        return np.full(groups, np.nan), np.full(groups, np.nan)
    mean = d.mean(axis=1)
    centred = d - mean[:, None]
    before, after = centred[:, :-1], centred[:, 1:]
    spread = np.einsum("ij,ij->i", before, before)
    with np.errstate(invalid="ignore", divide="ignore"):
        phi = np.where(spread > 0, np.einsum("ij,ij->i", after, before) / spread, 0.0)
    phi = np.clip(phi + (1 + 3 * phi) / count, -PHI_BOUND, PHI_BOUND)
    filtered = after - phi[:, None] * before
    filtered = filtered - filtered.mean(axis=1, keepdims=True)
    terms = filtered @ _cosine_basis(count - 1, COSINE_TERMS)
    long_run = (terms ** 2).mean(axis=1) / (1 - phi) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        statistic = mean / np.sqrt(long_run / count)
    p_value = t_upper(statistic, COSINE_TERMS)
    # Nothing to go on: every difference 0. A constant non-zero difference is all one sign.
    zero = ~np.any(d != 0, axis=1)
    flat = ~(long_run > 0)
    statistic = np.where(flat, np.where(mean > 0, np.inf, np.where(mean < 0, -np.inf, np.nan)), statistic)
    p_value = np.where(flat, np.where(mean > 0, 0.0, 1.0), p_value)
    return np.where(zero, np.nan, statistic), np.where(zero, np.nan, p_value)


def origin_test(differences) -> ComparisonTest:
    """Return the test of one series of per-origin loss differences (reference − model)."""
    d = np.asarray(differences, float)
    statistic, p_value = origin_tests(d[None, :]) if d.ndim == 1 else origin_tests(d)
    return ComparisonTest(float(statistic[0]), float(p_value[0]), len(d))


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
