"""The comparison test (``core.significance``) against a hand-worked example and against
an independent composition of its published steps.

Steps, as the module states them: AR(1) prewhitening (D. W. K. Andrews & J. C. Monahan
1992, "An improved heteroskedasticity and autocorrelation consistent covariance matrix
estimator", Econometrica 60(4)) with Kendall's (1954) bias correction φ + (1 + 3φ)/T; the
equal-weighted cosine long-run variance (U. K. Müller 2007, "A theory of robust long-run
variance estimation", Journal of Econometrics 141; E. Lazarus, D. J. Lewis, J. H. Stock &
M. W. Watson 2018, "HAR inference: recommendations for practice", JBES 36(4)); Student's
t with B degrees of freedom (fixed-smoothing critical values, as L. Coroneo & F. Iacone
2020, "Comparing predictive accuracy in small samples using fixed-smoothing asymptotics",
Journal of Applied Econometrics 35(4), use them for comparing forecasts).

Independent pieces used here: scipy.fft.dct (type II, orthonormal: its coefficient j ≥ 1
is sqrt(2/n)·Σ_t x_t·cos(π·j·(t + ½)/n), t from 0), statsmodels OLS for the AR(1)
coefficient, and the closed form of Student's t with 2 degrees of freedom,
P(T > t) = ½·(1 − t / sqrt(t² + 2)).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.fft
import statsmodels.api as sm

from pipeline.core.significance import COSINE_TERMS, PHI_BOUND, origin_test, origin_tests


def t2_sf(t: float) -> float:
    """P(T > t) for Student's t with 2 degrees of freedom, in closed form."""
    return 0.5 * (1 - t / math.sqrt(t * t + 2))


def test_hand_worked_example():
    """d = (0, 2, 0, 2), worked by hand.

    Mean 1; centred c = (−1, 1, −1, 1). AR(1): Σ c_t c_{t−1} / Σ c_{t−1}² = −3/3 = −1;
    bias-corrected −1 + (1 − 3)/4 = −1.5, bounded to −0.9. Filtered e_t = c_t + 0.9·c_{t−1}
    = (0.1, −0.1, 0.1), mean 1/30, centred (1/15, −2/15, 1/15); n = 3.
    Λ_1 = sqrt(2/3)·(1/15·cos(π/6) − 2/15·cos(π/2) + 1/15·cos(5π/6)) = 0.
    Λ_2 = sqrt(2/3)·(1/15·cos(π/3) − 2/15·cos(π) + 1/15·cos(5π/3)) = sqrt(2/3)·0.2.
    Ω_e = (0 + (2/3)·0.04) / 2 = 1/75; Ω = (1/75) / 1.9²; statistic = 1 / sqrt(Ω / 4)
    = 2·1.9·sqrt(75) = 32.9090; p = ½·(1 − t / sqrt(t² + 2)) ≈ 0.000461.
    """
    assert PHI_BOUND == 0.9 and COSINE_TERMS == 2
    test = origin_test([0.0, 2.0, 0.0, 2.0])
    expected = 2 * 1.9 * math.sqrt(75)
    assert test.statistic == pytest.approx(expected, rel=1e-12)
    assert test.p_value == pytest.approx(t2_sf(expected), rel=1e-9)
    assert test.p_value == pytest.approx(0.000461, abs=5e-7)
    assert test.n == 4


def independent(d: np.ndarray) -> tuple[float, float]:
    """The statistic and p-value composed from scipy's DCT, statsmodels' OLS and the closed
    form of t with 2 degrees of freedom."""
    n = len(d)
    c = d - d.mean()
    phi = sm.OLS(c[1:], c[:-1]).fit().params[0]
    phi = min(max(phi + (1 + 3 * phi) / n, -0.9), 0.9)
    e = c[1:] - phi * c[:-1]
    terms = scipy.fft.dct(e - e.mean(), type=2, norm="ortho")[1:3]
    variance = np.mean(terms ** 2) / (1 - phi) ** 2
    statistic = d.mean() / math.sqrt(variance / n)
    return statistic, t2_sf(statistic)


@pytest.mark.parametrize("seed", range(6))
def test_equals_an_independent_composition(seed):
    rng = np.random.default_rng(seed)
    n = [12, 20, 36, 47, 60, 100][seed]
    # AR(1) differences with a small positive mean: the model somewhat better.
    d = np.empty(n)
    d[0] = rng.normal()
    for t in range(1, n):
        d[t] = 0.5 * d[t - 1] + rng.normal()
    d += 0.3
    statistic, p_value = independent(d)
    test = origin_test(d)
    assert test.statistic == pytest.approx(statistic, rel=1e-10)
    assert test.p_value == pytest.approx(p_value, rel=1e-8, abs=1e-15)


def test_many_rows_at_once_match_one_at_a_time():
    rng = np.random.default_rng(3)
    d = rng.normal(0.2, 1.0, size=(7, 30))
    statistic, p_value = origin_tests(d)
    for row in range(7):
        expected = independent(d[row])
        assert statistic[row] == pytest.approx(expected[0], rel=1e-10)
        assert p_value[row] == pytest.approx(expected[1], rel=1e-8, abs=1e-15)


def test_degenerate_cases_are_stated_not_hidden():
    # Every difference 0: identical losses, nothing to test.
    assert math.isnan(origin_test(np.zeros(20)).p_value)
    # The same non-zero difference at every origin: all one sign and no noise.
    better = origin_test(np.full(20, 0.5))
    assert better.statistic == math.inf and better.p_value == 0.0
    worse = origin_test(np.full(20, -0.5))
    assert worse.statistic == -math.inf and worse.p_value == 1.0
    # Fewer than 3 origins: no test.
    assert math.isnan(origin_test([1.0, 2.0]).p_value)
    # The sign convention: reference loss − model loss, so a positive mean favours the model.
    rng = np.random.default_rng(1)
    noise = rng.normal(size=40)
    assert origin_test(noise + 1).p_value < 0.01 < 0.99 < origin_test(-noise - 1).p_value
