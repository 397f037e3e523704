"""What a reviewer asks of a fitted OLS model: standard errors and residual diagnostics.

Standard errors come three ways: classical; heteroskedasticity-robust (HC3,
MacKinnon & White 1985); autocorrelation-robust (Newey & West 1987, Bartlett
weights, default lag floor(4·(n/100)^(2/9)) after Newey & West 1994). With
several series, the autocorrelation-robust sum runs within each series only.

Every diagnostic comes with a plain reading and a flag when it breaches its
usual threshold. The residual checks are computed on the residuals divided by an exact
power of two near their size (``unit_scale``), so a target of 1e145 or 1e-300 gives the
same values as one of 1, with no square overflowing or underflowing. When the fit is
exact (every residual zero, to rounding) or the target does not vary, a check that is
not defined there is NaN, and its reading says why.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.core.cadence import MONTH, Cadence
from pipeline.core.distributions import chi2_upper, f_upper, t_quantile, t_upper
from pipeline.core.scale import unit_scale
from pipeline.models.ols import (
    INTERCEPT,
    REFINE_ABOVE_CONDITION,
    REFINE_BELOW,
    LeastSquaresFit,
    least_squares,
)

ALPHA = 0.05


def newey_west_lags(n: int) -> int:
    """Return the default lag, floor(4·(n/100)^(2/9)) (Newey & West 1994)."""
    return int(math.floor(4 * (n / 100) ** (2 / 9)))


def _groups_in_time_order(groups, order) -> list[np.ndarray]:
    """Return the row positions of each group, in time order."""
    n = len(order)
    groups = np.zeros(n, int) if groups is None else pd.factorize(np.asarray(groups))[0]
    frame = pd.DataFrame({"g": groups, "t": np.asarray(order), "i": np.arange(n)})
    frame = frame.sort_values(["g", "t"], kind="stable")
    return [rows.to_numpy() for _, rows in frame.groupby("g", sort=False)["i"]]


def covariance(fit: LeastSquaresFit, matrix: np.ndarray, kind: str = "classical", *,
               lags: int | None = None, groups=None, order=None) -> np.ndarray:
    """Return the covariance of the kept coefficients (p×p; NaN for dropped columns)."""
    p = len(fit.coef)
    kept = fit.kept
    bread = fit.xtx_inverse[np.ix_(kept, kept)]
    x = np.asarray(matrix, float)[:, kept]
    e = fit.residuals
    if kind == "classical":
        inner_cov = bread * fit.resid_sd ** 2
    elif kind == "hc3":
        weight = (e / (1.0 - fit.leverage)) ** 2
        meat = (x * weight[:, None]).T @ x
        inner_cov = bread @ meat @ bread
    elif kind == "hac":
        lags = newey_west_lags(len(e)) if lags is None else lags
        scores = x * e[:, None]
        meat = scores.T @ scores
        for rows in _groups_in_time_order(groups, np.arange(len(e)) if order is None else order):
            block = scores[rows]
            for lag in range(1, min(lags, len(rows) - 1) + 1):
                weight = 1.0 - lag / (lags + 1)
                gamma = block[lag:].T @ block[:-lag]
                meat += weight * (gamma + gamma.T)
        inner_cov = bread @ meat @ bread
    else:
        raise ValueError(f"unknown kind of standard error {kind!r}")
    full = np.full((p, p), np.nan)
    full[np.ix_(kept, kept)] = inner_cov
    return full


def coefficient_table(fit: LeastSquaresFit, cov: np.ndarray, level: float = 0.95) -> pd.DataFrame:
    """Return estimate, standard error, t, p and the two-sided interval from a covariance."""
    stderr = np.sqrt(np.diag(cov))
    with np.errstate(divide="ignore", invalid="ignore"):
        t_values = fit.coef / stderr
    df = fit.df_resid
    p_values = 2 * t_upper(np.abs(t_values), df) if df > 0 else np.full(len(stderr), np.nan)
    multiplier = t_quantile(0.5 + level / 2, df) if df > 0 else np.nan
    percent = f"{level * 100:g}"
    return pd.DataFrame({
        "term": fit.names, "estimate": fit.coef, "std_error": stderr, "t": t_values,
        "p_value": p_values, f"low_{percent}": fit.coef - multiplier * stderr,
        f"high_{percent}": fit.coef + multiplier * stderr,
    })


def fit_coefficient_table(fit: LeastSquaresFit, matrix: np.ndarray, kind: str = "classical", *,
                          lags: int | None = None, groups=None, order=None, exact: bool = False,
                          level: float = 0.95) -> pd.DataFrame:
    """Return ``coefficient_table`` with the covariance of ``kind``, computed at the residuals'
    unit scale (the variances of a target of 1e-300 underflow, of 1e150 overflow) and the
    standard errors and bounds turned back to the target's. ``exact``: the fit is exact, so
    its standard errors are zero and no t-test applies (t and p NaN)."""
    size = unit_scale(fit.residuals)
    unit = fit.rescaled(1.0 / size)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        table = coefficient_table(unit, covariance(unit, matrix, kind, lags=lags, groups=groups,
                                                   order=order), level)
    percent = f"{level * 100:g}"
    table["estimate"] = fit.coef
    table["std_error"] = table["std_error"] * size
    table[f"low_{percent}"] = fit.coef - (unit.coef - table[f"low_{percent}"]) * size
    table[f"high_{percent}"] = fit.coef + (table[f"high_{percent}"] - unit.coef) * size
    return without_tests(table, level) if exact else table


def without_tests(table: pd.DataFrame, level: float = 0.95) -> pd.DataFrame:
    """Return a coefficient table of an exact fit: standard errors 0, t and p NaN, the interval
    the estimate itself."""
    percent = f"{level * 100:g}"
    table = table.copy()
    present = np.isfinite(table["estimate"].to_numpy(float))
    table["std_error"] = np.where(present, 0.0, np.nan)
    table["t"] = table["p_value"] = np.nan
    table[f"low_{percent}"] = table[f"high_{percent}"] = table["estimate"]
    return table


@dataclass(frozen=True)
class Finding:
    """One diagnostic: its value, p-value where it has one, threshold, flag and reading."""

    check: str
    value: float
    p_value: float
    threshold: str
    flagged: bool
    reading: str


def _ordered_residuals(residuals: np.ndarray, groups, order) -> list[np.ndarray]:
    positions = _groups_in_time_order(groups, np.arange(len(residuals)) if order is None else order)
    return [residuals[rows] for rows in positions]


def _unit(values) -> np.ndarray:
    """Return values divided by their unit scale (an exact power of two: see ``unit_scale``)."""
    values = np.asarray(values, float)
    return values / unit_scale(values)


def durbin_watson(residual_runs: list[np.ndarray]) -> float:
    """Return Σ(e_t − e_{t−1})² / Σe_t², differences taken within each series (NaN when every
    residual is zero)."""
    size = unit_scale(np.concatenate(residual_runs)) if residual_runs else 1.0
    runs = [np.asarray(run, float) / size for run in residual_runs]
    numerator = sum(float(np.sum(np.diff(run) ** 2)) for run in runs)
    denominator = sum(float(run @ run) for run in runs)
    return numerator / denominator if denominator else float("nan")


def ljung_box(residuals: np.ndarray, lags: int = 12) -> tuple[float, float]:
    """Return the Ljung–Box Q over lags 1..lags and its chi-squared p-value (Ljung & Box 1978);
    NaN when the residuals do not vary or are too few for a lag."""
    e = _unit(residuals)
    e = e - e.mean()
    n = len(e)
    lags = min(lags, n - 1)
    denominator = float(e @ e)
    if lags < 1 or not denominator > 0:
        return float("nan"), float("nan")
    q = 0.0
    for k in range(1, lags + 1):
        rho = float(e[k:] @ e[:-k]) / denominator
        q += rho ** 2 / (n - k)
    q *= n * (n + 2)
    return q, float(chi2_upper(q, lags))


def breusch_pagan(residuals: np.ndarray, matrix: np.ndarray, absorbed_series=None) -> tuple[float, float]:
    """Return the Breusch–Pagan LM statistic (n·R² of e² on the design) and its p-value;
    ``absorbed_series``: the rows' series, whose levels the design absorbed (and so does
    the auxiliary fit). NaN when the squared residuals do not vary."""
    squared = _unit(residuals) ** 2
    if absorbed_series is not None:
        from pipeline.models.absorbed import absorbed_least_squares
        auxiliary = absorbed_least_squares(matrix, squared, absorbed_series).slopes
    else:
        auxiliary = least_squares(matrix, squared, centered_r2=True)
    lm = len(residuals) * auxiliary.r2
    df = auxiliary.rank - 1
    if not np.isfinite(lm):
        return float("nan"), float("nan")
    return float(lm), float(chi2_upper(lm, df)) if df > 0 else float("nan")


def jarque_bera(residuals: np.ndarray) -> tuple[float, float]:
    """Return the Jarque–Bera statistic and its chi-squared(2) p-value (NaN when the residuals
    do not vary)."""
    e = _unit(residuals)
    e = e - e.mean()
    n = len(e)
    variance = float(e @ e) / n if n else 0.0
    if not variance > 0:
        return float("nan"), float("nan")
    skew = float(np.mean(e ** 3)) / variance ** 1.5
    kurtosis = float(np.mean(e ** 4)) / variance ** 2
    statistic = n / 6 * (skew ** 2 + (kurtosis - 3) ** 2 / 4)
    return statistic, float(chi2_upper(statistic, 2))


VIF_LIMIT = 10   # common practice; a group of terms is held to it by GVIF^(1/df)


def variance_inflation(matrix: np.ndarray, names: list[str],
                       groups: dict[str, str] | None = None) -> pd.DataFrame:
    """Return the VIF of each group of terms: the generalised VIF (Fox & Monette 1992).

    GVIF = det(R11)·det(R22) / det(R), R the correlation matrix of the columns other than
    the intercept (uncentred, cosines, without one), R11 the group's block and R22 the
    others'; for a single column it is the ordinary VIF, 1 / (1 − R²) of it regressed on the
    others. ``groups`` names each column's group (a column not named is a group of its
    own); ``vif_adjusted`` = GVIF^(1/(2·df)) compares groups of different sizes (√VIF for one
    column). One correlation matrix and log-determinants, no regression per column.
    """
    has_intercept = INTERCEPT in names
    columns = [j for j, name in enumerate(names) if name != INTERCEPT]
    labels = [(groups or {}).get(names[j], names[j]) for j in columns]
    order = list(dict.fromkeys(labels))
    x = np.asarray(matrix, float)[:, columns]
    if has_intercept:
        x = x - x.mean(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = x / np.sqrt(np.einsum("ij,ij->j", x, x))
    correlation = x.T @ x
    sign, whole = np.linalg.slogdet(correlation)
    rows = []
    for label in order:
        inside = np.array([lab == label for lab in labels])
        sign_in, log_in = np.linalg.slogdet(correlation[np.ix_(inside, inside)])
        sign_out, log_out = np.linalg.slogdet(correlation[np.ix_(~inside, ~inside)])
        gvif = (float(np.exp(log_in + log_out - whole)) if sign > 0 and sign_in > 0 and sign_out > 0
                else float("inf"))
        df = int(inside.sum())
        rows.append({"term": label, "df": df, "vif": gvif, "vif_adjusted": gvif ** (1 / (2 * df)),
                     "columns": "; ".join(names[j] for j, lab in zip(columns, labels) if lab == label)})
    return pd.DataFrame(rows, columns=["term", "df", "vif", "vif_adjusted", "columns"])


def cooks_distance(fit: LeastSquaresFit) -> np.ndarray:
    """Return Cook's distance per row: e²·h / (p·s²·(1 − h)²), scale free (NaN where it is not
    defined: every residual zero, or a row the fit passes through, h = 1)."""
    h = fit.leverage
    size = unit_scale(fit.residuals)
    e, s = fit.residuals / size, fit.resid_sd / size
    with np.errstate(divide="ignore", invalid="ignore"):
        distance = e ** 2 * h / (fit.rank * s ** 2 * (1 - h) ** 2)
    return np.where(np.isfinite(distance), distance, np.nan)


def information_criteria(fit: LeastSquaresFit) -> tuple[float, float, float]:
    """Return the Gaussian log-likelihood, AIC and BIC (k = number of coefficients fitted);
    NaN when every residual is zero (the likelihood has no maximum). The sum of squares is
    taken at the residuals' unit scale and its logarithm adds that scale's back, so a target
    of 1e145 or 1e-300 neither overflows nor underflows."""
    n = len(fit.residuals)
    size = unit_scale(fit.residuals)
    e = fit.residuals / size
    rss = float(e @ e)
    if n == 0 or not rss > 0 or not np.isfinite(rss):
        return float("nan"), float("nan"), float("nan")
    loglik = -n / 2 * (math.log(2 * math.pi) + 2 * math.log(size) + math.log(rss / n) + 1)
    k = fit.rank
    return loglik, -2 * loglik + 2 * k, -2 * loglik + k * math.log(n)


def f_test(fit: LeastSquaresFit) -> tuple[float, float]:
    """Return the F statistic that every slope is zero, and its p-value (NaN when R² is 1 or
    not defined)."""
    df_model = fit.rank - (1 if fit.centered_r2 else 0)
    if df_model <= 0 or fit.df_resid <= 0 or not np.isfinite(fit.r2) or fit.r2 >= 1:
        return float("nan"), float("nan")
    statistic = (fit.r2 / df_model) / ((1 - fit.r2) / fit.df_resid)
    return statistic, float(f_upper(statistic, df_model, fit.df_resid))


# Residuals no larger than this share of the target's largest value are rounding: the fit is
# exact (a constant target, or one that is a linear function of the drivers). A double
# carries about 16 digits, so this leaves some ten thousand roundings' room.
EXACT_SHARE = 1e-12
EXACT = "exact"   # every residual zero, to rounding
FLAT = "flat"     # and the target itself does not vary (or, without an intercept, is zero)
EXACT_READING = "the fit is exact (every residual is zero, to rounding): residual tests do not apply"
FLAT_READING = "the target does not vary in the history, so there is nothing for the drivers to explain"

EXACT_NOTE = ("the fit is exact (every residual is zero, to rounding): its standard errors are zero, "
              "and the residual tests, the F test, AIC and BIC do not apply")
FLAT_NOTE = ("the target does not vary in the history: the fit is exact, and R², the residual tests, "
             "the F test, AIC and BIC are not defined")


def fit_state(fit: LeastSquaresFit, target) -> str:
    """Return FLAT when the target does not vary (centred R²) or is zero throughout (uncentred),
    EXACT when every residual is zero beside the target's size, else ""."""
    y = np.asarray(target, float)
    y = y[np.isfinite(y)]
    largest = float(np.abs(y).max()) if y.size else 0.0
    spread = float(np.ptp(y)) if fit.centered_r2 and y.size else largest
    residual = np.abs(fit.residuals)
    if spread <= EXACT_SHARE * largest:
        return FLAT
    if not residual.size or float(residual.max()) <= EXACT_SHARE * largest:
        return EXACT
    return ""


