"""NIST StRD linear datasets through whole `castline run`s and through the batched fit per series.

Reference: NIST/ITL Statistical Reference Datasets (StRD), Linear Least Squares Regression.
The eight visible datasets (norris, pontius, noint1, noint2, longley, wampler1-3) and NIST's
certified estimates, standard deviations of the estimates and residual SDs are in
tests/data/nist_strd (certified values: tests/data/nist_strd/certified.json; see its
README.md). The bars: every certified coefficient to at least 11 correct significant digits
(log relative error, LRE ≥ 11), every certified standard error and residual SD to 9; where
the certified value is exactly 0 (wampler1, an exact fit), within ZERO_ABS_TOL absolutely.

The months of the CSVs are made up (one observation a month from 2001-01, in the file's
order): NIST's data have no dates, and a run needs them. The backtest is the smallest one
a spec allows (a holdout of the last month); what is checked is the final fit on all rows,
which is what coefficients.csv, metrics.json and diagnostics.csv report.

Three paths:

1. a whole run of one series (the model over all series: ``least_squares``);
2. a whole run of several series fitted one by one (``{kind: ols, per_series: true}``);
3. ``PerSeriesOLS`` called directly on a stack of series of one shape.

Before the refined solver was wired in, wampler3 missed the coefficient bar on the single
fit (10.75) and on the batched path (9.55), and longley passed it by 0.03 (11.03); now the
precision rule (pipeline/models/ols.py) sends both to the refined solve, on every path.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import run_cli
from models.test_ols import NIST_CERTIFIED, NIST_DATASETS, NIST_DIR, ZERO_ABS_TOL, _lre
from models.test_refined import nist_design

from pipeline.core.design import Design
from pipeline.models import per_series
from pipeline.models.per_series import PerSeriesOLS

COEF_LRE = 11.0   # correct significant digits asked of every certified coefficient
SE_LRE = 9.0      # and of every certified standard error and the residual SD
FIRST_MONTH = "2001-01"
CONDITION_CHECK = "condition number (scaled design)"
PER_SERIES_MODEL = "ols_per_series"



# ---------------------------------------------------------------- data and specs

def nist_frame(name: str) -> pd.DataFrame:
    """The dataset as published, with a made-up month per row (consecutive, file order)."""
    frame = pd.read_csv(NIST_DIR / f"{name}.csv")
    months = pd.period_range(FIRST_MONTH, periods=len(frame), freq="M")
    frame.insert(0, "month", months.to_timestamp().strftime("%Y-%m-%d"))
    return frame


def expected_terms(name: str) -> list[str]:
    """The terms of the certified model, as a run names them, intercept first where fitted."""
    certified = NIST_CERTIFIED[name]
    drivers = ([f"x{i}" for i in range(1, 7)] if certified["degree"] is None
               else ["x"] + [f"x^{power}" for power in range(2, certified["degree"] + 1)])
    return (["intercept"] if certified["intercept"] else []) + drivers


def nist_spec(name: str, *, series: str | None = None) -> dict:
    """A spec for the certified model: y on x's powers up to the certified degree (x1..x6 for
    longley), no intercept where the certified model has none; OLS, fitted per series when
    ``series`` names the series column. The smallest backtest the spec allows: a holdout of
    one month (last_periods ≥ 1), so a run is possible on noint2's 3 rows."""
    certified = NIST_CERTIFIED[name]
    numeric = ([f"x{i}" for i in range(1, 7)] if certified["degree"] is None
               else [{"column": "x", "degree": certified["degree"]}])
    spec = {"name": f"nist-{name}",
            "input": {"file": "data.csv", "date_column": "month", "period": "month"},
            "target": "y", "drivers": {"numeric": numeric}, "intercept": certified["intercept"],
            "validation": {"method": "holdout", "last_periods": 1},
            "models": [{"kind": "ols", "per_series": True} if series else "ols"],
            "output": {"folder": "runs"}}
    if series:
        spec["input"]["series"] = [series]
    return spec


