"""Standard errors and residual diagnostics of pipeline.models.inference against statsmodels.

Reference data: the US macroeconomic data set shipped with statsmodels
(``statsmodels.datasets.macrodata``, 1959Q1–2009Q3, 203 quarters). The design:
inflation (``infl``) on an intercept, the quarterly log growth (×100) of real GDP
and of real consumption, the 3-month T-bill rate and the unemployment rate:
202 rows, 5 columns. Every reference value is computed by the statsmodels
function named beside it; everything is compared to a relative 1e-8.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.datasets import grunfeld, macrodata
from statsmodels.stats.diagnostic import acorr_ljungbox, het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson as sm_durbin_watson
from statsmodels.stats.stattools import jarque_bera as sm_jarque_bera

from pipeline.models import inference
from pipeline.models.ols import INTERCEPT, least_squares

RTOL = 1e-8
NAMES = [INTERCEPT, "realgdp_growth", "realcons_growth", "tbilrate", "unemp"]


def _macro_design() -> tuple[np.ndarray, np.ndarray]:
    data = macrodata.load_pandas().data            # statsmodels' own copy of the data set
    growth = 100 * np.log(data[["realgdp", "realcons"]]).diff()
    frame = pd.DataFrame({"realgdp_growth": growth["realgdp"], "realcons_growth": growth["realcons"],
                          "tbilrate": data["tbilrate"], "unemp": data["unemp"],
                          "infl": data["infl"]}).dropna()
    x = np.column_stack([np.ones(len(frame)), frame[NAMES[1:]].to_numpy(float)])
    return x, frame["infl"].to_numpy(float)


X, Y = _macro_design()
N = len(Y)
FIT = least_squares(X, Y, NAMES)
SM_OLS = sm.OLS(Y, X).fit()                                      # statsmodels OLS, nonrobust


def _close(actual, expected, rtol=RTOL):
    np.testing.assert_allclose(np.asarray(actual, float), np.asarray(expected, float), rtol=rtol, atol=0)


def test_the_design_is_the_one_described():
    assert X.shape == (202, 5)
    _close(FIT.coef, SM_OLS.params)                               # statsmodels OLS.fit().params


# ------------------------------------------------------------------ standard errors

def test_classical_standard_errors_equal_statsmodels():
    cov = inference.covariance(FIT, X, "classical")
    _close(cov, SM_OLS.cov_params())                              # statsmodels nonrobust cov_params()
    _close(np.sqrt(np.diag(cov)), SM_OLS.bse)                     # statsmodels .bse


def test_hc3_standard_errors_equal_statsmodels():
    cov = inference.covariance(FIT, X, "hc3")
    reference = SM_OLS.get_robustcov_results("HC3")               # statsmodels get_robustcov_results('HC3')
    _close(cov, reference.cov_params())
    _close(np.sqrt(np.diag(cov)), sm.OLS(Y, X).fit(cov_type="HC3").bse)   # fit(cov_type='HC3')


@pytest.mark.parametrize("n", [1, 10, 50, 99, 100, 101, 202, 500, 1000, 12345])
def test_the_default_lag_is_newey_west_1994(n):
    # Newey & West (1994): floor(4·(n/100)^(2/9)).
    assert inference.newey_west_lags(n) == int(np.floor(4 * (n / 100) ** (2 / 9)))


def test_hac_with_the_default_lag_equals_statsmodels():
    lag = int(np.floor(4 * (N / 100) ** (2 / 9)))                 # Newey & West (1994): 4 for n = 202
    assert lag == 4
    cov = inference.covariance(FIT, X, "hac")
    # statsmodels cov_type='HAC' (Bartlett kernel), maxlags=4, no small-sample correction.
    reference = sm.OLS(Y, X).fit(cov_type="HAC", cov_kwds={"maxlags": lag, "use_correction": False})
    _close(cov, reference.cov_params())
    _close(np.sqrt(np.diag(cov)), reference.bse)


@pytest.mark.parametrize("lag", [1, 8, 20])
def test_hac_with_a_given_lag_equals_statsmodels(lag):
    cov = inference.covariance(FIT, X, "hac", lags=lag)
    reference = sm.OLS(Y, X).fit(cov_type="HAC", cov_kwds={"maxlags": lag})   # default: no correction
    _close(cov, reference.cov_params())


def test_hac_with_rows_out_of_time_order_uses_the_time_order():
    # The same rows shuffled, with their time order given: the HAC sum follows the order.
    rng = np.random.default_rng(6)
    shuffle = rng.permutation(N)
    fit = least_squares(X[shuffle], Y[shuffle], NAMES)
    cov = inference.covariance(fit, X[shuffle], "hac", lags=4, order=np.arange(N)[shuffle])
    reference = sm.OLS(Y, X).fit(cov_type="HAC", cov_kwds={"maxlags": 4})    # statsmodels, in time order
    _close(cov, reference.cov_params(), rtol=1e-7)


def test_an_unknown_kind_of_standard_error_is_refused():
    with pytest.raises(ValueError, match="unknown kind"):
        inference.covariance(FIT, X, "hc1")


# ------------------------------------------------------------------ coefficient table

@pytest.mark.parametrize("kind, statsmodels_fit", [
    ("classical", {}),
    ("hc3", {"cov_type": "HC3"}),
    ("hac", {"cov_type": "HAC", "cov_kwds": {"maxlags": 4}}),
])
def test_t_p_and_intervals_equal_statsmodels_with_the_same_covariance(kind, statsmodels_fit):
    table = inference.coefficient_table(FIT, inference.covariance(FIT, X, kind))
    # statsmodels with use_t=True: t(df_resid) p-values and intervals, as castline uses.
    reference = sm.OLS(Y, X).fit(use_t=True, **statsmodels_fit)
    assert list(table["term"]) == NAMES
    _close(table["estimate"], reference.params)
    _close(table["std_error"], reference.bse)
    _close(table["t"], reference.tvalues)                         # statsmodels .tvalues
    _close(table["p_value"], reference.pvalues)                   # statsmodels .pvalues
    interval = reference.conf_int(alpha=0.05)                     # statsmodels .conf_int(0.05)
    _close(table["low_95"], interval[:, 0])
    _close(table["high_95"], interval[:, 1])


def test_the_table_at_another_level_names_its_columns_by_the_level():
    table = inference.coefficient_table(FIT, inference.covariance(FIT, X), level=0.8)
    interval = SM_OLS.conf_int(alpha=0.2)                         # statsmodels .conf_int(0.2)
    _close(table["low_80"], interval[:, 0])
    _close(table["high_80"], interval[:, 1])


# ------------------------------------------------------------------ diagnostics

def test_durbin_watson_equals_statsmodels():
    value = inference.durbin_watson([FIT.residuals])
    _close(value, sm_durbin_watson(SM_OLS.resid))                 # statsmodels.stats.stattools.durbin_watson


def test_ljung_box_at_12_lags_equals_statsmodels():
    q, p = inference.ljung_box(FIT.residuals, 12)
    reference = acorr_ljungbox(SM_OLS.resid, lags=[12])           # statsmodels.stats.diagnostic.acorr_ljungbox
    _close(q, reference["lb_stat"].iloc[0])
    _close(p, reference["lb_pvalue"].iloc[0])


def test_breusch_pagan_equals_statsmodels():
    lm, p = inference.breusch_pagan(FIT.residuals, X)
    # statsmodels het_breuschpagan, default robust=True (Koenker's n·R² form).
    reference_lm, reference_p, _, _ = het_breuschpagan(SM_OLS.resid, X)
    _close(lm, reference_lm)
    _close(p, reference_p)


def test_jarque_bera_equals_statsmodels():
    statistic, p = inference.jarque_bera(FIT.residuals)
    reference, reference_p, _, _ = sm_jarque_bera(SM_OLS.resid)   # statsmodels.stats.stattools.jarque_bera
    _close(statistic, reference)
    _close(p, reference_p)


def test_variance_inflation_equals_statsmodels():
    table = inference.variance_inflation(X, NAMES)
    assert list(table["term"]) == NAMES[1:]
    assert list(table["df"]) == [1, 1, 1, 1]
    # statsmodels.stats.outliers_influence.variance_inflation_factor on the design with its constant.
    reference = [variance_inflation_factor(X, j) for j in range(1, X.shape[1])]
    _close(table["vif"], reference)
    _close(table["vif_adjusted"], np.sqrt(reference))    # GVIF^(1/(2·1)) = √VIF


def test_variance_inflation_without_an_intercept_equals_statsmodels():
    # statsmodels' variance_inflation_factor with standardize=False regresses a column on the
    # others as given: without a constant among them, on the uncentred R² (the design's
    # cosines, not its correlations), as a fit without an intercept is judged.
    table = inference.variance_inflation(X[:, 1:], NAMES[1:])
    _close(table["vif"], [variance_inflation_factor(X[:, 1:], j, standardize=False)
                          for j in range(X.shape[1] - 1)])


def _grunfeld_design() -> tuple[np.ndarray, list[str], dict[str, str]]:
    """Grunfeld's investment data (statsmodels.datasets.grunfeld, 11 firms × 20 years): an
    intercept, firm value, capital stock, the year, and the firms one-hot (General Motors the
    reference)."""
    data = grunfeld.load_pandas().data
    firms = sorted(set(data["firm"]) - {"General Motors"})
    dummies = [(data["firm"] == firm).to_numpy(float) for firm in firms]
    x = np.column_stack([np.ones(len(data)), data["value"], data["capital"], data["year"], *dummies])
    names = [INTERCEPT, "value", "capital", "year", *[f"firm: {firm}" for firm in firms]]
    return x, names, {f"firm: {firm}": "firm" for firm in firms}


def _gvif_by_definition(x: np.ndarray, block: list[int]) -> float:
    """det(R11)·det(R22) / det(R) (Fox & Monette 1992, eq. 10), R from numpy's corrcoef."""
    r = np.corrcoef(x, rowvar=False)
    rest = [j for j in range(r.shape[0]) if j not in block]
    return float(np.linalg.det(r[np.ix_(block, block)]) * np.linalg.det(r[np.ix_(rest, rest)])
                 / np.linalg.det(r))


