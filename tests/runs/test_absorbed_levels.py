"""Whole runs whose model over all series absorbs the series levels (more series than a
column each allows) against the same runs with a column per series.

The bound on dense series columns (``FeaturePlan.LARGEST_SERIES_DESIGN``) is lowered so
that ten series cross it. References:

* the run with a column per series, itself checked against statsmodels in
  ``test_many_series.py``: every prediction, forecast, coefficient, residual and
  diagnostic but the two that are by design those of the drivers within series
  (condition number, VIF) must agree to 1e-8;
* statsmodels' OLS with ``C(series)`` fitted independently on the run's history, for the
  final fit's coefficients and standard errors.
"""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from conftest import run_cli
from runs.test_many_series import SPEC, read_data, run_folder, write_many_series

from pipeline.features.plan import FeaturePlan

TOLERANCE = 1e-8
# Those of the drivers within series when the levels are absorbed (the run says so).
WITHIN_ONLY = {"condition number (scaled design)", "largest VIF", "correct digits (estimated)"}


def _spec(slopes: bool) -> dict:
    spec = copy.deepcopy(SPEC)
    if not slopes:
        del spec["drivers"]["series_effects"]
    return spec


def _run(folder, spec: dict, monkeypatch, bound: int | None):
    folder.mkdir()
    path = write_many_series(folder, spec)
    with monkeypatch.context() as patched:
        if bound is not None:
            patched.setattr(FeaturePlan, "LARGEST_SERIES_DESIGN", bound)
        code, out, err = run_cli(["run", str(path)])
    assert code == 0, err
    return run_folder(out), out


def _same_numbers(dense: pd.DataFrame, absorbed: pd.DataFrame) -> None:
    assert list(dense.columns) == list(absorbed.columns) and len(dense) == len(absorbed)
    numbers = dense.select_dtypes("number").columns
    for column in dense.columns.difference(numbers):
        assert (dense[column].astype(str).fillna("") == absorbed[column].astype(str).fillna("")).all(), column
    for column in numbers:
        np.testing.assert_allclose(absorbed[column], dense[column], rtol=TOLERANCE, atol=TOLERANCE,
                                   err_msg=column)


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """The spec without series slopes, run with a column per series and with levels absorbed."""
    monkeypatch = pytest.MonkeyPatch()
    root = tmp_path_factory.mktemp("absorbed")
    dense, _ = _run(root / "dense", _spec(False), monkeypatch, None)
    absorbed, out = _run(root / "absorbed", _spec(False), monkeypatch, 1)
    return dense, absorbed, out, root


@pytest.mark.parametrize("name", ["predictions.csv", "forecast.csv", "coefficients.csv", "residuals.csv",
                                  "influential_rows.csv", "series.csv", "interval_coverage.csv"])
def test_every_number_equals_the_run_with_a_column_per_series(pair, name):
    dense, absorbed, _, _ = pair
    _same_numbers(pd.read_csv(dense / name), pd.read_csv(absorbed / name))


def test_the_diagnostics_agree_but_those_of_the_design_within_series(pair):
    dense, absorbed, out, _ = pair
    before, after = (pd.read_csv(folder / "diagnostics.csv") for folder in (dense, absorbed))
    same = ~before["check"].isin(WITHIN_ONLY)
    assert same.sum() == len(before) - len(WITHIN_ONLY)
    _same_numbers(before[same], after[same])
    assert "ols: the 10 series levels are too many for a column each, so the fit absorbs them" in out


