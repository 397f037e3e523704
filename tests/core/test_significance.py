"""The Diebold–Mariano test against an independent computation from the published formula.

F. X. Diebold & R. S. Mariano (1995), "Comparing predictive accuracy", Journal
of Business & Economic Statistics 13(3), 253-263: with the loss differential
d_t = L(baseline)_t − L(model)_t, DM = d̄ / sqrt(V̂/n), V̂ = γ̂_0 + 2 Σ_{k=1}^{h−1} γ̂_k,
γ̂_k = (1/n) Σ_{t=k+1}^{n} (d_t − d̄)(d_{t−k} − d̄).

D. Harvey, S. Leybourne & P. Newbold (1997), "Testing the equality of prediction
mean squared errors", International Journal of Forecasting 13(2), 281-291:
DM* = DM · sqrt((n + 1 − 2h + h(h − 1)/n) / n), compared with Student's t on
n − 1 degrees of freedom (scipy.stats.t).

Sign convention (castline's): d_t = baseline loss − model loss, so a positive
statistic means the model's losses are lower; the p-value is one-sided,
P(T ≥ DM*), the evidence that the model is better.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats

from pipeline.core.significance import diebold_mariano


def reference_dm(loss_baseline, loss_model, h: int) -> tuple[float, float]:
    """DM* and its one-sided p-value, written out from the two papers with plain Python sums."""
    d = [float(b) - float(m) for b, m in zip(loss_baseline, loss_model)]
    n = len(d)
    mean = sum(d) / n
    gamma = [sum((d[t] - mean) * (d[t - k] - mean) for t in range(k, n)) / n for k in range(h)]
    variance = gamma[0] + 2 * sum(gamma[1:])
    assert variance > 0, "choose loss series whose long-run variance estimate is positive"
    dm = mean / math.sqrt(variance / n)
    corrected = dm * math.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    return corrected, float(scipy.stats.t.sf(corrected, df=n - 1))


def simulated_losses(h: int, n: int = 40, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Squared errors of two h-step forecasts: MA(h − 1) errors (overlapping forecasts), the
    baseline's a little larger, so the model is somewhat better."""
    rng = np.random.default_rng(seed)
    weights = np.array([1.0, 0.6, 0.3][:h])

    def errors(scale):
        shocks = rng.normal(scale=scale, size=n + h - 1)
        return np.convolve(shocks, weights, mode="valid")

    common = errors(1.0)
    baseline = common + errors(0.8)
    model = common + errors(0.5)
    return baseline ** 2, model ** 2


@pytest.mark.parametrize("h", [1, 3])
def test_statistic_and_p_value_equal_the_published_formula(h):
    baseline, model = simulated_losses(h, seed=10 + h)
    test = diebold_mariano(baseline, model, horizon=h)
    statistic, p = reference_dm(baseline, model, h)
    assert test.n == 40 and test.horizon == h
    assert test.statistic == pytest.approx(statistic, rel=1e-12)
    assert test.p_value == pytest.approx(p, rel=1e-10)


def test_lag_window_matters_so_h_is_really_used():
    # On these losses the formula at h = 3 and at h = 1 differ, so matching h = 3 means h is used.
    baseline, model = simulated_losses(3, seed=13)
    at_3, at_1 = reference_dm(baseline, model, 3), reference_dm(baseline, model, 1)
    assert at_3[0] != pytest.approx(at_1[0], rel=1e-6)
    assert diebold_mariano(baseline, model, horizon=3).statistic == pytest.approx(at_3[0], rel=1e-12)


def test_sign_convention_positive_means_the_model_is_better():
    rng = np.random.default_rng(5)
    baseline = rng.normal(scale=2.0, size=60) ** 2
    model = rng.normal(scale=1.0, size=60) ** 2     # clearly smaller losses
    better = diebold_mariano(baseline, model, horizon=1)
    assert better.statistic > 0
    assert better.p_value < 0.05
    statistic, p = reference_dm(baseline, model, 1)
    assert better.statistic == pytest.approx(statistic, rel=1e-12)
    assert better.p_value == pytest.approx(p, rel=1e-10)
    # Swapped: the same size of evidence, the other way; the one-sided p becomes 1 − p.
    worse = diebold_mariano(model, baseline, horizon=1)
    assert worse.statistic == pytest.approx(-statistic, rel=1e-12)
    assert worse.p_value == pytest.approx(1 - p, rel=1e-10)
    assert worse.p_value > 0.95


def test_identical_losses_give_no_evidence():
    losses = np.random.default_rng(6).normal(size=30) ** 2
    test = diebold_mariano(losses, losses.copy(), horizon=1)
    # Documented in diebold_mariano_by_group: every difference 0 gives a NaN statistic and p = 1.
    assert np.isnan(test.statistic)
    assert test.p_value == 1.0


def test_too_few_losses_give_nan():
    test = diebold_mariano([1.0, 2.0], [0.5, 0.5], horizon=1)
    assert np.isnan(test.statistic) and np.isnan(test.p_value)


def test_losses_of_different_lengths_are_refused():
    with pytest.raises(ValueError):
        diebold_mariano([1.0, 2.0, 3.0], [1.0, 2.0], horizon=1)