def test_generalised_vif_of_a_block_equals_its_definition():
    x, names, groups = _grunfeld_design()
    table = inference.variance_inflation(x, names, groups).set_index("term")
    assert list(table.index) == ["value", "capital", "year", "firm"]
    assert table.loc["firm", "df"] == 10 and table.loc["value", "df"] == 1
    slopes = x[:, 1:]
    firm = list(range(3, slopes.shape[1]))
    _close(table.loc["firm", "vif"], _gvif_by_definition(slopes, firm))
    _close(table.loc["firm", "vif_adjusted"], _gvif_by_definition(slopes, firm) ** (1 / 20))
    # Beside a block, a single column's GVIF is still its VIF (statsmodels, with the constant).
    _close(table.loc["value", "vif"], variance_inflation_factor(x, 1))
    _close(table.loc["year", "vif"], _gvif_by_definition(slopes, [2]))


def test_a_block_of_one_column_per_group_is_the_plain_vif():
    x, names, _ = _grunfeld_design()
    plain = inference.variance_inflation(x, names)
    _close(plain["vif"], [variance_inflation_factor(x, j) for j in range(1, x.shape[1])])


def test_the_largest_vif_holds_a_group_to_the_limit_by_gvif_per_df():
    # The Fourier block of one harmonic: sin and cos are uncorrelated over whole years, and a
    # column that is nearly their sum is largely explained by them.
    month = np.arange(120) % 12 + 1
    rng = np.random.default_rng(3)
    sin, cos = np.sin(2 * np.pi * month / 12), np.cos(2 * np.pi * month / 12)
    near = sin + cos + rng.normal(0, 0.05, 120)
    x = np.column_stack([np.ones(120), sin, cos, near, rng.normal(size=120)])
    y = x @ [1.0, 2.0, -1.0, 0.5, 0.3] + rng.normal(size=120)
    names = [INTERCEPT, "sin(2π·month/12)", "cos(2π·month/12)", "near", "noise"]
    groups = {"sin(2π·month/12)": "month of year", "cos(2π·month/12)": "month of year"}
    findings, vif, _ = inference.diagnose(least_squares(x, y, names), x, term_groups=groups)
    largest = {f.check: f for f in findings}["largest VIF"]
    _close(largest.value, float((vif["vif"] ** (1 / vif["df"])).max()))
    assert largest.flagged and "month of year (2 terms)" in largest.reading and "near" in largest.reading
    assert "noise" not in largest.reading