def _undefined(check: str, threshold: str, reading: str) -> Finding:
    return Finding(check, float("nan"), float("nan"), threshold, False, reading)


def _fit_findings(fit: LeastSquaresFit, state: str) -> list[Finding]:
    """Return R², adjusted R², the F test, AIC and BIC."""
    r2_name = "R²" if fit.centered_r2 else "R² (uncentred: no intercept)"
    if state == FLAT:
        why = (FLAT_READING if fit.centered_r2 else
               "the target is zero throughout the history, so there is nothing for the drivers to explain")
        return [_undefined(r2_name, "", f"not defined: {why}"),
                _undefined("adjusted R²", "", f"not defined: {why}"),
                _undefined("F test (all slopes zero)", f"p < {ALPHA}", f"does not apply: {why}"),
                _undefined("AIC", "", f"not defined: {why} (the fit is exact)"),
                _undefined("BIC", "", f"not defined: {why} (the fit is exact)")]
    if state == EXACT:
        return [Finding(r2_name, 1.0, np.nan, "", False, "the fit is exact: the drivers account for all "
                        "of the target's variation in the history"),
                Finding("adjusted R²", 1.0 if fit.df_resid > 0 else np.nan, np.nan, "", False,
                        "the fit is exact"),
                _undefined("F test (all slopes zero)", f"p < {ALPHA}",
                           "the fit is exact: the F test does not apply"),
                _undefined("AIC", "", "the fit is exact: AIC is not defined (the likelihood has no maximum)"),
                _undefined("BIC", "", "the fit is exact: BIC is not defined (the likelihood has no maximum)")]
    r2_reading = (f"the drivers account for {fit.r2:.0%} of the target's variation in the history "
                  "(in sample)" if np.isfinite(fit.r2) else "not defined: too few rows beside the terms")
    findings = [Finding(r2_name, fit.r2, np.nan, "", False, r2_reading),
                Finding("adjusted R²", fit.adj_r2, np.nan, "", False, "R² less a charge for each term fitted")]
    f_value, f_p = f_test(fit)
    findings.append(Finding("F test (all slopes zero)", f_value, f_p, f"p < {ALPHA}",
                            bool(np.isfinite(f_p) and f_p >= ALPHA),
                            "the drivers together explain the target" if np.isfinite(f_p) and f_p < ALPHA
                            else "no evidence that the drivers together explain the target"
                            if np.isfinite(f_p) else "does not apply: no slope, or too few rows beside the terms"))
    _, aic, bic = information_criteria(fit)
    findings.append(Finding("AIC", aic, np.nan, "", False, "lower is better, compared across "
                            "models fitted to the same rows"))
    findings.append(Finding("BIC", bic, np.nan, "", False, "like AIC, with a heavier charge per term"))
    return findings


