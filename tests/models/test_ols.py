"""Numerical checks of castline's own OLS path against outside references.

Every reference value below has its source named beside it. The fits all go
through the code the pipeline uses: ``NumericTerms`` / ``Design`` from
``pipeline.stages.features`` and ``OLSModel`` from ``pipeline.models.ols``.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from conftest import TEST_DATA
from sklearn.datasets import load_diabetes
from sklearn.linear_model import LinearRegression
from statsmodels.datasets import stackloss

from pipeline.core.design import Design
from pipeline.features.numeric import NumericTerms
from pipeline.models.ols import INTERCEPT, Collinearity, OLSModel

NIST_DIR = TEST_DATA / "nist_strd"
NIST_CERTIFIED = json.loads((NIST_DIR / "certified.json").read_text())  # values stay strings
NIST_DATASETS = ["norris", "pontius", "noint1", "noint2", "longley",
                 "wampler1", "wampler2", "wampler3"]

MIN_LRE = 9.0        # significant digits asked of every certified non-zero value
MIN_COEF_LRE = 11.0  # and of every certified coefficient
ZERO_ABS_TOL = 1e-9  # absolute error allowed where the certified value is exactly 0


def _design(matrix: np.ndarray, names: list[str]) -> Design:
    matrix = np.asarray(matrix, dtype=float)
    return Design(matrix=matrix, names=list(names), series=np.zeros(len(matrix)))


def _fit(matrix: np.ndarray, names: list[str], y: np.ndarray, intercept: bool = True) -> OLSModel:
    return OLSModel(fit_intercept=intercept).fit(_design(matrix, names), np.asarray(y, dtype=float))


# --------------------------------------------------------------------------------------------
# NIST/ITL Statistical Reference Datasets (StRD), Linear Least Squares Regression.
# Data and certified values: tests/data/nist_strd/ (see its README.md).
# --------------------------------------------------------------------------------------------

def _lre(computed: float, certified: str) -> float:
    """Log relative error, capped at 15 (NIST StRD convention); certified is the decimal string."""
    reference = float(certified)
    error = abs(float(computed) - reference)
    if error == 0:
        return 15.0
    if reference == 0:
        return min(15.0, -math.log10(error))
    return min(15.0, -math.log10(error / abs(reference)))


def _nist_fit(name: str) -> OLSModel:
    certified = NIST_CERTIFIED[name]
    frame = pd.read_csv(NIST_DIR / f"{name}.csv")
    if certified["degree"] is None:  # longley: x1..x6 as they are
        columns = [column for column in frame.columns if column != "y"]
        design = _design(frame[columns].to_numpy(float), columns)
    else:                            # polynomial in x up to the certified degree
        terms = NumericTerms("x", certified["degree"]).fit(frame)
        design = _design(terms.transform(frame), terms.get_feature_names_out())
    model = OLSModel(fit_intercept=certified["intercept"])
    return model.fit(design, frame["y"].to_numpy(float))


def _nist_checks(name: str, fit) -> list[tuple[str, float, str]]:
    certified = NIST_CERTIFIED[name]
    checks = [(f"coef[{term}]", value, cert)
              for term, value, cert in zip(fit.names, fit.coef, certified["coef"], strict=True)]
    checks += [(f"se[{term}]", value, cert)
               for term, value, cert in zip(fit.names, fit.stderr, certified["se"], strict=True)]
    checks += [("resid_sd", fit.resid_sd, certified["rsd"]), ("r2", fit.r2, certified["r2"])]
    return checks


@pytest.mark.parametrize("name", NIST_DATASETS)
def test_nist_strd_certified_values(name):
    """NIST/ITL Statistical Reference Datasets (StRD), Linear Least Squares Regression:
    every certified estimate is met to at least 11 significant digits (LRE ≥ 11), every
    standard deviation of the estimate, the residual SD and R² to at least 9 (LRE ≥ 9), or
    within 1e-9 where certified 0."""
    certified = NIST_CERTIFIED[name]
    fit = _nist_fit(name).fit_
    expected_names = ([INTERCEPT] if certified["intercept"] else []) + (
        [f"x{i}" for i in range(1, 7)] if certified["degree"] is None
        else ["x"] + [f"x^{p}" for p in range(2, certified["degree"] + 1)])
    assert fit.names == expected_names
    assert fit.dropped == []
    assert fit.centered_r2 is certified["intercept"]  # noint1/noint2: uncentred R²

    failures = []
    for label, computed, cert in _nist_checks(name, fit):
        if float(cert) == 0:
            if not abs(computed - float(cert)) < ZERO_ABS_TOL:
                failures.append(f"{label}: computed {computed!r}, certified {cert} (abs error)")
        elif _lre(computed, cert) < (MIN_COEF_LRE if label.startswith("coef") else MIN_LRE):
            failures.append(f"{label}: computed {computed!r}, certified {cert}, "
                            f"LRE {_lre(computed, cert):.2f}")
    assert not failures, f"{name}: " + "; ".join(failures)


# --------------------------------------------------------------------------------------------
# Stack-loss data (statsmodels.datasets.stackloss).
# Printed coefficients: Brownlee, K. A. (1965), Statistical Theory and Methodology in
# Science and Engineering, 2nd ed., Wiley.
# --------------------------------------------------------------------------------------------

BROWNLEE_STACKLOSS = {  # Brownlee (1965), printed to 4 decimals
    INTERCEPT: -39.9197, "AIRFLOW": 0.7156, "WATERTEMP": 1.2953, "ACIDCONC": -0.1521,
}


def test_stackloss_matches_brownlee_and_statsmodels():
    data = stackloss.load_pandas()
    columns = list(data.exog.columns)
    assert columns == ["AIRFLOW", "WATERTEMP", "ACIDCONC"]
    x = data.exog.to_numpy(float)
    y = data.endog.to_numpy(float)
    fit = _fit(x, columns, y).fit_

    # Brownlee (1965): each estimate rounds to the printed 4-decimal figure.
    printed = np.array([BROWNLEE_STACKLOSS[name] for name in fit.names])
    np.testing.assert_allclose(fit.coef, printed, rtol=0, atol=5e-5)

    # Reference library: statsmodels OLS on the same data.
    reference = sm.OLS(y, sm.add_constant(x)).fit()
    np.testing.assert_allclose(fit.coef, reference.params, rtol=1e-10, atol=0)
    np.testing.assert_allclose(fit.stderr, reference.bse, rtol=1e-10, atol=0)


# --------------------------------------------------------------------------------------------
# Diabetes data (sklearn.datasets.load_diabetes, default scaled=True: 442 patients, 10 drivers).
# Printed OLS coefficients: Efron, Hastie, Johnstone & Tibshirani (2004), "Least Angle
# Regression", Annals of Statistics 32(2), Table 1 (as cited; the full least-squares fit on
# the standardised data). The values below are FROM MEMORY (rounded to 0.1), so they are
# checked only to ±0.1; the tight check is against scikit-learn.
# --------------------------------------------------------------------------------------------

EFRON_2004_DIABETES_FROM_MEMORY = [  # Efron et al. (2004), from memory, ±0.1
    -10.0, -239.8, 519.8, 324.4, -792.2, 476.7, 101.0, 177.1, 751.3, 67.6,
]


def test_diabetes_matches_efron_2004_and_sklearn():
    data = load_diabetes()
    x, y = data.data, data.target
    assert x.shape == (442, 10)
    fit = _fit(x, list(data.feature_names), y).fit_
    slopes = fit.coef[1:]

    # Efron et al. (2004), from memory: to ±0.1.
    np.testing.assert_allclose(slopes, EFRON_2004_DIABETES_FROM_MEMORY, rtol=0, atol=0.1)

    # Reference library: scikit-learn LinearRegression.
    reference = LinearRegression().fit(x, y)
    np.testing.assert_allclose(slopes, reference.coef_, rtol=1e-9, atol=0)
    np.testing.assert_allclose(fit.coef[0], reference.intercept_, rtol=1e-9, atol=0)


# --------------------------------------------------------------------------------------------
# Random designs against statsmodels OLS (reference library).
# --------------------------------------------------------------------------------------------

def _random_problem(seed: int, n: int = 80, p: int = 4):
    rng = np.random.default_rng(seed)
    x = rng.normal(loc=rng.uniform(-5, 5, p), scale=rng.uniform(0.5, 3, p), size=(n, p))
    beta = rng.choice([-1, 1], p) * rng.uniform(0.5, 3, p)
    y = 4.0 + x @ beta + rng.normal(scale=1.5, size=n)
    return x, y, [f"d{i}" for i in range(p)]


@pytest.mark.parametrize("intercept", [True, False], ids=["intercept", "no-intercept"])
@pytest.mark.parametrize("seed", [1, 2, 3, 4])
def test_random_designs_match_statsmodels(seed, intercept):
    x, y, names = _random_problem(seed, n=60 + 10 * seed, p=2 + seed)
    fit = _fit(x, names, y, intercept=intercept).fit_

    # Reference library: statsmodels OLS; without a constant its rsquared is the uncentred one.
    exog = sm.add_constant(x) if intercept else x
    reference = sm.OLS(y, exog).fit()
    assert fit.df_resid == reference.df_resid
    np.testing.assert_allclose(fit.coef, reference.params, rtol=1e-9, atol=0)
    np.testing.assert_allclose(fit.stderr, reference.bse, rtol=1e-9, atol=0)
    np.testing.assert_allclose(fit.r2, reference.rsquared, rtol=1e-9, atol=0)
    np.testing.assert_allclose(fit.adj_r2, reference.rsquared_adj, rtol=1e-9, atol=0)
    np.testing.assert_allclose(fit.resid_sd, np.sqrt(reference.scale), rtol=1e-9, atol=0)
    np.testing.assert_allclose(fit.residuals, reference.resid, rtol=1e-9, atol=1e-12 * np.abs(y).max())


# --------------------------------------------------------------------------------------------
# Common practice: textbook properties of any least-squares fit with an intercept.
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("seed", [11, 12, 13])
def test_common_practice_residuals_sum_to_zero_and_are_orthogonal(seed):
    """Common practice: with an intercept the residuals sum to ~0 and are orthogonal
    to every driver column."""
    x, y, names = _random_problem(seed)
    fit = _fit(x, names, y).fit_
    e = fit.residuals
    # Cosine of the angle between the residuals and each column (the ones column first):
    # exactly 0 in exact arithmetic, about 1e-15 in float64.
    for label, column in [("sum", np.ones(len(y)))] + list(zip(names, x.T)):
        cosine = (column @ e) / (np.linalg.norm(column) * np.linalg.norm(e))
        assert abs(cosine) <= 1e-12, label


@pytest.mark.parametrize("seed", [21, 22, 23])
def test_common_practice_fit_passes_through_point_of_means(seed):
    """Common practice: the fitted plane with an intercept passes through (mean x, mean y)."""
    x, y, names = _random_problem(seed)
    model = _fit(x, names, y)
    at_means = model.predict(_design(x.mean(axis=0, keepdims=True), names))
    np.testing.assert_allclose(at_means[0], y.mean(), rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("intercept", [True, False], ids=["intercept", "no-intercept"])
@pytest.mark.parametrize("seed", [31, 32, 33])
def test_common_practice_adding_a_driver_never_lowers_r2(seed, intercept):
    """Common practice: in-sample R² never falls as drivers are added (nested models),
    even when the new driver is pure noise."""
    rng = np.random.default_rng(seed)
    n = 40
    signal = rng.normal(size=(n, 2))
    noise = rng.normal(size=(n, 4))  # drivers unrelated to y
    x = np.column_stack([signal, noise])
    y = 1.0 + signal @ np.array([0.8, -0.4]) + rng.normal(size=n)
    names = [f"d{i}" for i in range(x.shape[1])]
    r2 = [_fit(x[:, :k], names[:k], y, intercept=intercept).fit_.r2 for k in range(1, x.shape[1] + 1)]
    assert all(later >= earlier - 1e-12 for earlier, later in zip(r2, r2[1:])), r2


# --------------------------------------------------------------------------------------------
# Rank deficiency: dropped and named columns; predictions against statsmodels' pinv fit.
# --------------------------------------------------------------------------------------------

def _collinear_problem(seed: int = 41, n: int = 50):
    rng = np.random.default_rng(seed)
    a, b, d = rng.normal(size=(3, n))
    x = np.column_stack([a, b, a + 2 * b, np.zeros(n), d])
    y = 1.0 + a - b + 0.5 * d + rng.normal(scale=0.3, size=n)
    return x, y, ["a", "b", "c", "zero", "d"]


@pytest.mark.filterwarnings("ignore:The design matrix is rank-deficient")
def test_rank_deficient_design_drops_and_names_columns():
    x, y, names = _collinear_problem()
    model = _fit(x, names, y)
    fit = model.fit_
    assert fit.dropped == [Collinearity("c", ["a", "b"]), Collinearity("zero", [])]
    assert fit.rank == 4 and fit.df_resid == len(y) - 4
    by_name = dict(zip(fit.names, fit.coef))
    assert np.isnan(by_name["c"]) and np.isnan(by_name["zero"])
    assert all(np.isfinite(by_name[kept]) for kept in [INTERCEPT, "a", "b", "d"])  # earlier ones kept
    assert "linear combination of 'a', 'b'" in fit.dropped[0].describe()

    # Reference library: statsmodels OLS, default method="pinv" (minimum-norm solution).
    # Fitted values of a rank-deficient fit are unique, so they must agree.
    reference = sm.OLS(y, sm.add_constant(x)).fit()
    np.testing.assert_allclose(model.predict(_design(x, names)), reference.fittedvalues, rtol=1e-9)
    np.testing.assert_allclose(fit.r2, reference.rsquared, rtol=1e-9)
    assert fit.df_resid == reference.df_resid

    # New rows obeying the same relation (c = a + 2b, zero = 0): predictions still unique.
    rng = np.random.default_rng(42)
    a, b, d = rng.normal(size=(3, 7))
    new = np.column_stack([a, b, a + 2 * b, np.zeros(7), d])
    np.testing.assert_allclose(model.predict(_design(new, names)),
                               reference.predict(sm.add_constant(new, has_constant="add")), rtol=1e-9)


@pytest.mark.filterwarnings("ignore:The design matrix is rank-deficient")
def test_a_per_series_constant_beside_the_series_dummies_is_dropped_however_the_rounding_falls():
    # A per-series constant (a target-mean encoding, say: about 7.5 per series) beside an
    # intercept and the dummies of two of three series: 'c' = (enc − l_a − (l_b − l_a)·b) /
    # (l_c − l_a), an exact combination. For this seed the unpivoted pass's rounding leaves
    # c's part outside the earlier columns just above the rank tolerance (about 5e-14 with
    # unit columns) while the pivoted pass finds the rank 4: the column must still be dropped,
    # not kept with coefficients of 1e14 and a standard error of NaN.
    rng = np.random.default_rng(7)
    n = 60
    groups = rng.integers(0, 3, n)
    dummies = np.eye(3)[groups]
    level = rng.normal(7.8, 0.3, 3)
    x = np.column_stack([rng.normal(size=n), level[groups], dummies[:, 1], dummies[:, 2]])
    y = 1 + 0.5 * x[:, 0] + dummies @ np.array([0.0, 0.3, -0.2]) + rng.normal(0, 0.1, n)
    names = ["x", "enc", "b", "c"]
    model = _fit(x, names, y)
    assert model.fit_.dropped == [Collinearity("c", [INTERCEPT, "enc", "b"])]
    assert model.fit_.rank == 4 and model.fit_.condition_number < 1e4
    # Reference library: statsmodels OLS, default method="pinv"; fitted values and the
    # standard errors of new observations are unique, so they must agree.
    reference = sm.OLS(y, sm.add_constant(x)).fit()
    frame = reference.get_prediction(sm.add_constant(x)).summary_frame(alpha=0.05)
    np.testing.assert_allclose(model.predict(_design(x, names)), frame["mean"], rtol=1e-9)
    np.testing.assert_allclose(model.prediction_se(_design(x, names)), reference.get_prediction(
        sm.add_constant(x)).se_obs, rtol=1e-9)
    assert model.residual_df() == reference.df_resid


def test_constant_driver_with_intercept_is_dropped_as_combination_of_intercept():
    rng = np.random.default_rng(43)
    n = 30
    x = np.column_stack([rng.normal(size=n), np.full(n, 3.0), rng.normal(size=n)])
    y = 2.0 + x[:, 0] - x[:, 2] + rng.normal(size=n)
    fit = _fit(x, ["a", "flat", "b"], y).fit_
    assert fit.dropped == [Collinearity("flat", [INTERCEPT])]
    assert np.isnan(fit.coef[fit.names.index("flat")])
    reference = sm.OLS(y, sm.add_constant(x[:, [0, 2]])).fit()  # statsmodels, flat column left out
    np.testing.assert_allclose(np.delete(fit.coef, fit.names.index("flat")), reference.params, rtol=1e-9)


# --------------------------------------------------------------------------------------------
# Condition number (reference: numpy.linalg.cond of the column-unit-scaled design).
# --------------------------------------------------------------------------------------------

def _unit_scaled_cond(matrix: np.ndarray) -> float:
    return float(np.linalg.cond(matrix / np.linalg.norm(matrix, axis=0)))  # numpy reference


@pytest.mark.parametrize("intercept", [True, False], ids=["intercept", "no-intercept"])
@pytest.mark.parametrize("seed", [51, 52])
def test_condition_number_matches_numpy_random(seed, intercept):
    x, y, names = _random_problem(seed)
    fit = _fit(x, names, y, intercept=intercept).fit_
    full = np.column_stack([np.ones(len(x)), x]) if intercept else x
    np.testing.assert_allclose(fit.condition_number, _unit_scaled_cond(full), rtol=1e-9)


@pytest.mark.parametrize("name", ["longley", "wampler1", "pontius"])
def test_condition_number_matches_numpy_nist(name):
    """Designs from NIST/ITL StRD, Linear Least Squares Regression (ill-conditioned ones)."""
    model = _nist_fit(name)
    frame = pd.read_csv(NIST_DIR / f"{name}.csv")
    certified = NIST_CERTIFIED[name]
    if certified["degree"] is None:
        drivers = frame.drop(columns="y").to_numpy(float)
    else:
        drivers = np.column_stack([frame["x"].to_numpy(float) ** k
                                   for k in range(1, certified["degree"] + 1)])
    full = np.column_stack([np.ones(len(frame)), drivers])
    np.testing.assert_allclose(model.fit_.condition_number, _unit_scaled_cond(full), rtol=1e-9)


# --------------------------------------------------------------------------------------------
# coefficient_table() against statsmodels tvalues, pvalues, conf_int() (reference library).
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("intercept", [True, False], ids=["intercept", "no-intercept"])
def test_coefficient_table_matches_statsmodels(intercept):
    rng = np.random.default_rng(61)
    n = 45
    x = rng.normal(size=(n, 4))
    y = 1.0 + x @ np.array([0.6, -0.3, 0.15, 0.05]) + rng.normal(size=n)  # p from tiny to ~0.5
    model = _fit(x, ["a", "b", "c", "d"], y, intercept=intercept)
    table = model.coefficient_table()
    reference = sm.OLS(y, sm.add_constant(x) if intercept else x).fit()
    interval = reference.conf_int(alpha=0.05)
    assert list(table.columns) == ["term", "estimate", "std_error", "t", "p_value", "low_95", "high_95"]
    np.testing.assert_allclose(table["estimate"], reference.params, rtol=1e-8)
    np.testing.assert_allclose(table["std_error"], reference.bse, rtol=1e-8)
    np.testing.assert_allclose(table["t"], reference.tvalues, rtol=1e-8)
    np.testing.assert_allclose(table["p_value"], reference.pvalues, rtol=1e-8)
    np.testing.assert_allclose(table["low_95"], interval[:, 0], rtol=1e-8)
    np.testing.assert_allclose(table["high_95"], interval[:, 1], rtol=1e-8)
