"""Numerical checks of the model per series (``PerSeriesOLS``, ``fit_series_chunk``).

Every reference is named beside its check:

* statsmodels ``OLS`` fitted to each series alone (coefficients, standard errors,
  predictions, ``get_prediction(...).se_obs``), on data generated here;
* the Grunfeld (1958) investment data shipped with ``statsmodels.datasets.grunfeld``,
  each firm alone, against statsmodels and against per-firm estimates printed in
  Greene, *Econometric Analysis* (the Grunfeld five-firm example, OLS firm by firm);
* NIST/ITL StRD linear regression certified values (tests/data/nist_strd) fitted as one
  "series" through the batched path of ``fit_series_chunk``.

The generated numbers are invented; no generated figure is a reference value.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from conftest import TEST_DATA
from statsmodels.datasets import grunfeld

from pipeline.core.design import Design
from pipeline.features.numeric import NumericTerms
from pipeline.models import per_series
from pipeline.models.ols import INTERCEPT
from pipeline.models.per_series import ChunkTask, PerSeriesOLS, fit_series_chunk

RTOL = 1e-8

NIST_DIR = TEST_DATA / "nist_strd"
NIST_CERTIFIED = json.loads((NIST_DIR / "certified.json").read_text())  # values stay strings
NIST_DATASETS = ["norris", "pontius", "noint1", "noint2", "longley",
                 "wampler1", "wampler2", "wampler3"]
MIN_LRE = 11.0      # NIST StRD: significant digits asked of every certified coefficient
MIN_SE_LRE = 9.0    # and of every certified standard error and the residual SD
ZERO_ABS_TOL = 1e-9

DRIVERS = ["x1", "x2", "x3", "t"]
# Rows per series: lengths repeat so that several series share a shape (one stacked QR per
# shape), and the shapes differ. 'const' has x2 constant within it, 'dup' has x3 == x2,
# 'short' has fewer rows than terms (falls back to its mean).
LENGTHS = {"a": 30, "b": 30, "c": 30, "k": 30, "d": 24, "e": 24, "f": 41, "g": 41, "h": 41,
           "i": 41, "j": 18, "const": 30, "dup": 24, "short": 4}
LEFT_OUT = {"const": "x2", "dup": "x3"}   # the column castline leaves out of that series' fit


def _relative(computed, reference) -> float:
    computed, reference = np.asarray(computed, float), np.asarray(reference, float)
    return float(np.max(np.abs(computed - reference) / np.abs(reference)))


def _generated(seed: int = 7) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for name, n in LENGTHS.items():
        beta = rng.normal(size=3) * 3
        x = rng.normal(loc=rng.uniform(-3, 3, 3), scale=rng.uniform(0.5, 2, 3), size=(n, 3))
        trend = np.arange(n, dtype=float) + rng.integers(0, 10)
        if name == "const":
            x[:, 1] = 2.5
        if name == "dup":
            x[:, 2] = x[:, 1]
        y = 50 + x @ beta + 0.3 * trend + rng.normal(scale=1.5, size=n)
        rows += [{"series": name, "x1": x[i, 0], "x2": x[i, 1], "x3": x[i, 2], "t": trend[i],
                  "y": y[i]} for i in range(n)]
    # Shuffled: the model must gather each series' rows itself.
    return pd.DataFrame(rows).sample(frac=1, random_state=3).reset_index(drop=True)


def _new_rows(name: str, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    new = pd.DataFrame(rng.normal(loc=1.0, size=(6, 4)), columns=DRIVERS)
    new["t"] = np.arange(6) + 100.0
    new["series"] = name
    return new


def _design(frame: pd.DataFrame, columns=DRIVERS) -> Design:
    return Design(frame[list(columns)].to_numpy(float), list(columns), frame["series"].to_numpy())


@pytest.fixture(scope="module")
def generated():
    frame = _generated()
    return frame, PerSeriesOLS().fit(_design(frame), frame["y"].to_numpy())


def test_the_generated_data_has_several_shapes_each_shared_by_several_series():
    """Guards the data: the batched path must stack series (shared shapes) and see several."""
    sizes = pd.Series(LENGTHS).value_counts()
    assert (sizes >= 2).sum() >= 3 and len(sizes) >= 4


@pytest.mark.parametrize("name", [s for s in LENGTHS if s != "short"])
def test_each_series_equals_statsmodels_ols_on_that_series_alone(generated, name):
    """Reference: statsmodels.api.OLS on the series' own rows, intercept added, without the
    column castline leaves out (constant within the series, or the second of two identical
    drivers): params, bse, df_resid, and get_prediction(new rows) predicted_mean / se_obs."""
    frame, model = generated
    own = frame[frame["series"] == name]
    columns = [c for c in DRIVERS if c != LEFT_OUT.get(name)]
    reference = sm.OLS(own["y"].to_numpy(), sm.add_constant(own[columns].to_numpy(float),
                                                            has_constant="add")).fit()
    table = model.coefficient_table().query("series == @name").set_index("term")
    terms = [INTERCEPT, *columns]
    assert _relative(table.loc[terms, "estimate"], reference.params) < RTOL
    assert _relative(table.loc[terms, "std_error"], reference.bse) < RTOL
    if name in LEFT_OUT:
        assert np.isnan(table.loc[LEFT_OUT[name], ["estimate", "std_error"]].to_numpy(float)).all()

    new = _new_rows(name, seed=len(name))
    predicted = reference.get_prediction(sm.add_constant(new[columns].to_numpy(float),
                                                         has_constant="add"))
    design = _design(new)
    assert _relative(model.predict(design), predicted.predicted_mean) < RTOL
    assert _relative(model.prediction_se(design), predicted.se_obs) < RTOL
    np.testing.assert_array_equal(model.residual_df(design), reference.df_resid)
    # The interval the run states: t quantile on the series' own df (statsmodels conf_int).
    np.testing.assert_allclose(table.loc[terms, "low_95"], reference.conf_int(0.05)[:, 0], rtol=RTOL)
    np.testing.assert_allclose(table.loc[terms, "p_value"], reference.pvalues, rtol=1e-6, atol=1e-300)


def test_only_the_rank_deficient_and_the_ill_conditioned_series_go_through_the_careful_fit(monkeypatch):
    """Design of the batched path (module docstring): series of full rank are solved by the
    stacked QR; the series with two identical drivers reaches least_squares, and so does any
    series the precision rule would refine (``needs_refining``), which least_squares then
    refines. Checked against the rule computed here from numpy's SVD and lstsq of each
    series' unit-scaled design."""
    seen = []
    careful = per_series.least_squares

    def spy(matrix, y, names, **kwargs):
        seen.append(len(y))
        return careful(matrix, y, names, **kwargs)

    monkeypatch.setattr(per_series, "least_squares", spy)
    frame = _generated()
    model = PerSeriesOLS().fit(_design(frame), frame["y"].to_numpy())
    expected = [LENGTHS["dup"]]
    for name, part in frame.groupby("series", sort=True):
        columns = [c for c in DRIVERS if part[c].nunique() > 1]
        if name in ("dup", "short") or len(part) <= len(columns) + 1:
            continue
        x = sm.add_constant(part[columns].to_numpy(float), has_constant="add")
        if _refined_expected(x, part["y"].to_numpy(float)):
            expected.append(len(part))
    assert sorted(seen) == sorted(expected)
    assert int(model.refined_.sum()) == len(expected) - 1


