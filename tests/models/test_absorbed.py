"""The fit with series levels absorbed (within transformation) against the fit with a
column per series, computed independently by statsmodels' OLS with ``C(series)``.

References:

* the Grunfeld (1958) investment data shipped with ``statsmodels.datasets.grunfeld``
  (11 firms × 20 years): invest on value and capital with a level per firm, the
  textbook fixed-effects example;
* a generated unbalanced panel (design stated in ``_panel``) with series-specific
  slopes as interaction columns beside the absorbed levels;
* statsmodels' ``OLS`` on the dummy-variable design (``C(series)``, treatment coding,
  first series the reference) for coefficients, standard errors, R², residual df,
  predictions, the standard error of a new observation (``get_prediction().se_obs``)
  and leverage (``OLSInfluence.hat_matrix_diag``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from statsmodels.datasets import grunfeld
from statsmodels.stats.outliers_influence import OLSInfluence

from pipeline.models.absorbed import LEVELS_REASON, absorbed_least_squares, within

TOLERANCE = 1e-8


def _grunfeld() -> pd.DataFrame:
    frame = grunfeld.load_pandas().data
    return frame.assign(firm=frame["firm"].astype(str)).reset_index(drop=True)


def _panel(seed: int = 21) -> pd.DataFrame:
    """Twelve series of 15 to 40 rows each (unbalanced); y = level + slope·x + 2·w + noise,
    each series with its own level (normal, SD 50) and slope on x (1 ± 0.5), noise SD 3."""
    rng = np.random.default_rng(seed)
    pieces = []
    for s in range(12):
        rows = int(rng.integers(15, 41))
        x = rng.normal(10, 3, rows)
        w = rng.normal(0, 1, rows)
        y = rng.normal(0, 50) + (1 + rng.uniform(-0.5, 0.5)) * x + 2 * w + rng.normal(0, 3, rows)
        pieces.append(pd.DataFrame({"series": f"s{s:02d}", "x": x, "w": w, "y": y}))
    return pd.concat(pieces, ignore_index=True)


def _close(ours, theirs, tolerance: float = TOLERANCE) -> None:
    ours, theirs = np.asarray(ours, float), np.asarray(theirs, float)
    scale = np.maximum(np.abs(theirs), 1.0)
    assert np.all(np.abs(ours - theirs) <= tolerance * scale), np.max(np.abs(ours - theirs) / scale)


def test_grunfeld_matches_statsmodels_with_a_column_per_firm():
    frame = _grunfeld()
    dense = smf.ols("invest ~ value + capital + C(firm)", data=frame).fit()
    fit = absorbed_least_squares(frame[["value", "capital"]].to_numpy(), frame["invest"].to_numpy(),
                                 frame["firm"].to_numpy(), ["value", "capital"])
    _close(fit.slopes.coef, dense.params[["value", "capital"]])
    _close(fit.slopes.stderr, dense.bse[["value", "capital"]])
    assert fit.df_resid == dense.df_resid == 220 - 2 - 11   # 11 firms × 20 years
    _close([fit.slopes.r2, fit.slopes.adj_r2, fit.resid_sd],
           [dense.rsquared, dense.rsquared_adj, np.sqrt(dense.scale)])
    _close(fit.slopes.residuals, dense.resid)
    levels = fit.level_table()
    firms = [f"C(firm)[T.{name}]" for name in fit.series_names[1:]]
    _close(levels["estimate"], dense.params[["Intercept", *firms]])
    _close(levels["std_error"], dense.bse[["Intercept", *firms]])
    _close(levels["p_value"], dense.pvalues[["Intercept", *firms]], 1e-7)


def test_grunfeld_predictions_and_their_standard_errors_match():
    frame = _grunfeld()
    dense = smf.ols("invest ~ value + capital + C(firm)", data=frame).fit()
    fit = absorbed_least_squares(frame[["value", "capital"]].to_numpy(), frame["invest"].to_numpy(),
                                 frame["firm"].to_numpy(), ["value", "capital"])
    rng = np.random.default_rng(3)
    new = frame.sample(25, random_state=4).assign(
        value=lambda f: f["value"] * rng.uniform(0.5, 1.5, 25),
        capital=lambda f: f["capital"] * rng.uniform(0.5, 1.5, 25))
    codes = pd.Index(fit.series_names).get_indexer(new["firm"])
    expected = dense.get_prediction(new)
    _close(fit.predict(new[["value", "capital"]].to_numpy(), codes), expected.predicted_mean)
    _close(fit.prediction_se(new[["value", "capital"]].to_numpy(), codes), expected.se_obs)
    _close(fit.slopes.leverage, OLSInfluence(dense).hat_matrix_diag)


def test_series_slopes_as_interaction_columns_on_an_unbalanced_panel():
    frame = _panel()
    dense = smf.ols("y ~ x + w + C(series) + x:C(series)", data=frame).fit()
    levels = sorted(frame["series"].unique())
    own = np.column_stack([frame["x"] * (frame["series"] == level) for level in levels[1:]])
    names = ["x", "w", *[f"x:C(series)[T.{level}]" for level in levels[1:]]]
    fit = absorbed_least_squares(np.column_stack([frame["x"], frame["w"], own]), frame["y"].to_numpy(),
                                 frame["series"].to_numpy(), names)
    _close(fit.slopes.coef, dense.params[names])
    _close(fit.slopes.stderr, dense.bse[names])
    assert fit.df_resid == dense.df_resid
    table = fit.level_table()
    _close(table["estimate"], dense.params[["Intercept", *[f"C(series)[T.{v}]" for v in levels[1:]]]])
    _close(table["std_error"], dense.bse[["Intercept", *[f"C(series)[T.{v}]" for v in levels[1:]]]])


@pytest.mark.parametrize("which", ["grunfeld", "panel"])
def test_hc3_standard_errors_of_the_levels_match_statsmodels(which):
    # statsmodels' fit(cov_type="HC3") on the design with a column per series: the levels'
    # sandwich, computed from sums by series, equals the full HC3 covariance's diagonal.
    if which == "grunfeld":
        frame, y, columns, key = _grunfeld(), "invest", ["value", "capital"], "firm"
    else:
        frame, y, columns, key = _panel(), "y", ["x", "w"], "series"
    dense = smf.ols(f"{y} ~ {' + '.join(columns)} + C({key})", data=frame).fit(cov_type="HC3")
    fit = absorbed_least_squares(frame[columns].to_numpy(), frame[y].to_numpy(), frame[key].to_numpy(),
                                 columns)
    within = frame[columns].to_numpy() - fit.driver_means[fit.codes]
    scores = fit.slopes.residuals / (1 - fit.slopes.leverage)
    table = fit.level_table(within=within, scores=scores)
    names = ["Intercept", *[f"C({key})[T.{name}]" for name in fit.series_names[1:]]]
    _close(table["std_error"], dense.bse[names])
    # The slopes' own HC3 errors from the within columns alone (Frisch–Waugh–Lovell).
    bread = np.linalg.inv(within.T @ within)
    sandwich = bread @ (within * scores[:, None] ** 2).T @ within @ bread
    _close(np.sqrt(np.diag(sandwich)), dense.bse[columns])


@pytest.mark.parametrize("lags", [1, 3])
def test_hac_standard_errors_of_the_levels_match_statsmodels_hac_panel(lags):
    # statsmodels' cov_type="hac-panel" (Bartlett weights within each firm, rows stacked by
    # firm in year order; use_correction=False, the convention of castline's HAC) on the
    # design with a column per firm. The rows are shuffled: the time order comes from ``order``.
    frame = _grunfeld().sample(frac=1.0, random_state=5).reset_index(drop=True)
    stacked = frame.sort_values(["firm", "year"], kind="stable")
    dense = smf.ols("invest ~ value + capital + C(firm)", data=stacked).fit(
        cov_type="hac-panel", cov_kwds={"groups": pd.factorize(stacked["firm"])[0], "maxlags": lags,
                                        "use_correction": False})
    fit = absorbed_least_squares(frame[["value", "capital"]].to_numpy(), frame["invest"].to_numpy(),
                                 frame["firm"].to_numpy(), ["value", "capital"])
    within = frame[["value", "capital"]].to_numpy() - fit.driver_means[fit.codes]
    table = fit.level_table(within=within, scores=fit.slopes.residuals, lags=lags,
                            order=frame["year"].to_numpy())
    names = ["Intercept", *[f"C(firm)[T.{name}]" for name in fit.series_names[1:]]]
    _close(table["std_error"], dense.bse[names])


def test_a_series_the_fit_did_not_hold_gets_the_first_series_level():
    frame = _grunfeld()
    fit = absorbed_least_squares(frame[["value"]].to_numpy(), frame["invest"].to_numpy(),
                                 frame["firm"].to_numpy(), ["value"])
    row = np.array([[1000.0]])
    assert fit.predict(row, np.array([-1]))[0] == pytest.approx(fit.predict(row, np.array([0]))[0],
                                                                 rel=1e-15)


def test_a_column_constant_within_every_series_is_left_out_and_named():
    # A firm-level constant (its first year's capital) is spanned by the firm levels: the fit
    # with columns drops it as collinear, and the predictions are those without it.
    frame = _grunfeld()
    frame["start"] = frame.groupby("firm")["capital"].transform("first")
    fit = absorbed_least_squares(frame[["value", "start"]].to_numpy(), frame["invest"].to_numpy(),
                                 frame["firm"].to_numpy(), ["value", "start"])
    assert np.isnan(fit.slopes.coef[1])
    assert [d.describe() for d in fit.slopes.dropped] == [f"'start' is {LEVELS_REASON}"]
    without = smf.ols("invest ~ value + C(firm)", data=frame).fit()
    _close(fit.slopes.coef[0], without.params["value"])
    assert fit.df_resid == without.df_resid
    _close(fit.slopes.residuals, without.resid)


def test_within_removes_each_group_mean():
    # numpy's per-group mean, computed group by group, as the reference.
    rng = np.random.default_rng(8)
    codes = rng.integers(0, 7, 500)
    values = rng.normal(1e6, 1, (500, 3))
    counts = np.bincount(codes, minlength=7).astype(float)
    centred, means = within(values, codes, counts)
    for group in range(7):
        rows = codes == group
        np.testing.assert_allclose(means[group], values[rows].mean(axis=0), rtol=1e-15)
        np.testing.assert_allclose(centred[rows].mean(axis=0), 0.0, atol=1e-9)