def _residual_findings(fit: LeastSquaresFit, x: np.ndarray, runs: list[np.ndarray],
                       absorbed_series, reading: str | None, cadence: Cadence = MONTH) -> list[Finding]:
    """Return the residual tests: Durbin–Watson, Ljung–Box, Breusch–Pagan, Jarque–Bera; each NaN
    with ``reading`` when the residuals give none (an exact fit)."""
    dw_limits, p_limit = "between 1.5 and 2.5 (common practice)", f"p ≥ {ALPHA}"
    names = ("Durbin–Watson", "Ljung–Box (12 lags)", "Breusch–Pagan", "Jarque–Bera")
    if reading is not None:
        return [_undefined(name, limit, reading) for name, limit in zip(names, (dw_limits, *[p_limit] * 3))]
    few = "not defined: the residuals do not vary, or too few rows"
    dw = durbin_watson(runs)
    dw_flag = bool(dw < 1.5 or dw > 2.5)
    findings = [Finding(names[0], dw, np.nan, dw_limits, dw_flag,
                        f"residuals look autocorrelated: one {cadence.name}'s error carries into the next, so "
                        "classical standard errors are too small" if dw_flag
                        else "no sign of first-order autocorrelation" if np.isfinite(dw) else few)]
    q, q_p = ljung_box(np.concatenate(runs), 12)
    findings.append(Finding(names[1], q, q_p, p_limit, bool(q_p < ALPHA),
                            "residuals are autocorrelated within a year: a lag or season term may "
                            "be missing" if q_p < ALPHA else f"no autocorrelation found up to 12 {cadence.plural}"
                            if np.isfinite(q_p) else few))
    bp, bp_p = breusch_pagan(fit.residuals, x[:, fit.kept], absorbed_series)
    findings.append(Finding(names[2], bp, bp_p, p_limit, bool(bp_p < ALPHA),
                            "the spread of the residuals changes with the drivers: prefer "
                            "robust (HC3) standard errors" if bp_p < ALPHA
                            else "no sign that the residual spread changes with the drivers"
                            if np.isfinite(bp_p) else few))
    jb, jb_p = jarque_bera(fit.residuals)
    findings.append(Finding(names[3], jb, jb_p, p_limit, bool(jb_p < ALPHA),
                            "residuals are not normal: analytic intervals may be off, check the "
                            "empirical ones" if jb_p < ALPHA else "residuals are consistent with normal"
                            if np.isfinite(jb_p) else few))
    return findings