def test_the_notes_name_the_constant_column_and_the_collinear_one_apart(generated):
    """'x2' is constant within 'const'; 'x3' varies in 'dup' but repeats 'x2' there. The note
    on columns that do not vary must name x2 only; the collinearity note names dup and x3."""
    _, model = generated
    notes = model.notes()
    constant = [n for n in notes if "do not vary" in n]
    assert len(constant) == 1 and "'x2'" in constant[0] and "'x3'" not in constant[0], notes
    collinear = [n for n in notes if "combination" in n]
    assert len(collinear) == 1 and "'dup'" in collinear[0] and "'x3'" in collinear[0], notes


def test_a_series_with_no_more_rows_than_terms_is_its_own_mean(generated):
    """Documented fallback: prediction = the series' mean (numpy), SE = s·sqrt(1 + 1/n) with s
    its sample SD (ddof 1), df = n − 1; no coefficients; listed in fallbacks_."""
    frame, model = generated
    own = frame.loc[frame["series"] == "short", "y"].to_numpy()
    design = _design(_new_rows("short", seed=1))
    np.testing.assert_allclose(model.predict(design), own.mean(), rtol=1e-14)
    np.testing.assert_allclose(model.prediction_se(design),
                               own.std(ddof=1) * math.sqrt(1 + 1 / len(own)), rtol=1e-12)
    np.testing.assert_array_equal(model.residual_df(design), len(own) - 1)
    assert model.coefficient_table().query("series == 'short'")["estimate"].isna().all()
    fallbacks = model.fallbacks_
    assert fallbacks["series"].tolist() == ["short"]
    assert fallbacks["rows"].tolist() == [LENGTHS["short"]]


