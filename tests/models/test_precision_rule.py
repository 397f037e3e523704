"""When the single fit refines in twice the working precision, and what that buys.

References:
- exact rational arithmetic (Python's ``fractions.Fraction``, every double converted exactly):
  the least-squares solution of the design and target as stored in doubles, by Gauss–Jordan
  elimination on the normal equations in rationals, where nothing is rounded; its
  (XᵀX)⁻¹ the same way, and the residual SD from the exact residual sum of squares;
- statsmodels' OLS, an independent implementation, on the diabetes data shipped with
  scikit-learn (``sklearn.datasets.load_diabetes``), a well-conditioned design.

The simulated designs are stated where they are made (numpy, seeded); their numbers are not
reference values, the exact solutions of them are.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.datasets import load_diabetes

from pipeline.core.double_double import power2
from pipeline.models.ols import least_squares, needs_refining, ordinary_digits


def exact_least_squares(matrix: np.ndarray, target: np.ndarray) -> tuple[list[float], list[float]]:
    """Return the exact least-squares coefficients and standard errors (each rounded once)."""
    rows = [[Fraction(float(v)) for v in row] for row in matrix]
    y = [Fraction(float(v)) for v in target]
    p = len(rows[0])
    gram = [[sum(r[i] * r[j] for r in rows) for j in range(p)] for i in range(p)]
    right = [sum(r[i] * t for r, t in zip(rows, y)) for i in range(p)]
    augmented = [gram[i] + [right[i]] + [Fraction(int(i == j)) for j in range(p)] for i in range(p)]
    for c in range(p):
        pivot = max(range(c, p), key=lambda r: abs(augmented[r][c]))
        augmented[c], augmented[pivot] = augmented[pivot], augmented[c]
        lead = augmented[c][c]
        augmented[c] = [v / lead for v in augmented[c]]
        for r in range(p):
            if r != c and augmented[r][c] != 0:
                factor = augmented[r][c]
                augmented[r] = [a - factor * b for a, b in zip(augmented[r], augmented[c])]
    coef = [augmented[i][p] for i in range(p)]
    residuals = [t - sum(a * b for a, b in zip(r, coef)) for r, t in zip(rows, y)]
    variance = sum(e * e for e in residuals) / (len(rows) - p)
    se = [math.sqrt(float(variance * augmented[i][p + 1 + i])) for i in range(p)]
    return [float(c) for c in coef], se


def lre(computed, reference) -> float:
    """Log relative error, capped at 15 (the NIST StRD convention)."""
    error = abs(float(computed) - float(reference))
    return 15.0 if error == 0 else min(15.0, -math.log10(error / abs(float(reference))))


def random_polynomial(rng) -> tuple[np.ndarray, np.ndarray]:
    """A design of 15–59 rows: an intercept and x's powers up to a degree of 1–5, x drawn
    uniformly on [a, a + w] (a from −20 to 40, w from 0.5 to 30) to three decimals; the
    coefficients normal times 10^k (k from −3 to 2), the noise's SD 0.01, 1 or 100."""
    degree, start, width = int(rng.integers(1, 6)), float(rng.uniform(-20, 40)), float(rng.uniform(0.5, 30))
    rows = int(rng.integers(15, 60))
    x = np.round(np.sort(rng.uniform(start, start + width, rows)), 3)
    design = np.column_stack([np.ones(rows), *power2(x, degree)])
    coef = rng.normal(size=degree + 1) * 10.0 ** rng.integers(-3, 3, size=degree + 1)
    return design, design @ coef + rng.normal(size=rows) * rng.choice([0.01, 1.0, 100.0])


def test_where_the_rule_does_not_refine_the_ordinary_solve_keeps_its_digits():
    """On 60 random polynomial designs (condition numbers from 1 to about 1e8): the fit as
    castline makes it refines exactly where the rule says (a condition number above 1,000, or
    fewer than 8 digits estimated), and wherever it does not, every coefficient within a
    factor of 100 of the largest (scaled) has at least 12 correct digits and every coefficient
    at least 9.5 (measured on 400 such designs: 12.7 and 10.0); refined, at least 13 (measured:
    15). Forced refinement gives at least 13 on every design."""
    rng = np.random.default_rng(20261203)
    refined = unrefined = 0
    for _ in range(60):
        design, target = random_polynomial(rng)
        reference, _ = exact_least_squares(design, target)
        ordinary = least_squares(design, target, refine=False)
        automatic = least_squares(design, target)
        forced = least_squares(design, target, refine=True)
        scaled = np.abs(ordinary.coef * np.linalg.norm(design, axis=0))
        estimate = ordinary_digits(ordinary.condition_number, scaled)
        rule = bool(needs_refining(ordinary.condition_number, estimate))
        assert automatic.precision.refined == rule
        digits = np.array([lre(c, r) for c, r in zip(automatic.coef, reference)])
        if rule:
            refined += 1
            assert digits.min() >= 13
        else:
            unrefined += 1
            assert digits.min() >= 9.5
            assert digits[scaled >= scaled.max() / 100].min() >= 12
        assert min(lre(c, r) for c, r in zip(forced.coef, reference)) >= 13
    assert refined >= 10 and unrefined >= 10   # both sides of the rule were exercised