def _design_findings(fit: LeastSquaresFit, x: np.ndarray, term_groups) -> tuple[list[Finding], pd.DataFrame]:
    """Return the condition number and the largest VIF (the design's alone), and the VIF table."""
    names = fit.names
    condition = fit.condition_number
    findings = [Finding("condition number (scaled design)", condition, np.nan,
                        "≤ 30 (Belsley, Kuh & Welsch 1980)", bool(condition > 30),
                        "the drivers are close to collinear: coefficients are unstable"
                        if condition > 30 else "the drivers are not close to collinear")]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        vif = variance_inflation(x[:, fit.kept], [names[i] for i in fit.kept], term_groups)
        per_df = vif["vif"] ** (1 / vif["df"])   # GVIF^(1/df): the VIF itself for a single column
    high = vif[per_df > VIF_LIMIT]
    findings.append(Finding("largest VIF", float(per_df.max()) if len(vif) else np.nan, np.nan,
                            f"≤ {VIF_LIMIT} (common practice; a group of terms by GVIF^(1/df), "
                            "Fox & Monette 1992)", bool(len(high)),
                            f"{', '.join(_group_words(row) for row in high.itertuples())} overlap with "
                            "the other drivers" if len(high)
                            else "no driver is largely explained by the others" if len(vif)
                            else "not defined: no driver besides the intercept"))
    if fit.precision is not None:
        findings.append(_digits_finding(fit.precision))
    return findings, vif