def test_a_series_the_fit_never_saw_gets_the_overall_mean_and_no_se(generated):
    """Documented in prediction_se: NaN for a series the fit never saw; the point is the mean
    of every training row (numpy mean of y)."""
    frame, model = generated
    design = _design(_new_rows("never-seen", seed=2))
    np.testing.assert_allclose(model.predict(design), frame["y"].mean(), rtol=1e-14)
    assert np.isnan(model.prediction_se(design)).all()
    assert np.isnan(model.residual_df(design)).all()


def test_without_an_intercept_each_series_equals_statsmodels_without_a_constant():
    """Reference: statsmodels.api.OLS with no constant, per series (uncentred fit)."""
    frame = _generated(seed=11)
    frame = frame[~frame["series"].isin(["const", "dup", "short"])]
    model = PerSeriesOLS(fit_intercept=False).fit(_design(frame), frame["y"].to_numpy())
    table = model.coefficient_table()
    worst = 0.0
    for name, own in frame.groupby("series"):
        reference = sm.OLS(own["y"].to_numpy(), own[DRIVERS].to_numpy(float)).fit()
        got = table[table["series"] == name].set_index("term").loc[DRIVERS]
        worst = max(worst, _relative(got["estimate"], reference.params),
                    _relative(got["std_error"], reference.bse))
        new = _new_rows(name, seed=3)
        predicted = reference.get_prediction(new[DRIVERS].to_numpy(float))
        worst = max(worst, _relative(model.predict(_design(new)), predicted.predicted_mean),
                    _relative(model.prediction_se(_design(new)), predicted.se_obs))
    assert worst < RTOL


