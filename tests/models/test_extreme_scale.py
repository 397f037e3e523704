"""The fit's figures and the residual checks on exact fits and on targets of extreme size.

Invented data (seeded): 60 rows, an intercept and two drivers, y = 1 + 2·x1 − x2 + N(0, 1).
The references are statsmodels' own functions on the unscaled residuals (an independent
implementation); the scaled cases must give the same values, since the checks do not
depend on the target's unit.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from statsmodels.stats.diagnostic import acorr_ljungbox, het_breuschpagan
from statsmodels.stats.stattools import durbin_watson as sm_durbin_watson
from statsmodels.stats.stattools import jarque_bera as sm_jarque_bera

from pipeline.core.formatting import format_number
from pipeline.core.metrics import r2_out_of_sample, rmse
from pipeline.core.scale import row_unit_scales, unit_scale
from pipeline.core.significance import origin_tests
from pipeline.models import inference
from pipeline.models.ols import least_squares

RNG = np.random.default_rng(2022)
X = np.column_stack([np.ones(60), RNG.uniform(0, 10, 60), RNG.normal(0, 3, 60)])
Y = X @ np.array([1.0, 2.0, -1.0]) + RNG.normal(0, 1, 60)
NAMES = ["intercept", "x1", "x2"]
FACTORS = [1e145, 1e150, 1e-300]


def test_unit_scale_is_the_power_of_two_just_above_the_largest_size():
    assert unit_scale([3.0, -5.0]) == 8.0
    assert unit_scale([4.0]) == 8.0            # frexp(4) = 0.5·2³: above, never equal
    assert unit_scale([0.0, 0.0]) == 1.0 and unit_scale([]) == 1.0
    assert unit_scale([np.inf, np.nan, 0.75]) == 1.0   # what is not finite is left out
    assert unit_scale([1e-300]) == 2.0 ** -996
    np.testing.assert_array_equal(row_unit_scales([[3.0, 1.0], [0.0, 0.0]]), [4.0, 1.0])


@pytest.mark.parametrize("factor", FACTORS)
def test_the_fit_of_a_scaled_target_is_the_plain_fit_scaled(factor):
    plain, scaled = least_squares(X, Y, NAMES), least_squares(X, Y * factor, NAMES)
    assert scaled.r2 == pytest.approx(plain.r2, rel=1e-12)
    assert scaled.resid_sd == pytest.approx(plain.resid_sd * factor, rel=1e-12)
    np.testing.assert_allclose(scaled.stderr, plain.stderr * factor, rtol=1e-12)
    table = inference.fit_coefficient_table(scaled, X, "hc3")
    reference = inference.fit_coefficient_table(plain, X, "hc3")
    np.testing.assert_allclose(table["std_error"], reference["std_error"] * factor, rtol=1e-10)
    np.testing.assert_allclose(table["t"], reference["t"], rtol=1e-10)


@pytest.mark.parametrize("factor", FACTORS)
def test_residual_checks_match_statsmodels_whatever_the_scale(factor):
    fit = least_squares(X, Y, NAMES)
    e = fit.residuals   # the reference: statsmodels on the unscaled residuals
    scaled = least_squares(X, Y * factor, NAMES)
    with warnings.catch_warnings():
        warnings.simplefilter("error")   # no overflow, underflow or division warning either
        assert inference.jarque_bera(scaled.residuals)[0] == pytest.approx(sm_jarque_bera(e)[0], rel=1e-9)
        assert inference.durbin_watson([scaled.residuals]) == pytest.approx(sm_durbin_watson(e), rel=1e-9)
        assert inference.breusch_pagan(scaled.residuals, X)[0] == pytest.approx(
            het_breuschpagan(e, X)[0], rel=1e-9)
        assert inference.ljung_box(scaled.residuals, 12)[0] == pytest.approx(
            acorr_ljungbox(e, lags=[12])["lb_stat"].iloc[0], rel=1e-9)
        np.testing.assert_allclose(inference.cooks_distance(scaled), inference.cooks_distance(fit), rtol=1e-9)
        _, aic, _ = inference.information_criteria(scaled)
    assert aic - inference.information_criteria(fit)[1] == pytest.approx(120 * np.log(factor), rel=1e-9)


@pytest.mark.parametrize("y", [np.zeros(60), np.full(60, 5.0), X @ np.array([3.0, 2.0, 0.5])],
                         ids=["zero", "constant", "linear"])
def test_an_exact_fit_gives_undefined_checks_with_their_reason_and_no_warning(y):
    fit = least_squares(X, y, NAMES)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        findings, _, influential = inference.diagnose(fit, X)
        loglik, aic, bic = inference.information_criteria(least_squares(X, np.zeros(60), NAMES))
    assert np.isnan([loglik, aic, bic]).all()
    by_name = {finding.check: finding for finding in findings}
    for check in ("Durbin–Watson", "Ljung–Box (12 lags)", "Breusch–Pagan", "Jarque–Bera", "Cook's distance",
                  "AIC", "BIC", "F test (all slopes zero)"):
        assert np.isnan(by_name[check].value) and not by_name[check].flagged, check
        assert "exact" in by_name[check].reading or "does not vary" in by_name[check].reading, check
    assert influential["cooks_distance"].isna().all()
    flat = np.ptp(y) == 0
    assert np.isnan(by_name["R²"].value) if flat else by_name["R²"].value == 1.0


def test_the_f_test_of_a_perfect_r2_is_undefined_rather_than_a_division_by_zero():
    fit = least_squares(X, X @ np.array([3.0, 2.0, 0.5]), NAMES)
    perfect = type(fit)(**{**vars(fit), "r2": 1.0})
    assert np.isnan(inference.f_test(perfect)).all()


def test_an_exact_fit_has_zero_standard_errors_and_no_t_test():
    fit = least_squares(X, X @ np.array([3.0, 2.0, 0.5]), NAMES)
    table = inference.fit_coefficient_table(fit, X, exact=True)
    assert (table["std_error"] == 0).all() and table["t"].isna().all() and table["p_value"].isna().all()
    np.testing.assert_allclose(table["estimate"], [3.0, 2.0, 0.5], rtol=1e-12)


def test_squared_errors_of_a_tiny_target_do_not_underflow_to_zero():
    actual, predicted = np.array([1.0, 2.0, 4.0]), np.array([1.5, 1.0, 4.0])
    for factor in FACTORS:
        assert rmse(actual * factor, predicted * factor) == pytest.approx(
            rmse(actual, predicted) * factor, rel=1e-12)
        assert r2_out_of_sample(actual * factor, predicted * factor) == pytest.approx(
            r2_out_of_sample(actual, predicted), rel=1e-12)


def test_the_comparison_test_does_not_depend_on_the_unit_of_the_losses():
    differences = np.random.default_rng(3).normal(0.3, 1, (1, 20))
    statistic, p = origin_tests(differences)
    for factor in FACTORS:
        scaled_statistic, scaled_p = origin_tests(differences * factor)
        assert scaled_statistic[0] == pytest.approx(statistic[0], rel=1e-12)
        assert scaled_p[0] == pytest.approx(p[0], rel=1e-12)


@pytest.mark.parametrize(("value", "shown"), [
    (2.5866e147, "2.587 × 10¹⁴⁷"),      # beyond what a double holds in whole digits
    (-1e15, "-1 × 10¹⁵"),
    (1.7976931348623157e308, "1.798 × 10³⁰⁸"),   # the largest double
    (123456789012345.6, "123,456,789,012,346"),  # below 1e15 still in full
])
def test_huge_numbers_are_written_as_powers_of_ten(value, shown):
    assert format_number(value) == shown