def test_the_final_fit_equals_statsmodels_with_c_series(pair):
    _, absorbed, _, root = pair
    history = read_data(root / "absorbed").dropna(subset=["sales"])
    reference = smf.ols("sales ~ x1 + x2 + shop + trend + C(series)", data=history).fit()
    terms = pd.read_csv(absorbed / "coefficients.csv").query("model == 'ols'").set_index("term")
    pairs = {"intercept": "Intercept", "x1": "x1", "x2": "x2", "channel: shop": "shop",
             "months since 2018-01": "trend",
             **{f"series: {name}": f"C(series)[T.{name}]" for name in sorted(history["series"].unique())[1:]}}
    assert set(terms.index) == set(pairs)
    ours, theirs = terms.loc[list(pairs)], reference.params[list(pairs.values())]
    np.testing.assert_allclose(ours["estimate"], theirs, rtol=TOLERANCE)
    np.testing.assert_allclose(ours["std_error"], reference.bse[list(pairs.values())], rtol=TOLERANCE)


def test_the_model_file_forecasts_what_the_run_forecast(pair):
    _, absorbed, _, root = pair
    data = pd.read_csv(root / "absorbed" / "data.csv")
    data[data["sales"].isna()].to_csv(root / "new.csv", index=False)
    code, _, err = run_cli(["forecast", str(absorbed / "model.json"), str(root / "new.csv"),
                            "--model", "ols", "--output", str(root / "from_file.csv")])
    assert code == 0, err
    from_file = pd.read_csv(root / "from_file.csv")
    run = pd.read_csv(absorbed / "forecast.csv").query("model == 'ols'")
    joined = run.merge(from_file, on=["period", "series"], suffixes=("", "_file"))
    assert len(joined) == len(run) == 30
    assert (joined["forecast"] == joined["forecast_file"]).all()   # the same arithmetic


def test_series_slopes_stay_columns_beside_absorbed_levels(tmp_path, monkeypatch):
    # Between the bounds where the slopes' columns fit and the levels' do not: the larger
    # windows absorb the levels, the smaller ones hold them as columns, and every number is
    # the run's with a column per series throughout.
    dense, _ = _run(tmp_path / "dense", _spec(True), monkeypatch, None)
    absorbed, out = _run(tmp_path / "absorbed", _spec(True), monkeypatch, 4_700)
    assert "series levels are too many for a column each" in out
    for name in ("predictions.csv", "forecast.csv", "coefficients.csv"):
        _same_numbers(pd.read_csv(dense / name), pd.read_csv(absorbed / name))


def test_a_penalised_model_cannot_absorb_its_levels_and_says_so(tmp_path, monkeypatch):
    spec = _spec(False) | {"models": ["ridge"]}
    path = write_many_series(tmp_path, spec)
    monkeypatch.setattr(FeaturePlan, "LARGEST_SERIES_DESIGN", 100)
    code, out, err = run_cli(["check", str(path)])
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1, err
    assert "drivers.series_effects" in lines[0] and "use OLS (which absorbs the series levels)" in lines[0]


def test_a_log_target_absorbs_its_levels_on_the_log_scale(tmp_path, monkeypatch):
    # The fit is on log(sales); the levels are absorbed there and the forecasts turned back
    # as with a column per series (Duan's smearing), and the run's note says both.
    spec = _spec(False) | {"target_transform": "log"}
    dense, _ = _run(tmp_path / "dense", spec, monkeypatch, None)
    absorbed, out = _run(tmp_path / "absorbed", spec, monkeypatch, 1)
    assert "series levels are too many for a column each" in out and "smearing" in out
    for name in ("predictions.csv", "forecast.csv", "coefficients.csv"):
        _same_numbers(pd.read_csv(dense / name), pd.read_csv(absorbed / name))


@pytest.mark.parametrize("kind", ["hc3", "hac"])
def test_robust_standard_errors_cover_the_absorbed_levels(tmp_path, monkeypatch, kind):
    # With standard_errors: hc3 or hac every coefficient's error is of that kind, the levels'
    # included, as with a column per series.
    spec = _spec(False) | {"standard_errors": kind}
    dense, _ = _run(tmp_path / "dense", spec, monkeypatch, None)
    absorbed, _ = _run(tmp_path / "absorbed", spec, monkeypatch, 1)
    _same_numbers(pd.read_csv(dense / "coefficients.csv"), pd.read_csv(absorbed / "coefficients.csv"))