def test_cooks_distance_equals_statsmodels():
    reference = OLSInfluence(SM_OLS).cooks_distance[0]           # statsmodels OLSInfluence.cooks_distance
    _close(inference.cooks_distance(FIT), reference)


def test_information_criteria_and_the_f_test_equal_statsmodels():
    loglik, aic, bic = inference.information_criteria(FIT)
    _close(loglik, SM_OLS.llf)                                    # statsmodels .llf
    _close(aic, SM_OLS.aic)                                       # statsmodels .aic
    _close(bic, SM_OLS.bic)                                       # statsmodels .bic
    f_value, f_p = inference.f_test(FIT)
    _close(f_value, SM_OLS.fvalue)                                # statsmodels .fvalue
    _close(f_p, SM_OLS.f_pvalue)                                  # statsmodels .f_pvalue
    _close([FIT.r2, FIT.adj_r2], [SM_OLS.rsquared, SM_OLS.rsquared_adj])


def test_diagnose_reports_the_same_numbers():
    findings, vif, influential = inference.diagnose(FIT, X)
    by_check = {f.check: f for f in findings}
    _close(by_check["Durbin–Watson"].value, sm_durbin_watson(SM_OLS.resid))
    _close(by_check["Ljung–Box (12 lags)"].value, acorr_ljungbox(SM_OLS.resid, lags=[12])["lb_stat"].iloc[0])
    _close(by_check["Breusch–Pagan"].value, het_breuschpagan(SM_OLS.resid, X)[0])
    _close(by_check["Jarque–Bera"].value, sm_jarque_bera(SM_OLS.resid)[0])
    _close(by_check["AIC"].value, SM_OLS.aic)
    _close(by_check["BIC"].value, SM_OLS.bic)
    _close(by_check["F test (all slopes zero)"].value, SM_OLS.fvalue)
    cooks = OLSInfluence(SM_OLS).cooks_distance[0]
    _close(by_check["Cook's distance"].value, cooks.max())
    assert by_check["Cook's distance"].flagged == bool((cooks > 4 / N).any())
    _close(influential["cooks_distance"], np.sort(cooks)[::-1][:5])
    assert list(influential["row"]) == list(np.argsort(-cooks)[:5])
    _close(vif["vif"], [variance_inflation_factor(X, j) for j in range(1, X.shape[1])])
    # Inflation is persistent quarter to quarter: the residuals are autocorrelated.
    assert by_check["Ljung–Box (12 lags)"].flagged
    table = inference.findings_table(findings)
    assert list(table.columns) == ["check", "value", "p_value", "threshold", "flagged", "reading"]
    assert table["reading"].map(lambda text: isinstance(text, str) and "\n" not in text and text).all()


