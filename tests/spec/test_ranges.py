"""The range of every number in the spec and the CSV options (pipeline/spec/ranges.py).

Each bounded key is tried at its most (accepted) and just past it (refused at its key);
every float key refuses .inf and .nan. The specs and the data file are invented
(tests/data/bad_specs/base.csv); the bounds are the module's own constants.
"""

from __future__ import annotations

import copy
from pathlib import Path

import pytest
import yaml
from conftest import TEST_DATA, run_cli

from pipeline import SpecError, load_spec
from pipeline.spec.ranges import (
    MOST_CHANGE,
    MOST_FOLDS,
    MOST_MEGABYTES,
    MOST_MONTHS,
    MOST_PENALTY,
    MOST_PERCENT,
    MOST_ROWS,
    MOST_RUNS,
    MOST_SCALE_UNITS,
    MOST_SEED,
    MOST_SHEETS,
    MOST_VALUE,
)
from pipeline.spec.schema import MOST_MONTHS_AHEAD

DATA = TEST_DATA / "bad_specs" / "base.csv"
BASE = {"name": "ranged", "input": {"file": str(DATA), "date_column": "month"}, "target": "y",
        "drivers": {"numeric": ["x1", "x2"]},
        "validation": {"method": "holdout", "last_periods": 6}, "models": ["ols"],
        "output": {"folder": "reports"}}
ROLLING = {"method": "rolling_origin"}

# (where the value goes, the key reported, the most, a float key)
BOUNDED = [
    (("input", "max_rows"), "input.max_rows", MOST_ROWS),
    (("input", "max_megabytes"), "input.max_megabytes", MOST_MEGABYTES),
    (("input", "sheet"), "input.sheet", MOST_SHEETS),
    (("autocorrelation_lags",), "autocorrelation_lags", MOST_MONTHS),
    (("output", "warn_after_runs_without_skill"), "output.warn_after_runs_without_skill", MOST_RUNS),
    (("columns", "x1", "max"), "columns.x1.max", MOST_VALUE),
    (("columns", "x1", "min"), "columns.x1.min", -MOST_VALUE),
    (("drivers", "lags", 0, "lags", 0), "drivers.lags[0].lags[0]", MOST_MONTHS),
    (("drivers", "lags", 0, "rolling_means", 0), "drivers.lags[0].rolling_means[0]", MOST_MONTHS),
    (("drivers", "lags", 0, "differences", 0), "drivers.lags[0].differences[0]", MOST_MONTHS),
    (("drivers", "lags", 0, "start_lag"), "drivers.lags[0].start_lag", MOST_MONTHS),
    (("drivers", "categorical", 0, "smoothing"), "drivers.categorical[0].smoothing", MOST_ROWS),
    (("drivers", "categorical", 0, "group_below"), "drivers.categorical[0].group_below", MOST_ROWS),
    (("models", 0, "penalties", 0), "models[0].penalties[0]", MOST_PENALTY),
    (("models", 0, "huber_threshold"), "models[0].huber_threshold", MOST_SCALE_UNITS),
    (("scenarios", 0, "changes", 0, "set"), "scenarios[0].changes[0].set", MOST_CHANGE),
    (("scenarios", 0, "changes", 0, "add"), "scenarios[0].changes[0].add", -MOST_CHANGE),
    (("scenarios", 0, "changes", 0, "percent"), "scenarios[0].changes[0].percent", MOST_PERCENT),
    (("validation", "last_periods"), "validation.last_periods", MOST_MONTHS),
    (("validation", "horizon"), "validation.horizon", MOST_MONTHS_AHEAD),
    (("validation", "gap"), "validation.gap", MOST_MONTHS),
    (("validation", "min_train_periods"), "validation.min_train_periods", MOST_MONTHS),
    (("validation", "step"), "validation.step", MOST_MONTHS),
    (("validation", "origins"), "validation.origins", MOST_MONTHS),
    (("validation", "folds"), "validation.folds", MOST_FOLDS),
    (("validation", "seed"), "validation.seed", MOST_SEED),
]


