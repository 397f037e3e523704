"""pipeline/review/compare.py: what changed between two runs.

Reference values are worked out by hand on the small tables below (the arithmetic in the
comments); the last test is plumbing on the tiny invented runs, checked against their files.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import yaml

from pipeline.core.errors import UserError
from pipeline.record.ledger import reading
from pipeline.review.compare import (
    coefficient_moves,
    compare_runs,
    find_run,
    flatten,
    metric_changes,
    month_changes,
    spec_differences,
)

NAN = float("nan")


def test_flatten_names_nested_keys_and_list_items():
    assert flatten({"a": 1, "b": {"c": [10, {"d": 2}]}, "e": [], "f": {}}) == {
        "a": 1, "b.c[0]": 10, "b.c[1].d": 2, "e": [], "f": {}}


def test_spec_differences_lists_changed_added_and_removed_keys_in_order():
    earlier = {"name": "x", "validation": {"last_periods": 12, "method": "holdout"},
               "models": ["ols", "ridge"]}
    later = {"name": "x", "validation": {"last_periods": 6, "method": "holdout"},
             "models": ["ols"], "description": "new"}
    table = spec_differences(earlier, later)
    # by hand: last_periods 12 → 6; models[1] dropped; description added (earlier's keys first)
    assert table.to_dict(orient="records") == [
        {"key": "validation.last_periods", "earlier": 12, "later": 6},
        {"key": "models[1]", "earlier": "ridge", "later": "(not set)"},
        {"key": "description", "earlier": "(not set)", "later": "new"}]


def test_identical_specs_differ_in_nothing():
    spec = {"a": {"b": [1, 2]}, "c": None}
    table = spec_differences(spec, json.loads(json.dumps(spec)))
    assert table.empty and list(table.columns) == ["key", "earlier", "later"]


def periods(rows) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["period", "actual_rows", "planned_rows", "sha256"])


def test_month_changes_names_what_changed_in_each_month():
    earlier = periods([("2023-12", 2, 0, "a"), ("2024-01", 2, 0, "b"), ("2024-02", 2, 0, "c"),
                       ("2024-03", 0, 2, "d"), ("2024-04", 0, 2, "e"), ("2024-06", 1, 1, "f"),
                       ("2024-07", 0, 2, "g")])
    later = periods([("2023-12", 0, 2, "A"), ("2024-01", 2, 0, "b"), ("2024-02", 2, 0, "C"),
                     ("2024-03", 2, 0, "D"), ("2024-04", 0, 2, "E"), ("2024-05", 0, 2, "h"),
                     ("2024-06", 2, 0, "F")])
    table = month_changes(earlier, later)
    # by hand, month by month (2024-01's hash is the same: not listed)
    assert table.to_dict(orient="records") == [
        {"period": "2023-12", "change": "actuals removed", "earlier_actual_rows": 2, "later_actual_rows": 0},
        {"period": "2024-02", "change": "actuals revised", "earlier_actual_rows": 2, "later_actual_rows": 2},
        {"period": "2024-03", "change": "actuals added", "earlier_actual_rows": 0, "later_actual_rows": 2},
        {"period": "2024-04", "change": "planned drivers changed", "earlier_actual_rows": 0,
         "later_actual_rows": 0},
        {"period": "2024-05", "change": "new month to forecast", "earlier_actual_rows": 0,
         "later_actual_rows": 0},
        {"period": "2024-06", "change": "actuals added and revised", "earlier_actual_rows": 1,
         "later_actual_rows": 2},
        {"period": "2024-07", "change": "month to forecast dropped", "earlier_actual_rows": 0,
         "later_actual_rows": 0}]


def coefficients(rows) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["model", "term", "estimate", "std_error"])


def test_coefficient_moves_rank_by_the_change_in_earlier_standard_errors():
    earlier = coefficients([("ols", "intercept", 10.0, 1.0), ("ols", "x", 2.0, 0.1),
                            ("ols", "z", 5.0, 5.0), ("ols", "dropped", 1.0, 0.5),
                            ("ols_per_series", "left out", NAN, NAN)])
    later = coefficients([("ols", "intercept", 11.0, 1.0), ("ols", "x", 2.5, 0.1),
                          ("ols", "z", 5.0, 5.0), ("ols", "added", 3.0, 1.0),
                          ("ols_per_series", "left out", NAN, NAN)])
    table = coefficient_moves(earlier, later, top=10)
    # by hand: x moved 0.5 = 5 earlier standard errors; intercept 1 = 1 s.e.; z did not move;
    # added and dropped terms have no earlier s.e. and come after; "left out" is in neither fit
    assert list(table["term"][:2]) == ["x", "intercept"]
    assert set(table["term"][2:]) == {"added", "dropped"}
    np.testing.assert_allclose(table["change"][:2], [0.5, 1.0])
    np.testing.assert_allclose(table["change_in_se"][:2], [5.0, 1.0])
    assert list(coefficient_moves(earlier, later, top=1)["term"]) == ["x"]


def test_coefficient_moves_without_standard_errors_rank_by_size():
    earlier = coefficients([("ridge", "a", 1.0, NAN), ("ridge", "b", 1.0, NAN), ("ridge", "c", 1.0, NAN)])
    later = coefficients([("ridge", "a", 1.5, NAN), ("ridge", "b", -2.0, NAN), ("ridge", "c", 1.0, NAN)])
    table = coefficient_moves(earlier, later, top=10)
    # |b's change| = 3 > |a's| = 0.5; c unchanged
    assert table[["term", "change"]].to_dict(orient="records") == [
        {"term": "b", "change": -3.0}, {"term": "a", "change": 0.5}]


def test_metric_changes_later_minus_earlier_with_the_baseline_first():
    earlier = pd.DataFrame({"model": ["ols", "mean_baseline"], "mae": [8.0, 10.0], "rmse": [9.0, 12.0],
                            "skill_vs_mean": [0.2, 0.0]})
    later = pd.DataFrame({"model": ["ols", "mean_baseline", "ridge"], "mae": [7.0, 10.0, 6.0],
                          "rmse": [9.5, 12.0, 8.0], "skill_vs_mean": [0.3, 0.0, 0.4]})
    table = metric_changes(earlier, later).set_index("model")
    assert list(table.index) == ["mean_baseline", "ols", "ridge"]
    # by hand: ols 7 − 8 = −1, 9.5 − 9 = +0.5, 0.3 − 0.2 = +0.1; ridge is new: no change
    np.testing.assert_allclose(table.loc["ols", ["mae_change", "rmse_change", "skill_vs_mean_change"]]
                               .astype(float), [-1.0, 0.5, 0.1])
    assert table.loc["mean_baseline", "mae_change"] == 0.0
    assert np.isnan(table.loc["ridge", "mae_change"]) and table.loc["ridge", "mae_later"] == 6.0


def test_compare_two_runs_of_the_ledger(tiny_runs):
    _, ledger_file, runs = tiny_runs
    second, third = runs[1][0], runs[2][0]
    with reading(ledger_file) as conn:
        # given newest first, by a shortened id (the random tail)
        comparison = compare_runs(conn, third.folder.run_id[-6:], second.folder.run_id, ledger_file)
        with pytest.raises(UserError, match="no run 'run-nope'"):
            find_run(conn, "run-nope", ledger_file)
    assert comparison.swapped and comparison.earlier["run_id"] == second.folder.run_id
    # the spec.yaml files of the two runs differ in the description only
    specs = [yaml.safe_load((r.folder.path / "spec.yaml").read_text(encoding="utf-8")) for r in (second, third)]
    assert list(comparison.spec["key"]) == ["description"] and specs[1]["description"] == "Revised February."
    assert comparison.months.to_dict(orient="records") == [
        {"period": "2022-02", "change": "actuals revised", "earlier_actual_rows": 1, "later_actual_rows": 1}]
    summary = comparison.as_dict()["data"]
    assert summary["same_input"] is False and summary["rows_with_actuals_added"] == 0