DIGITS_CHECK = "correct digits (estimated)"
FEWEST_DIGITS = 6   # below this, the coefficients as printed may be wrong


def _digits_finding(precision) -> Finding:
    """Return how the coefficients were solved and how many of their digits are estimated right."""
    few = precision.digits < FEWEST_DIGITS
    rule = (f" (a fit is refined when the condition number exceeds {REFINE_ABOVE_CONDITION:,.0f} "
            f"or the estimate falls below {REFINE_BELOW:g})")
    reading = precision.describe() + rule + (
        f"; fewer than {FEWEST_DIGITS}: the drivers are too close to collinear for the printed "
        "coefficients to be trusted; centre or rescale them, or lower a degree" if few else "")
    return Finding(DIGITS_CHECK, float(precision.digits), np.nan, "≥ 11 sought", bool(few), reading)


def _influence(fit: LeastSquaresFit, row_labels, influential_count: int,
               reading: str | None) -> tuple[Finding, pd.DataFrame]:
    """Return Cook's distance's finding and the most influential rows."""
    n = len(fit.residuals)
    cooks = cooks_distance(fit) if reading is None else np.full(n, np.nan)
    threshold = 4 / n
    labels = np.asarray(row_labels) if row_labels is not None else np.arange(n)
    top = np.argsort(-np.nan_to_num(cooks, nan=-1))[:influential_count]
    influential = pd.DataFrame({"row": labels[top], "cooks_distance": cooks[top],
                                "above_4_over_n": cooks[top] > threshold})
    above = int(np.sum(cooks > threshold))
    largest = float(np.nanmax(cooks)) if np.isfinite(cooks).any() else float("nan")
    words = (reading if reading is not None else "not defined: the residuals are all zero, or every "
             "row is fitted through" if not np.isfinite(largest)
             else f"{above} row(s) pull the fit strongly; see the most influential rows" if above
             else "no single row pulls the fit strongly")
    return Finding("Cook's distance", largest, np.nan, "≤ 4/n (common practice)", bool(above), words), influential