def spec_with(place: tuple, value, folder: Path) -> Path:
    """Write the base spec with the value at its place (and what the key needs beside it)."""
    spec = copy.deepcopy(BASE)
    head = place[0]
    if head == "drivers" and place[1] == "lags":
        spec["drivers"]["lags"] = [{"column": "y"} if place[3] == "lags" else {"column": "y", "lags": [1]}]
    elif head == "drivers":
        spec["drivers"] = {"numeric": ["x1"], "categorical": [{"column": "x2", "encoding": "target_mean"}]}
        if place[3] == "group_below":
            del spec["drivers"]["categorical"][0]["encoding"]
    elif head == "models":
        spec["models"] = [{"kind": "ridge" if place[2] == "penalties" else "huber"}]
    elif head == "scenarios":
        spec["scenarios"] = [{"name": "s", "changes": [{"column": "x1"}]}]
    elif head == "columns":
        spec["columns"] = {"x1": {"type": "number"}}
    elif head == "validation" and place[1] not in ("last_periods",):
        spec["validation"] = ({"method": "kfold"} if place[1] in ("folds", "seed") else dict(ROLLING))
    elif head == "autocorrelation_lags":
        spec["standard_errors"] = "hac"
    node = spec
    for part, following in zip(place, place[1:], strict=False):
        if isinstance(node, list) and part == len(node):
            node.append({} if isinstance(following, str) else [])
        elif isinstance(node, dict) and part not in node:
            node[part] = {} if isinstance(following, str) else []
        node = node[part]
    if isinstance(node, list) and place[-1] == len(node):
        node.append(value)
    else:
        node[place[-1]] = value
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def past(most: float | int) -> float | int:
    if isinstance(most, int):
        return most + 1
    return most * 10


@pytest.mark.parametrize("place, key, most", BOUNDED, ids=[b[1] for b in BOUNDED])
def test_a_number_at_its_most_is_taken_and_one_past_it_is_refused_at_its_key(place, key, most, tmp_path):
    spec = load_spec(spec_with(place, most, tmp_path))
    assert spec.name == "ranged"
    with pytest.raises(SpecError, match="beyond what castline can use here") as caught:
        load_spec(spec_with(place, past(most), tmp_path))
    assert key in [problem.key for problem in caught.value.problems]


FLOAT_KEYS = [b for b in BOUNDED if isinstance(b[2], float)] + [
    (("significance_level",), "significance_level", 0.5),
    (("models", 0, "l1_share"), "models[0].l1_share", 0.5),
    (("drivers", "numeric", 1, "clip_quantiles"), "drivers.numeric[1].clip_quantiles[1]", 0.5),
]


@pytest.mark.parametrize("value", [float("inf"), float("-inf"), float("nan")], ids=["inf", "-inf", "nan"])
@pytest.mark.parametrize("place, key, most", FLOAT_KEYS, ids=[b[1] for b in FLOAT_KEYS])
def test_no_float_key_takes_inf_or_nan(place, key, most, value, tmp_path):
    if place[-1] == "clip_quantiles":
        spec = copy.deepcopy(BASE)
        spec["drivers"]["numeric"] = ["x1", {"column": "x2", "clip_quantiles": [0.1, value]}]
        path = tmp_path / "spec.yaml"
        path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    else:
        path = spec_with(place, value, tmp_path)
    with pytest.raises(SpecError) as caught:
        load_spec(path)
    found = {problem.key: problem.message for problem in caught.value.problems}
    assert key in found and "finite" in found[key], found


def csv_spec(folder: Path, **options) -> Path:
    spec = copy.deepcopy(BASE)
    spec["input"]["csv"] = options
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