def test_a_series_fit_does_not_depend_on_its_chunk_or_its_neighbours(monkeypatch):
    """Every way of running cuts the same chunks, but a series' numbers should not depend on
    which series share its chunk or stack: the fit with CHUNK_SERIES = 3 (many chunks, small
    stacks) equals the fit with the default (one chunk) to 1e-12."""
    frame = _generated(seed=5)
    design, y = _design(frame), frame["y"].to_numpy()
    assert len(LENGTHS) < per_series.CHUNK_SERIES
    whole = PerSeriesOLS().fit(design, y)
    monkeypatch.setattr(per_series, "CHUNK_SERIES", 3)
    chunked = PerSeriesOLS().fit(design, y)
    assert list(chunked.series_) == list(whole.series_)
    np.testing.assert_allclose(chunked.coef_, whole.coef_, rtol=1e-12, atol=0)
    np.testing.assert_allclose(chunked.xtx_inverse_, whole.xtx_inverse_, rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(chunked.resid_sd_, whole.resid_sd_, rtol=1e-12)
    np.testing.assert_array_equal(chunked.fell_back_, whole.fell_back_)


# --------------------------------------------------------------------------------------------
# Grunfeld (1958) investment data, statsmodels.datasets.grunfeld: each firm alone.
# --------------------------------------------------------------------------------------------

# Greene, Econometric Analysis, the Grunfeld five-firm example: OLS of invest on value and
# capital, firm by firm (printed to 4–5 significant digits). US Steel is left out: its
# capital series differs between published copies of the data.
GREENE_PER_FIRM = {
    "General Motors": (-149.782, 0.11928, 0.37144),
    "General Electric": (-9.9563, 0.026551, 0.15169),
    "Westinghouse": (-0.5094, 0.05289, 0.09241),
    "Chrysler": (-6.1900, 0.07795, 0.31572),
}


def test_grunfeld_each_firm_equals_statsmodels_and_the_printed_estimates():
    data = grunfeld.load_pandas().data
    frame = data.assign(series=data["firm"].astype(str))
    model = PerSeriesOLS().fit(_design(frame, ["value", "capital"]), frame["invest"].to_numpy())
    table = model.coefficient_table()
    assert sorted(model.series_) == sorted(frame["series"].unique()) and len(model.series_) == 11
    worst = 0.0
    for firm, own in frame.groupby("series"):
        # Reference library: statsmodels OLS, firm alone.
        reference = sm.OLS(own["invest"].to_numpy(),
                           sm.add_constant(own[["value", "capital"]].to_numpy(float))).fit()
        got = table[table["series"] == firm].set_index("term").loc[[INTERCEPT, "value", "capital"]]
        worst = max(worst, _relative(got["estimate"], reference.params),
                    _relative(got["std_error"], reference.bse))
        if firm in GREENE_PER_FIRM:   # printed values, to the digits printed
            np.testing.assert_allclose(got["estimate"], GREENE_PER_FIRM[firm], rtol=5e-4)
    assert worst < RTOL


# --------------------------------------------------------------------------------------------
# NIST StRD certified values through the batched path of fit_series_chunk.
# --------------------------------------------------------------------------------------------

from test_ols import _lre  # noqa: E402  (the NIST log relative error, shared with the single fit)


def _nist_task(name: str, copies: int = 1) -> ChunkTask:
    certified = NIST_CERTIFIED[name]
    frame = pd.read_csv(NIST_DIR / f"{name}.csv")
    if certified["degree"] is None:
        columns = [c for c in frame.columns if c != "y"]
        matrix = frame[columns].to_numpy(float)
    else:
        terms = NumericTerms("x", certified["degree"]).fit(frame)
        matrix, columns = terms.transform(frame), terms.get_feature_names_out()
    if certified["intercept"]:
        matrix = np.column_stack([np.ones(len(matrix)), matrix])
        columns = [INTERCEPT, *columns]
    return ChunkTask(np.tile(matrix, (copies, 1)), np.tile(frame["y"].to_numpy(float), copies),
                     np.full(copies, len(frame)), bool(certified["intercept"]), list(columns))


def _nist_failures(name: str, fit, position: int = 0) -> tuple[list[str], float]:
    certified = NIST_CERTIFIED[name]
    se = np.sqrt(np.diag(fit.xtx_inverse[position])) * fit.resid_sd[position]
    checks = [*((c, cert, MIN_LRE) for c, cert in zip(fit.coef[position], certified["coef"])),
              *((c, cert, MIN_SE_LRE) for c, cert in zip(se, certified["se"])),
              (fit.resid_sd[position], certified["rsd"], MIN_SE_LRE)]
    failures, lowest = [], 15.0
    for computed, cert, bar in checks:
        if float(cert) == 0:
            if not abs(computed) < ZERO_ABS_TOL:
                failures.append(f"computed {computed!r}, certified 0")
            continue
        lowest = min(lowest, _lre(computed, cert))
        if _lre(computed, cert) < bar:
            failures.append(f"computed {computed!r}, certified {cert}, LRE {_lre(computed, cert):.2f}")
    return failures, lowest


def _refined_expected(matrix: np.ndarray, y: np.ndarray) -> bool:
    """The precision rule (pipeline/models/ols.py), computed here from numpy's SVD and lstsq of
    the unit-scaled design: refine when the condition number exceeds 1,000 or
    −log₁₀(ε·κ·max|z|/min|z|) falls below 8."""
    norms = np.linalg.norm(matrix, axis=0)
    z = np.abs(np.linalg.lstsq(matrix / norms, y, rcond=None)[0])
    singular = np.linalg.svd(matrix / norms, compute_uv=False)
    condition = singular[0] / singular[-1]
    z = z[z > 0]
    return condition > 1e3 or -math.log10(np.finfo(float).eps * condition * z.max() / z.min()) < 8


@pytest.mark.parametrize("name", NIST_DATASETS)
def test_nist_strd_certified_values_through_the_batched_path(name):
    """NIST StRD: certified estimates to LRE ≥ 11, their standard deviations and the residual
    SD to LRE ≥ 9 (1e-9 absolute where certified 0), through fit_series_chunk: a series the
    precision rule finds well-conditioned is solved by the stacked QR, one it does not is
    refined in twice the working precision by the single fit."""
    task = _nist_task(name)
    fit = fit_series_chunk(task)
    assert not fit.fell_back[0] and fit.dropped == []
    assert fit.df_resid[0] == len(pd.read_csv(NIST_DIR / f"{name}.csv")) - len(NIST_CERTIFIED[name]["coef"])
    assert bool(fit.refined[0]) == _refined_expected(task.matrix, task.y)
    failures, _ = _nist_failures(name, fit)
    assert not failures, f"{name}: " + "; ".join(failures)


def test_the_hardest_nist_datasets_are_refined_in_the_batched_path():
    """wampler3 (κ ≈ 2.2e3) and longley (κ ≈ 4.3e4), where the stacked QR alone stops short
    of eleven digits (wampler3 9.55, measured before refining), are refined."""
    for name in ("wampler3", "longley"):
        fit = fit_series_chunk(_nist_task(name))
        assert fit.refined[0] and fit.digits[0] >= 13, name


def test_nist_wampler_datasets_stacked_as_series_of_one_shape():
    """Wampler1–3 share x (21 rows, degree 5): as three series of one chunk they form one
    stack, and each still meets its certified values; three copies of Longley in one chunk
    give each copy the same digits as Longley alone."""
    tasks = [_nist_task(name) for name in ("wampler1", "wampler2", "wampler3")]
    stacked = ChunkTask(np.vstack([t.matrix for t in tasks]), np.concatenate([t.y for t in tasks]),
                        np.concatenate([t.counts for t in tasks]), True, tasks[0].names)
    fit = fit_series_chunk(stacked)
    for position, name in enumerate(("wampler1", "wampler2", "wampler3")):
        failures, _ = _nist_failures(name, fit, position)
        assert not failures, f"{name}: " + "; ".join(failures)
    alone = fit_series_chunk(_nist_task("longley"))
    copies = fit_series_chunk(_nist_task("longley", copies=3))
    for position in range(3):
        np.testing.assert_allclose(copies.coef[position], alone.coef[0], rtol=1e-13)


# Without an intercept, a series whose every column is all zeros keeps no column: it is
# forecast by its own mean (it once reached the batched fit with zero columns and crashed).
def test_without_an_intercept_a_series_with_only_zero_columns_does_not_stop_the_fit():
    rng = np.random.default_rng(0)
    series = np.repeat(["a", "b"], 10)
    matrix = rng.normal(size=(20, 2))
    matrix[10:] = 0.0          # e.g. a promotion driver that is 0 throughout series 'b'
    model = PerSeriesOLS(fit_intercept=False).fit(Design(matrix, ["u", "v"], series),
                                                 rng.normal(size=20))
    assert np.isfinite(model.predict(Design(matrix, ["u", "v"], series))).all()