def run_nist(folder: Path, frame: pd.DataFrame, spec: dict) -> Path:
    """Write data.csv and spec.yaml into folder, run castline on them, return the run folder."""
    frame.to_csv(folder / "data.csv", index=False)
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    code, out, err = run_cli(["run", str(path)])
    assert code == 0, err
    return Path(re.search(r"^run folder: (.+)$", out, re.MULTILINE).group(1))


# ---------------------------------------------------------------- the checks

def shortfalls(name: str, coef, se, rsd=None) -> tuple[list[str], dict[str, float]]:
    """Return what misses the bars against the dataset's certified values, and the lowest LRE
    of the coefficients, of the standard errors and of the residual SD (15 when every value
    is certified 0 and met within ZERO_ABS_TOL)."""
    certified = NIST_CERTIFIED[name]
    groups = [("coef", coef, certified["coef"], COEF_LRE), ("se", se, certified["se"], SE_LRE)]
    if rsd is not None:
        groups.append(("rsd", [rsd], [certified["rsd"]], SE_LRE))
    failures, lowest = [], {}
    for label, computed, certs, bar in groups:
        computed = [float(value) for value in computed]
        assert len(computed) == len(certs), (name, label, computed)
        lowest[label] = 15.0
        for position, (value, cert) in enumerate(zip(computed, certs)):
            if float(cert) == 0:
                if not abs(value) < ZERO_ABS_TOL:   # NaN fails too
                    failures.append(f"{label}[{position}] = {value!r}, certified 0")
                continue
            lre = _lre(value, cert) if np.isfinite(value) else 0.0
            lowest[label] = min(lowest[label], lre)
            if lre < bar:
                failures.append(f"{label}[{position}] = {value!r}, certified {cert}: LRE {lre:.2f} < {bar:g}")
    return failures, lowest


def unit_scaled_condition(name: str) -> float:
    """numpy.linalg.cond of the certified design with each column scaled to unit length (the
    reference the single fit's condition number is checked against in tests/models/test_ols.py)."""
    design, _ = nist_design(name)
    return float(np.linalg.cond(design / np.linalg.norm(design, axis=0)))


