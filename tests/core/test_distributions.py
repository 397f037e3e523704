"""The tail areas and quantiles castline computes from scipy.special, checked against
scipy.stats' distributions (an independent public interface to them) and against printed
table values (from memory: the usual two-sided 5% points found in any statistics text)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from pipeline.core.distributions import (
    chi2_upper,
    f_upper,
    normal_order_medians,
    normal_quantile,
    t_quantile,
    t_upper,
)

STATISTICS = np.array([-40.0, -3.2, -1.0, -1e-9, 0.0, 1e-9, 0.5, 1.96, 3.2, 12.0, 40.0, np.inf, np.nan])
DEGREES = [0.5, 1, 2, 3, 7, 30, 120, 1e6, np.inf]


@pytest.mark.parametrize("df", DEGREES)
def test_t_tail_and_quantile_equal_scipy_stats(df):
    np.testing.assert_allclose(t_upper(STATISTICS, df), scipy.stats.t.sf(STATISTICS, df), rtol=1e-14, atol=0)
    probabilities = np.array([0.0, 1e-12, 0.025, 0.5, 0.9, 0.975, 1 - 1e-12, 1.0])
    np.testing.assert_allclose(t_quantile(probabilities, df), scipy.stats.t.ppf(probabilities, df), rtol=1e-14)


@pytest.mark.parametrize("df", [1, 2, 5, 10, 57.5, 1000])
def test_chi2_and_f_tails_equal_scipy_stats(df):
    np.testing.assert_allclose(chi2_upper(STATISTICS, df), scipy.stats.chi2.sf(STATISTICS, df), rtol=1e-14)
    for df_resid in (1, 4, 30, 500):
        np.testing.assert_allclose(f_upper(STATISTICS, df, df_resid), scipy.stats.f.sf(STATISTICS, df, df_resid),
                                   rtol=1e-13)


def test_no_degrees_of_freedom_gives_nan_as_scipy_stats():
    assert np.isnan(t_upper(1.0, 0)) and np.isnan(scipy.stats.t.sf(1.0, 0))
    assert np.isnan(t_quantile(0.9, 0)) and np.isnan(scipy.stats.t.ppf(0.9, 0))
    assert np.isnan(t_quantile(0.9, -2.0))


def test_printed_table_values():
    # Two-sided 5% points, as printed in statistics tables (from memory, six figures).
    assert t_quantile(0.975, 10) == pytest.approx(2.228139, abs=1e-6)
    assert t_quantile(0.975, 1) == pytest.approx(12.706205, abs=1e-6)
    assert normal_quantile(0.975) == pytest.approx(1.959964, abs=1e-6)
    assert chi2_upper(3.841459, 1) == pytest.approx(0.05, abs=1e-7)
    assert f_upper(4.102821, 2, 10) == pytest.approx(0.05, abs=1e-7)
    assert 2 * t_upper(2.228139, 10) == pytest.approx(0.05, abs=1e-7)


@pytest.mark.filterwarnings("ignore:One or more sample arguments is too small")  # probplot's line of 1 point
@pytest.mark.parametrize("count", [1, 2, 3, 10, 191, 1000])
def test_normal_order_medians_equal_scipy_probplot(count):
    values = np.random.default_rng(count).standard_normal(count)
    (expected, ordered), _ = scipy.stats.probplot(values, dist="norm")
    np.testing.assert_allclose(normal_order_medians(count), expected, rtol=1e-14, atol=1e-15)
    np.testing.assert_array_equal(np.sort(values), ordered)


def test_the_pictures_line_equals_scipy_probplot():
    from pipeline.present.plots import _straight_line
    values = np.random.default_rng(7).gamma(2.0, size=300)
    (theoretical, ordered), (slope, intercept, _) = scipy.stats.probplot(values, dist="norm")
    mine = _straight_line(normal_order_medians(len(values)), np.sort(values))
    np.testing.assert_allclose(mine, (slope, intercept), rtol=1e-12)
    assert all(np.isnan(_straight_line(np.array([0.0]), np.array([1.0]))))
