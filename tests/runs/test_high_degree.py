"""A numeric driver of degree 10, the most a spec allows, end to end.

The data are conftest's tiny invented table (y = 10 + 2·x + noise), not reference values:
the test checks the plumbing of ten powers through a run and its model file, not a fit's
numbers. The model file's forecast must equal the run's forecast.csv to the digit, which
holds only while both build the driver's powers by the same routine.
"""

from __future__ import annotations

import json

import pandas as pd
from conftest import run_cli, tiny_data, write_tiny_spec

DEGREE = 10


def _degrees(node):
    """Every value stored under a key "degree", anywhere in the model file."""
    if isinstance(node, dict):
        for key, value in node.items():
            if key == "degree":
                yield value
            yield from _degrees(value)
    elif isinstance(node, list):
        for value in node:
            yield from _degrees(value)


def test_a_driver_of_degree_ten_runs_and_its_model_file_forecasts_the_same(tmp_path):
    spec = write_tiny_spec(tmp_path / "data", tiny_data(), actuals_to="2021-12",
                           drivers={"numeric": [{"column": "x", "degree": DEGREE, "standardise": True}]})
    code, _, err = run_cli(["run", str(spec)])
    assert code == 0, err
    (run,) = (tmp_path / "data" / "runs").glob("run-*")
    terms = pd.read_csv(run / "coefficients.csv").query("model == 'ols'")["term"].tolist()
    assert terms == ["intercept", "standardised x",
                     *(f"(standardised x)^{k}" for k in range(2, DEGREE + 1))]
    assert DEGREE in set(_degrees(json.loads((run / "model.json").read_text())))

    code, _, err = run_cli(["forecast", str(run / "model.json"), str(tmp_path / "data" / "data.csv"),
                            "--output", str(tmp_path / "again.csv")])
    assert code == 0, err
    keys = ["model", "period", "series"]
    again = pd.read_csv(tmp_path / "again.csv", dtype=str).sort_values(keys, ignore_index=True)
    ran = pd.read_csv(run / "forecast.csv", dtype=str).sort_values(keys, ignore_index=True)
    assert len(ran) == len(again) > 0 and "ols" in set(ran["model"])
    # the same digits as written, every model's forecast of every month
    assert again[keys + ["forecast"]].equals(ran[keys + ["forecast"]])