def diagnose(fit: LeastSquaresFit, matrix: np.ndarray, *, groups=None, order=None,
             row_labels=None, influential_count: int = 5,
             term_groups: dict[str, str] | None = None, absorbed_series=None, target=None,
             cadence: Cadence = MONTH) -> tuple[list[Finding], pd.DataFrame, pd.DataFrame]:
    """Return the diagnostics of a fit, the VIF table (per group of terms, ``term_groups``
    naming each column's group) and the most influential rows. ``absorbed_series``: the
    rows' series when the fit absorbed their levels (``matrix`` is then within series).
    ``target``: the values fitted (by default the fitted values plus the residuals), which
    tell an exact fit (``fit_state``); its residual checks are then NaN, each saying why."""
    x = np.asarray(matrix, float)
    if target is None:
        target = x[:, fit.kept] @ fit.coef[fit.kept] + fit.residuals
    state = fit_state(fit, target)
    reading = {FLAT: f"{FLAT_READING}; {EXACT_READING}", EXACT: EXACT_READING}.get(state)
    findings = _fit_findings(fit, state)
    findings += _residual_findings(fit, x, _ordered_residuals(fit.residuals, groups, order),
                                   absorbed_series, reading, cadence)
    design, vif = _design_findings(fit, x, term_groups)
    findings += design
    cooks, influential = _influence(fit, row_labels, influential_count, reading)
    findings.append(cooks)
    return findings, vif, influential


def _group_words(row) -> str:
    return row.term if row.df == 1 else f"{row.term} ({row.df} terms)"


def findings_table(findings: list[Finding]) -> pd.DataFrame:
    """Return the findings as a table."""
    return pd.DataFrame([vars(f) for f in findings],
                        columns=["check", "value", "p_value", "threshold", "flagged", "reading"])