# ------------------------------------------------------------------ HAC on a panel

def _panel() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Two series (the macro design's first and second halves, as if two regions), rows
    interleaved period by period the way the pipeline orders them."""
    half = N // 2
    first, second = np.arange(half), np.arange(half, 2 * half)
    rows = np.column_stack([first, second]).ravel()               # period-major: a1 b1 a2 b2 ...
    groups = np.tile([0, 1], half)
    periods = np.repeat(np.arange(half), 2)
    return X[rows], Y[rows], groups, periods


def test_hac_on_two_series_equals_statsmodels_hac_panel():
    # statsmodels' cov_type='hac-panel' (sandwich_covariance.cov_nw_panel / S_nw_panel) sums the
    # Bartlett-weighted autocovariances of x·e within each group, on rows stacked by group: the
    # same definition, once use_correction=False drops its nobs/(nobs−k) factor.
    x, y, groups, periods = _panel()
    fit = least_squares(x, y, NAMES)
    for lag in (inference.newey_west_lags(len(y)), 3):
        cov = inference.covariance(fit, x, "hac", lags=lag, groups=groups, order=periods)
        stacked = np.lexsort((periods, groups))                   # statsmodels wants rows stacked by group
        reference = sm.OLS(y[stacked], x[stacked]).fit(
            cov_type="hac-panel",
            cov_kwds={"groups": groups[stacked], "maxlags": lag, "use_correction": False})
        _close(cov, reference.cov_params())


def test_hac_on_two_series_equals_the_newey_west_formula():
    # Direct from Newey & West (1987): bread · (Σ_g Σ_t s_t s_t' + Σ_l w_l Σ_g Σ_t (s_t s_{t−l}' + s_{t−l} s_t'))
    # · bread, with s_t = x_t e_t, w_l = 1 − l/(L+1), and t, t−l in the same series.
    x, y, groups, periods = _panel()
    fit = least_squares(x, y, NAMES)
    lag = 3
    bread = np.linalg.inv(x.T @ x)
    scores = x * fit.residuals[:, None]
    meat = scores.T @ scores
    for g in (0, 1):
        own = scores[groups == g][np.argsort(periods[groups == g])]
        for lag_l in range(1, lag + 1):
            gamma = own[lag_l:].T @ own[:-lag_l]
            meat += (1 - lag_l / (lag + 1)) * (gamma + gamma.T)
    expected = bread @ meat @ bread
    cov = inference.covariance(fit, x, "hac", lags=lag, groups=groups, order=periods)
    _close(cov, expected, rtol=1e-7)                              # np.linalg.inv of X'X: a little less exact
    # Summing across the boundary between the series as if one series gives another answer.
    pooled = inference.covariance(fit, x, "hac", lags=lag)
    assert not np.allclose(pooled, cov, rtol=1e-3)


def test_durbin_watson_with_two_series_differences_within_each_series_only():
    x, y, groups, periods = _panel()
    fit = least_squares(x, y, NAMES)
    runs = inference._ordered_residuals(fit.residuals, groups, periods)
    expected_numerator = sum(np.sum(np.diff(fit.residuals[groups == g]) ** 2) for g in (0, 1))
    _close(inference.durbin_watson(runs), expected_numerator / np.sum(fit.residuals ** 2))
    # Each run is one series in time order (rows were interleaved).
    _close(np.concatenate(runs), np.concatenate([fit.residuals[groups == g] for g in (0, 1)]))


# ------------------------------------------------------------------ a dropped column

def test_a_collinear_column_gets_nan_and_the_rest_match_statsmodels_without_it():
    doubled = np.column_stack([X, 2 * X[:, 1]])
    fit = least_squares(doubled, Y, NAMES + ["twice_gdp_growth"])
    assert [d.column for d in fit.dropped] == ["twice_gdp_growth"]
    for kind, statsmodels_fit in [("classical", {}), ("hc3", {"cov_type": "HC3"}),
                                  ("hac", {"cov_type": "HAC", "cov_kwds": {"maxlags": 4}})]:
        cov = inference.covariance(fit, doubled, kind)
        assert np.isnan(cov[-1]).all() and np.isnan(cov[:, -1]).all()
        _close(cov[:5, :5], sm.OLS(Y, X).fit(**statsmodels_fit).cov_params(), rtol=1e-7)