@pytest.mark.parametrize("encoding", ["utf-8", "UTF8", "latin-1", "cp1252", "utf-16", "utf-8-sig", "shift_jis"])
def test_a_text_encoding_is_taken(encoding, tmp_path):
    assert load_spec(csv_spec(tmp_path, encoding=encoding)).input.csv.encoding == encoding


@pytest.mark.parametrize("encoding", ["rot13", "base64", "hex", "zlib", "bz2", "uu", "quopri", "undefined",
                                      "punycode"])
def test_a_codec_that_does_not_read_text_is_refused(encoding, tmp_path):
    with pytest.raises(SpecError, match="is not a text encoding") as caught:
        load_spec(csv_spec(tmp_path, encoding=encoding))
    # safe_dump writes name, input, file, date_column, csv, then encoding on line 6
    assert caught.value.key == "input.csv.encoding" and caught.value.line == 6


@pytest.mark.parametrize("delimiter", [",", ";", "|", "\t", " ", "~"])
def test_a_printable_delimiter_or_a_tab_is_taken(delimiter, tmp_path):
    assert load_spec(csv_spec(tmp_path, delimiter=delimiter)).input.csv.delimiter == delimiter


@pytest.mark.parametrize("key, mark", [("delimiter", "\n"), ("delimiter", "\r"), ("delimiter", '"'),
                                       ("delimiter", "'"), ("delimiter", "\x00"), ("delimiter", "a"),
                                       ("delimiter", "7"), ("delimiter", "\x0b"), ("decimal", "\t"),
                                       ("decimal", "\n"), ("thousands", '"'), ("thousands", "0")])
def test_a_separator_that_cannot_split_a_csv_is_refused(key, mark, tmp_path):
    with pytest.raises(SpecError, match="cannot separate a CSV's values") as caught:
        load_spec(csv_spec(tmp_path, **{key: mark}))
    assert caught.value.key == f"input.csv.{key}"


def test_a_scenario_setting_a_numeric_driver_to_text_is_refused_at_its_key(tmp_path):
    path = spec_with(("scenarios", 0, "changes", 0, "set"), "1e5", tmp_path)
    with pytest.raises(SpecError, match="'x1' is a numeric driver: set it to a number") as caught:
        load_spec(path)
    assert caught.value.key == "scenarios[0].changes[0].set"


def test_run_at_the_most_months_ends_in_a_user_mistake_not_a_crash(tmp_path):
    # The longest lag check takes: the 24 months of base.csv cannot hold it, and run says so.
    spec = dict(copy.deepcopy(BASE), output={"folder": str(tmp_path / "reports")})
    spec["drivers"]["lags"] = [{"column": "y", "rolling_means": [MOST_MONTHS]}]
    path = tmp_path / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    code, out, err = run_cli(["run", str(path)])
    assert code == 2 and err.startswith("castline: ") and err.count("\n") == 1, err
    assert "lags reach further back" in err


def test_check_refuses_what_run_would_crash_on(tmp_path):
    path = spec_with(("models", 0, "penalties", 0), float("inf"), tmp_path)
    code, out, err = run_cli(["check", str(path)])
    assert code == 2 and "models[0].penalties[0]: must be a finite number" in err, err


def test_run_with_scenarios_at_their_most_does_not_crash(tmp_path):
    # Past these, a forecast can outgrow what the pages can show (set: -1e150 crashed the report).
    spec = dict(copy.deepcopy(BASE), output={"folder": str(tmp_path / "reports")})
    spec["scenarios"] = [{"name": "a", "changes": [{"column": "x1", "set": MOST_CHANGE}]},
                         {"name": "b", "changes": [{"column": "x2", "percent": MOST_PERCENT}]},
                         {"name": "c", "changes": [{"column": "x1", "add": -MOST_CHANGE}]}]
    path = tmp_path / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    code, out, err = run_cli(["run", str(path)])
    assert code == 0, err
    assert len(list((tmp_path / "reports").glob("run-*/report.html"))) == 1