def read_ols_rows(run: Path, model: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return the model's rows of coefficients.csv read as numbers and as the text written."""
    numbers = pd.read_csv(run / "coefficients.csv")
    text = pd.read_csv(run / "coefficients.csv", dtype=str, keep_default_na=False)
    rows = (numbers["model"] == model).to_numpy()
    assert rows.any(), f"no {model} rows in coefficients.csv"
    return numbers[rows].reset_index(drop=True), text[rows].reset_index(drop=True)


def assert_full_digits(text: pd.DataFrame, columns=("estimate", "std_error")) -> None:
    """Every number is written as Python's repr of the float, the shortest text that reads back
    to the same float: no digit of the fit is lost on the way to the CSV."""
    for column in columns:
        for cell in text[column]:
            assert cell == repr(float(cell)), f"{column}: {cell!r} is not repr of {float(cell)!r}"


# ---------------------------------------------------------------- 1. a whole run, one series

# Measured before the refined solver was wired in, the lowest coefficient LRE of a whole run: norris 14.1,
# pontius 14.0, noint1 14.7, noint2 15, longley 11.03 (just over the bar), wampler1 11.3,
# wampler2 12.6, wampler3 10.75 (x's coefficient; x²'s 10.95).
WHOLE_RUN_CASES = NIST_DATASETS


@pytest.mark.parametrize("name", WHOLE_RUN_CASES)
def test_a_whole_run_meets_the_nist_strd_certified_values(name, tmp_path):
    """NIST StRD (certified values: tests/data/nist_strd/certified.json): `castline run` on the
    dataset as one series; the OLS rows of coefficients.csv meet every certified coefficient
    to LRE ≥ 11 and standard error to LRE ≥ 9, metrics.json's residual SD to LRE ≥ 9; the
    CSV holds every digit (repr, the same floats as model.json); diagnostics.csv's condition
    number is numpy's for the unit-scaled design."""
    frame = nist_frame(name)
    run = run_nist(tmp_path, frame, nist_spec(name))
    numbers, text = read_ols_rows(run, "ols")
    assert list(numbers["term"]) == expected_terms(name)
    assert set(numbers["standard_errors"]) == {"classical"}   # the certified SEs are classical
    assert_full_digits(text)
    stored = json.loads((run / "model.json").read_text(encoding="utf-8"))["models"]["ols"]
    slopes = stored["coef"]["__array__"]
    written = list(numbers["estimate"])
    assert written == ([stored["intercept"]] if NIST_CERTIFIED[name]["intercept"] else []) + slopes

    fit = next(row for row in json.loads((run / "metrics.json").read_text(encoding="utf-8"))["fit"]
               if row["model"] == "ols")
    assert (fit["rows"], fit["terms"], fit["rank"]) == (len(frame), len(numbers), len(numbers))
    failures, _ = shortfalls(name, numbers["estimate"], numbers["std_error"], fit["resid_sd"])
    assert not failures, f"{name}: " + "; ".join(failures)

    diagnostics = pd.read_csv(run / "diagnostics.csv")
    reported = diagnostics.loc[(diagnostics["model"] == "ols") & (diagnostics["check"] == CONDITION_CHECK),
                               "value"]
    assert len(reported) == 1
    np.testing.assert_allclose(reported.iloc[0], unit_scaled_condition(name), rtol=1e-6)
    np.testing.assert_allclose(fit["condition_number"], reported.iloc[0], rtol=0)


# ---------------------------------------------------------------- 2. a whole run, per series

# Each case: the datasets, one per series (names A, B, C); all share a shape, so the fit per
# series stacks them into one batched QR.
PER_SERIES_CASES = {
    "longley-x3": ["longley"] * 3,
    "noint1-x3": ["noint1"] * 3,
    "wampler1-3": ["wampler1", "wampler2", "wampler3"],
}


def stacked_frame(names: list[str]) -> pd.DataFrame:
    """The datasets as series A, B, C... of one file, over the same made-up months."""
    return pd.concat([nist_frame(name).assign(series=label) for label, name in zip("ABCDEFGH", names)],
                     ignore_index=True)


def spy_on_the_fit_paths(monkeypatch) -> tuple[list, list]:
    """Record each stacked fit (its stack's shape, which series were of full rank, and which
    the precision rule hands on to be refined) and each series handed to the careful single
    fit (its rows)."""
    stacks, careful = [], []
    stacked_fit, single_fit = per_series._fit_stack, per_series.least_squares

    def stack_spy(x, y):
        result = stacked_fit(x, y)
        ok, refine = np.asarray(result[3]), np.asarray(result[5])
        stacks.append((x.shape, ok.tolist(), refine.tolist()))
        return result

    def careful_spy(matrix, y, names, **kwargs):
        careful.append(len(y))
        return single_fit(matrix, y, names, **kwargs)

    monkeypatch.setattr(per_series, "_fit_stack", stack_spy)
    monkeypatch.setattr(per_series, "least_squares", careful_spy)
    return stacks, careful


# Measured before the refined solver was wired in, the lowest coefficient LRE per series: longley 11.35, noint1
# 14.7, wampler1 11.3, wampler2 13.7, wampler3 9.55 (below the single fit's 10.75).
@pytest.mark.parametrize("case", ["longley-x3", "noint1-x3", "wampler1-3"])
def test_a_whole_run_per_series_meets_the_nist_strd_certified_values(case, tmp_path, monkeypatch):
    """NIST StRD (certified values: tests/data/nist_strd/certified.json): series of one file,
    each a NIST dataset, fitted one by one (`kind: ols, per_series: true`); each series' rows
    of coefficients.csv meet its dataset's certified coefficients to LRE ≥ 11 and standard
    errors to LRE ≥ 9 (the run folder reports no residual SD per series: metrics.json's
    "fit" and diagnostics.csv hold the models over all series only).

    These series share a shape and are of full rank, so they go through the stacked path
    (per_series._fit_stack: the batched Householder QR); those the precision rule finds too
    ill-conditioned for eleven digits (longley, wampler) are handed on to the single fit,
    which refines them (least_squares), and only those: the spies below check it."""
    names = PER_SERIES_CASES[case]
    stacks, careful = spy_on_the_fit_paths(monkeypatch)
    frame = stacked_frame(names)
    spec = nist_spec(names[0], series="series")
    spec["name"] = f"nist-{case}"
    run = run_nist(tmp_path, frame, spec)

    rows, terms = len(nist_frame(names[0])), len(expected_terms(names[0]))
    # The final fit on all history: one stack of every series, each taken by the batched QR.
    final = [refine for shape, ok, refine in stacks if shape == (len(names), rows, terms) and all(ok)]
    assert final, stacks
    assert len(careful) == sum(sum(refine) for _, _, refine in stacks)
    assert any(final[-1]) == (names[0] != "noint1")
    numbers, text = read_ols_rows(run, PER_SERIES_MODEL)
    assert_full_digits(text)
    failures = []
    for label, name in zip("ABCDEFGH", names):
        own = numbers[numbers["series"] == label]
        assert list(own["term"]) == expected_terms(name)
        missed, _ = shortfalls(name, own["estimate"], own["std_error"])
        failures += [f"{label} ({name}): {item}" for item in missed]
    assert not failures, "; ".join(failures)


# ---------------------------------------------------------------- 3. the batched fit, direct

def stacked_design(names: list[str]) -> tuple[Design, np.ndarray, bool]:
    """The datasets' certified designs (intercept column left to the model) as series A, B, C."""
    intercept = NIST_CERTIFIED[names[0]]["intercept"]
    matrices, targets = zip(*(nist_design(name) for name in names))
    matrix = np.vstack([m[:, 1:] if intercept else m for m in matrices])
    series = np.repeat(np.array(list("ABCDEFGH"[:len(names)]), dtype=object), [len(t) for t in targets])
    drivers = expected_terms(names[0])[1 if intercept else 0:]
    return Design(matrix, drivers, series), np.concatenate(targets), intercept


DIRECT_CASES = {**{f"{name}-x3": [name] * 3 for name in NIST_DATASETS},
                "wampler1-3": PER_SERIES_CASES["wampler1-3"]}


# Measured before the refined solver was wired in, the lowest coefficient LRE per series: norris 14.0, pontius
# 13.2, noint1 14.7, noint2 15, longley 11.35, wampler1 11.3, wampler2 13.7, wampler3 9.55.
@pytest.mark.parametrize("case", list(DIRECT_CASES))
def test_the_batched_fit_per_series_meets_the_nist_strd_certified_values(case, monkeypatch):
    """NIST StRD (certified values: tests/data/nist_strd/certified.json): PerSeriesOLS fitted on
    a stack of series of one shape (three copies of a dataset, or wampler1-3); its
    coefficient_table() and residual SDs meet each series' certified coefficients to LRE ≥ 11,
    standard errors and residual SD to LRE ≥ 9: through the stacked QR (_fit_stack), and those
    series the precision rule finds too ill-conditioned through the refined single fit."""
    names = DIRECT_CASES[case]
    stacks, careful = spy_on_the_fit_paths(monkeypatch)
    design, y, intercept = stacked_design(names)
    model = PerSeriesOLS(fit_intercept=intercept).fit(design, y)
    shape = (len(names), len(y) // len(names), len(expected_terms(names[0])))
    assert len(stacks) == 1 and stacks[0][:2] == (shape, [True] * len(names))
    assert careful == [shape[1]] * sum(stacks[0][2])
    assert model.refined_.tolist() == stacks[0][2]
    table = model.coefficient_table()
    failures = []
    for position, (label, name) in enumerate(zip(model.series_, names)):
        own = table[table["series"] == label]
        assert list(own["term"]) == expected_terms(name)
        missed, _ = shortfalls(name, own["estimate"], own["std_error"], model.resid_sd_[position])
        failures += [f"{label} ({name}): {item}" for item in missed]
    assert not failures, "; ".join(failures)