def test_a_polynomial_of_degree_ten_meets_its_exact_solution():
    """A design as hard as NIST's hardest linear problem: 82 rows, x drawn uniformly on
    [−8.8, −3.1] to six decimals, an intercept and x's powers up to 10 formed in twice the
    working precision (condition number of the scaled design about 5e9); the target a
    polynomial with coefficients from −1467 down to −4e−5 plus noise of SD 0.003, to four
    decimals. The double-precision solve alone has about 8 digits; refined, every coefficient
    has at least 13 and every standard error at least 11."""
    rng = np.random.default_rng(5)
    coef = np.array([-1467.49, -2772.18, -2316.37, -1127.97, -354.478, -75.1242, -10.8753,
                     -1.06221, -0.0670191, -0.00246781, -4.02963e-05])
    x = np.round(np.sort(rng.uniform(-8.8, -3.1, 82)), 6)
    design = np.column_stack([np.ones(len(x)), *power2(x, 10)])
    target = np.round(design @ coef + rng.normal(size=len(x)) * 0.003, 4)
    reference, reference_se = exact_least_squares(design, target)
    ordinary = least_squares(design, target, refine=False)
    fit = least_squares(design, target)
    assert fit.condition_number > 1e9
    assert min(lre(c, r) for c, r in zip(ordinary.coef, reference)) < 11
    assert fit.precision.refined and fit.precision.covariance_refined
    assert min(lre(c, r) for c, r in zip(fit.coef, reference)) >= 13
    assert min(lre(s, r) for s, r in zip(fit.stderr, reference_se)) >= 11
    assert fit.precision.digits >= 13


@pytest.mark.parametrize("intercept", [True, False])
def test_forcing_the_refined_path_on_a_well_conditioned_design_changes_only_rounding(intercept):
    """scikit-learn's diabetes data (442 rows, 10 drivers; condition number about 5): the
    refined path, forced, gives the ordinary path's coefficients and standard errors to within
    a few units of the last place, scaled by the condition number (8·ε·κ relative to the
    largest), and both equal statsmodels' OLS to 1e-12."""
    data = load_diabetes()
    design = np.column_stack([np.ones(len(data.target)), data.data]) if intercept else data.data
    ordinary = least_squares(design, data.target, refine=False, centered_r2=intercept)
    forced = least_squares(design, data.target, refine=True, centered_r2=intercept)
    assert not ordinary.precision.refined and forced.precision.refined and forced.precision.covariance_refined
    tolerance = 8 * np.finfo(float).eps * ordinary.condition_number
    for mine, theirs in ((forced.coef, ordinary.coef), (forced.stderr, ordinary.stderr)):
        assert np.max(np.abs(mine - theirs)) <= tolerance * np.max(np.abs(theirs))
    reference = sm.OLS(data.target, design).fit()
    np.testing.assert_allclose(forced.coef, reference.params, rtol=1e-12, atol=1e-12 * np.abs(reference.params).max())
    np.testing.assert_allclose(forced.stderr, reference.bse, rtol=1e-12)
    np.testing.assert_allclose(forced.residuals, reference.resid, atol=1e-9)


def test_the_backtests_growing_factor_hands_an_ill_conditioned_window_to_the_careful_fit():
    """The backtest's factor grown across origins keeps a window whose condition number
    (numpy's, of the window's unit-scaled design) leaves its predictions at least
    PREDICTION_DIGITS digits (−log₁₀ ε·κ), and hands the others to the careful fit (None)."""
    from pipeline.models.ols import PREDICTION_DIGITS, expanding_ols_predictions

    def run(design, target):
        months = np.arange(len(target))
        origins = [len(target) - 12, len(target) - 6]
        return expanding_ols_predictions(design, target, months, origins, [design[-2:], design[-1:]])

    def digits(design, rows):
        window = design[:rows] / np.linalg.norm(design[:rows], axis=0)
        return -math.log10(np.finfo(float).eps * np.linalg.cond(window))

    rng = np.random.default_rng(11)
    x = np.sort(rng.uniform(-8.8, -3.1, 82))   # as in the degree-ten design above
    hard = np.column_stack([np.ones(len(x)), *power2(x, 10)])
    easy = np.column_stack([np.ones(len(x)), rng.normal(size=(len(x), 3))])
    target = rng.normal(size=len(x))
    assert digits(hard, 70) < PREDICTION_DIGITS and run(hard, target) is None
    assert digits(easy, 70) > PREDICTION_DIGITS
    found = run(easy, target)
    reference = sm.OLS(target[:71], easy[:71]).fit()   # the first origin's window: months 0..70
    np.testing.assert_allclose(found[0][0], reference.predict(easy[-2:]), rtol=1e-10)


@pytest.mark.parametrize("degree, low, high", [(10, -8.8, -3.1), (12, 10.0, 12.0), (14, 20.0, 22.0)])
def test_the_estimated_digits_track_the_true_ones_and_too_few_are_flagged(degree, low, high):
    """Polynomials of degree 10, 12 and 14 in x drawn uniformly on [low, high] (90 rows, numpy,
    seeded; a standard normal target): condition numbers from 6e9 to 4e15, so that the last
    ones lose columns to the rank check and leave the refinement short of full digits. The
    estimated digits of the refined fit are within one of the true digits against the exact
    rational solution on the kept columns, and the diagnostics flag a fit with fewer than 6."""
    from pipeline.models.inference import DIGITS_CHECK, FEWEST_DIGITS, diagnose

    rng = np.random.default_rng(3 + degree)
    x = np.sort(rng.uniform(low, high, 90))
    design = np.column_stack([np.ones(len(x)), *power2(x, degree)])
    target = rng.normal(size=len(x))
    fit = least_squares(design, target)
    kept = fit.kept
    reference, _ = exact_least_squares(design[:, kept], target)
    true_digits = min(lre(c, r) for c, r in zip(fit.coef[kept], reference))
    assert fit.precision.refined
    assert abs(fit.precision.digits - true_digits) <= 1.0
    finding = next(f for f in diagnose(fit, design)[0] if f.check == DIGITS_CHECK)
    assert finding.flagged == (fit.precision.digits < FEWEST_DIGITS)
    assert ("fewer than 6" in finding.reading) == finding.flagged
