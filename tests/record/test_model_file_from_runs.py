"""model.json: a run's fitted plan and models, loaded back, forecast what the run forecast.

The runs are on data simulated here (numpy.random.default_rng, fixed seeds) and written
as CSV into a temporary folder. The reference for every forecast is the run's own
forecast.csv (and its in-memory forecast table): OLS must agree bit for bit, the other
models to a relative 1e-12. Tampered files must stop with exit code 2 and one line, and
loading must never run code (no pickle, no eval, no import of a named module).
"""

from __future__ import annotations

import base64
import binascii
import builtins
import copy
import importlib
import json
import os
import pickle
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import pipeline
from pipeline import cli
from pipeline.record.model_file import ModelFileError, load_model

HISTORY, FUTURE = 84, 6


def simulate(seed: int) -> pd.DataFrame:
    """Monthly sales in three regions, with price, promotion days, a yearly cycle and a trend."""
    rng = np.random.default_rng(seed)
    months = pd.period_range("2017-01", periods=HISTORY + FUTURE, freq="M")
    rows = []
    for k, region in enumerate(["North", "South", "West"]):
        price = rng.uniform(8, 12, len(months)).round(2)
        promo = rng.integers(0, 8, len(months)).astype(float)
        season = 6 * np.sin(2 * np.pi * months.month.to_numpy() / 12)
        sales = (150 + 12 * k - 4 * price + 2.5 * promo + season + 0.1 * np.arange(len(months))
                 + rng.normal(0, 3, len(months)))
        sales[HISTORY:] = np.nan
        rows.append(pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"), "region": region,
                                  "shelf_price": price, "promo_days": promo, "sales": sales}))
    return pd.concat(rows, ignore_index=True)


def make_run(folder: Path, drivers: dict, models: list, **extra):
    folder.mkdir(parents=True, exist_ok=True)
    simulate(len(models)).to_csv(folder / "data.csv", index=False)
    validation = extra.pop("validation", {"method": "holdout", "last_periods": 12})
    spec = {"name": "stored-model-test",
            "input": {"file": "data.csv", "date_column": "month", "series": ["region"]},
            "target": "sales", "drivers": drivers, **extra, "validation": validation,
            "models": models, "output": {"folder": "reports"}}
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return pipeline.run(folder / "spec.yaml")


# The feature keys as in configs/compost_demo.yaml: a categorical driver, trend and Fourier terms.
CALENDAR_RUN = {
    "drivers": {"numeric": ["shelf_price", {"column": "promo_days", "standardise": True}],
                "categorical": [{"column": "region", "encoding": "one_hot", "reference": "North"}],
                "calendar": {"trend": True, "month_of_year": "fourier", "harmonics": 2}},
    "models": ["ols", {"kind": "ridge", "penalties": [1.0]}, "huber", "seasonal_naive", "drift",
               "last_value"],
}
LOG_RUN = {
    "drivers": {"numeric": [{"column": "shelf_price", "transform": "log"}, "promo_days"],
                "categorical": [{"column": "region", "encoding": "one_hot"}],
                "lags": [{"column": "promo_days", "lags": [1], "rolling_means": [3]}]},
    "models": ["ols", "lasso"],
    "target_transform": "log",
}
# A lag of the target one month back, shorter than the six months forecast: the run forecasts
# by its multi_step strategy. Between them: every linear kind of the catalogue, OLS fitted per
# series, a log target and a driver castline estimates (month_mean). Two forecast origins keep
# the backtest short.
SHORT_BACKTEST = {"method": "rolling_origin", "horizon": FUTURE, "min_train_periods": 72, "origins": 2}
DIRECT_RUN = {
    "drivers": {"numeric": ["shelf_price", "promo_days"],
                "lags": [{"column": "sales", "lags": [1], "rolling_means": [3]}]},
    "models": ["ols", {"kind": "ols", "per_series": True}, {"kind": "ridge", "penalties": [1.0]}, "lasso",
               "elastic_net", "huber", "drift"],
    "multi_step": "direct", "validation": SHORT_BACKTEST,
}
RECURSIVE_RUN = {
    "drivers": {"numeric": ["shelf_price", {"column": "promo_days", "future": "month_mean"}],
                "categorical": [{"column": "region", "encoding": "one_hot"}],
                "lags": [{"column": "sales", "lags": [1, 2]}]},
    "models": ["ols", {"kind": "ols", "per_series": True}, {"kind": "ridge", "penalties": [1.0]}, "lasso"],
    "multi_step": "recursive", "target_transform": "log", "validation": SHORT_BACKTEST,
}
RUNS = ["calendar", "log", "direct", "recursive"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("stored")
    return {"calendar": make_run(root / "calendar", **CALENDAR_RUN),
            "log": make_run(root / "log", **LOG_RUN),
            "direct": make_run(root / "direct", **DIRECT_RUN),
            "recursive": make_run(root / "recursive", **RECURSIVE_RUN)}


def _future(result) -> pd.DataFrame:
    """The months to forecast, in the order the run forecast them (by month, then region)."""
    data = pd.read_csv(result.spec.input.file)
    return data[data["sales"].isna()].sort_values(["month", "region"], kind="stable")


def _by_row(table: pd.DataFrame, kind: str) -> pd.Series:
    own = table[table["model"] == kind]
    return own.set_index(["period", "series"])["forecast"].sort_index()


# ------------------------------------------------------------------ forecasts agree

@pytest.mark.parametrize("which", RUNS)
def test_the_loaded_model_forecasts_exactly_what_the_run_wrote(which, runs):
    result = runs[which]
    stored = load_model(result.folder.path / "model.json")
    loaded = stored.forecast(_future(result))
    written = pd.read_csv(result.folder.path / "forecast.csv")    # what the run wrote
    kinds = [choice.name for choice in result.spec.models]          # ols and ols_per_series
    assert sorted(loaded["model"].unique()) == sorted(kinds)
    for kind in kinds:
        mine, theirs = _by_row(loaded, kind), _by_row(written, kind)
        in_memory = _by_row(result.forecast, kind)
        assert list(mine.index) == list(theirs.index) and len(mine) == 3 * FUTURE
        if kind == "ols":
            assert (mine.to_numpy() == theirs.to_numpy()).all(), kind      # bit for bit
            assert (mine.to_numpy() == in_memory.to_numpy()).all(), kind
        else:
            np.testing.assert_allclose(mine, theirs, rtol=1e-12, atol=0, err_msg=kind)
            np.testing.assert_allclose(mine, in_memory, rtol=1e-12, atol=0, err_msg=kind)


def test_the_loaded_ols_forecast_is_bit_for_bit_whatever_the_order_of_the_rows(runs):
    result = runs["calendar"]
    stored = load_model(result.folder.path / "model.json")
    written = _by_row(pd.read_csv(result.folder.path / "forecast.csv"), "ols")
    future = _future(result)
    orders = {"file order": future.sort_index(), "reversed": future.iloc[::-1]}
    orders.update({f"shuffled {seed}": future.sample(frac=1.0, random_state=seed) for seed in range(5)})
    differing = [name for name, rows in orders.items()
                 if not (_by_row(stored.forecast(rows, model="ols"), "ols").to_numpy()
                         == written.to_numpy()).all()]
    # Within a rounding of each other in every order:
    for rows in orders.values():
        np.testing.assert_allclose(_by_row(stored.forecast(rows, model="ols"), "ols"), written,
                                   rtol=1e-13)
    assert differing == []


def test_one_model_can_be_asked_for_and_an_unknown_one_is_refused(runs):
    stored = load_model(runs["calendar"].folder.path / "model.json")
    only = stored.forecast(_future(runs["calendar"]), model="ridge")
    assert set(only["model"]) == {"ridge"}
    with pytest.raises(pipeline.core.errors.UserError, match="holds no model 'lasso'"):
        stored.forecast(_future(runs["calendar"]), model="lasso")


def test_the_file_holds_the_plan_levels_scaling_coefficients_and_versions(runs):
    document = json.loads((runs["calendar"].folder.path / "model.json").read_text(encoding="utf-8"))
    assert document["format"] == "castline-model"
    assert {"castline", "numpy", "pandas", "scipy", "scikit-learn"} <= set(document["versions"])
    parts = {part["class"]: part["state"] for part in document["plan"]["parts"]}
    assert {"NumericTerms", "OneHotEncoder", "TrendTerm", "FourierTerms"} <= set(parts)
    assert parts["OneHotEncoder"]["known_levels_"] == ["North", "South", "West"]
    assert parts["OneHotEncoder"]["reference_"] == "North"
    promo = next(p["state"] for p in document["plan"]["parts"] if p["state"].get("column") == "promo_days")
    history = pd.read_csv(runs["calendar"].spec.input.file).dropna(subset=["sales"])
    assert promo["centre_"] == pytest.approx(history["promo_days"].mean(), rel=1e-12)
    ols = document["models"]["ols"]
    coef = runs["calendar"].coefficients.query("model == 'ols'")["estimate"].to_numpy()
    assert ols["intercept"] == coef[0]
    assert ols["coef"]["__array__"] == list(coef[1:])
    assert len(ols["coef"]["__array__"]) == len(document["feature_names"])


def _strings(value):
    if isinstance(value, str):
        yield value
    elif isinstance(value, dict):
        for key, item in value.items():
            yield key
            yield from _strings(item)
    elif isinstance(value, list):
        for item in value:
            yield from _strings(item)


@pytest.mark.parametrize("which", ["calendar", "log"])
def test_the_file_is_plain_json_with_no_pickle_and_no_base64_blob(which, runs):
    raw = (runs[which].folder.path / "model.json").read_bytes()
    assert not raw.startswith(b"\x80")                             # pickle protocol 2+ header
    document = json.loads(raw.decode("utf-8"))                     # valid JSON, UTF-8
    blob = re.compile(r"^[A-Za-z0-9+/=_-]{24,}$")
    for text in _strings(document):
        assert "pickle" not in text.lower()
        if blob.match(text) and not re.fullmatch(r"[a-z_]+", text):
            try:
                decoded = base64.b64decode(text + "=" * (-len(text) % 4), validate=False)
            except (binascii.Error, ValueError):
                continue
            pytest.fail(f"looks like a base64 blob: {text[:40]}… → {decoded[:10]!r}")


# ------------------------------------------------------------------ the command line

def _castline() -> list[str]:
    script = Path(sys.executable).parent / "castline"
    return [str(script)] if script.exists() else [sys.executable, "-m", "pipeline"]


def test_castline_forecast_in_a_subprocess_writes_the_forecasts(runs, tmp_path):
    result = runs["calendar"]
    rows = tmp_path / "new_rows.csv"
    _future(result).drop(columns=["sales"]).to_csv(rows, index=False)
    output = tmp_path / "out.csv"
    done = subprocess.run([*_castline(), "forecast", str(result.folder.path / "model.json"), str(rows),
                           "--output", str(output)], capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONWARNINGS": "ignore"})
    assert done.returncode == 0, done.stderr
    assert f"forecasts written to {output}" in done.stdout
    table = pd.read_csv(output)
    empirical = ["empirical_low_80", "empirical_high_80", "empirical_low_95", "empirical_high_95"]
    assert list(table.columns) == ["period", "horizon", "series", "model", "forecast", *empirical]
    written = pd.read_csv(result.folder.path / "forecast.csv")
    assert (_by_row(table, "ols").to_numpy() == _by_row(written, "ols").to_numpy()).all()
    np.testing.assert_allclose(_by_row(table, "huber"), _by_row(written, "huber"), rtol=1e-12)
    keys = ["period", "series", "model"]
    merged = table.merge(written, on=keys, validate="one_to_one", suffixes=("", "_run"))
    assert len(merged) == len(written)
    for column in ["horizon", *empirical]:      # the run's own empirical intervals
        np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, err_msg=column)

    # A tampered file, through the real process too: exit 2, one line, no traceback.
    bad = tmp_path / "bad.json"
    bad.write_text("{not json", encoding="utf-8")
    done = subprocess.run([*_castline(), "forecast", str(bad), str(rows)], capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and done.stderr.startswith("castline: ")
    assert "Traceback" not in done.stderr


EMPIRICAL = ["empirical_low_80", "empirical_high_80", "empirical_low_95", "empirical_high_95"]


def _command(result, rows: pd.DataFrame, tmp_path: Path, capsys) -> tuple[int, str, str, Path]:
    """Run `castline forecast` on the rows (written as rows.csv) with the run's model.json;
    return the exit code, stdout, stderr and the data file."""
    path = tmp_path / "rows.csv"
    rows.to_csv(path, index=False)
    code = cli.main(["forecast", str(result.folder.path / "model.json"), str(path),
                     "--output", str(tmp_path / "out.csv"), "--overwrite"])
    printed = capsys.readouterr()
    return code, printed.out, printed.err, path


@pytest.mark.parametrize("given", ["the run's input", "the months to forecast alone"])
@pytest.mark.parametrize("which", RUNS)
def test_castline_forecast_gives_the_runs_forecast_csv(which, given, runs, tmp_path, capsys):
    # The run's own input (the history, whose actuals the target's lags read, and the months
    # to forecast, their target empty) or those months alone without the target column (the
    # lags then read the history the model file kept): the forecasts and empirical bounds of
    # forecast.csv, every model, whatever the strategy.
    result = runs[which]
    data = pd.read_csv(result.spec.input.file)
    rows = data if given == "the run's input" else _future(result).drop(columns=["sales"])
    code, out, err, _ = _command(result, rows, tmp_path, capsys)
    assert code == 0, err
    assert out.splitlines() == [f"forecasts written to {tmp_path / 'out.csv'}"]     # no note
    mine = pd.read_csv(tmp_path / "out.csv")
    written = pd.read_csv(result.folder.path / "forecast.csv")
    merged = mine.merge(written, on=["period", "series", "model"], validate="one_to_one",
                        suffixes=("", "_run"))
    assert len(merged) == len(mine) == len(written) == 3 * FUTURE * len(result.spec.models)
    for column in ["forecast", "horizon", *EMPIRICAL]:
        np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, atol=0, err_msg=column)


def _one_month_more(result) -> pd.DataFrame:
    """The months to forecast and, for North, the month after them."""
    future = _future(result)
    last = future[(future["region"] == "North") & (future["month"] == future["month"].max())]
    later = (pd.Period(last["month"].iloc[0], freq="M") + 1).to_timestamp().strftime("%Y-%m-%d")
    return pd.concat([future, last.assign(month=later)], ignore_index=True)


def test_a_month_beyond_the_direct_fits_is_refused_and_the_recursive_strategy_forecasts_it(
        runs, tmp_path, capsys):
    # The direct run fitted a model for each of the six months ahead it forecast, its target's
    # rolling mean read further back each month: none reads seven months ahead.
    rows = _one_month_more(runs["direct"])
    code, _, err, path = _command(runs["direct"], rows, tmp_path, capsys)
    _assert_refused(code, err, f"{path}:{len(rows) + 1}: ")
    assert "is 7 months after the last actual of the target (2023-12)" in err
    # Recursively, a month further is one more month fed back; the others are as the run wrote.
    code, _, err, _ = _command(runs["recursive"], _one_month_more(runs["recursive"]), tmp_path, capsys)
    assert code == 0, err
    mine = pd.read_csv(tmp_path / "out.csv")
    assert mine["horizon"].max() == FUTURE + 1 and mine["forecast"].notna().all()
    written = pd.read_csv(runs["recursive"].folder.path / "forecast.csv")
    merged = mine.merge(written, on=["period", "series", "model"], suffixes=("", "_run"))
    assert len(merged) == len(written)
    np.testing.assert_allclose(merged["forecast"], merged["forecast_run"], rtol=1e-9, atol=0)


def test_an_actual_in_the_data_file_is_read_by_the_lags_and_not_forecast(runs, tmp_path, capsys):
    # The first month to forecast given an actual: the recursion starts after it, from it.
    result = runs["recursive"]
    data = pd.read_csv(result.spec.input.file)
    first = data["sales"].isna() & (data["month"] == _future(result)["month"].min())
    code, _, err, _ = _command(result, data.assign(sales=data["sales"].mask(first, 500.0)), tmp_path, capsys)
    assert code == 0, err
    mine = pd.read_csv(tmp_path / "out.csv").set_index(["period", "series", "model"])["forecast"]
    written = pd.read_csv(result.folder.path / "forecast.csv").set_index(["period", "series", "model"])
    assert set(written.index) - set(mine.index) == set(written.index[written["horizon"] == 1])
    raised = mine - written["forecast"].reindex(mine.index)
    # sales far above its usual level (about 100) a month earlier raise the next month's OLS forecast
    assert (raised.xs("ols", level="model").xs("2024-02", level="period") > 0).all()


def test_a_file_of_version_3_with_a_target_lag_shorter_than_the_months_ahead_is_refused(
        runs, tmp_path, capsys):
    # Version 3 did not keep the run's strategy: the first month ahead still forecasts as the
    # run did, a later one asks for a new run.
    result = runs["direct"]
    document = json.loads((result.folder.path / "model.json").read_text(encoding="utf-8"))
    document["format_version"] = 3
    del document["multi_step"]
    path = tmp_path / "model.json"
    path.write_text(json.dumps(document), encoding="utf-8")
    future = _future(result)
    rows = tmp_path / "rows.csv"
    future.to_csv(rows, index=False)
    code = cli.main(["forecast", str(path), str(rows)])
    err = capsys.readouterr().err
    _assert_refused(code, err, f"castline: {path}: this model file (format version 3)")
    assert "more than 1 month after the last actual" in err and "rerun castline run" in err
    first = load_model(path).forecast(future[future["month"] == future["month"].min()], model="ols")
    written = _by_row(pd.read_csv(result.folder.path / "forecast.csv"), "ols")
    assert (_by_row(first, "ols").to_numpy() == written.iloc[:3].to_numpy()).all()


def _with_cell(rows: pd.DataFrame, position: int, column: str, value) -> pd.DataFrame:
    changed = rows.astype({column: object})
    changed.loc[position, column] = value
    return changed


def _to_forecast(rows: pd.DataFrame, k: int) -> int:
    """The position of the k-th row with an empty target."""
    return int(np.flatnonzero(rows["sales"].isna())[k])


# Mistakes in the run's input given to `castline forecast`: each names the data file, the
# line (the header is line 1; None: no line) and the column, never the run's training file.
DATA_MISTAKES = {
    "an empty driver cell": (lambda rows: (_with_cell(rows, _to_forecast(rows, 2), "shelf_price", None),
                                           _to_forecast(rows, 2) + 2),
                             "column 'shelf_price': the cell is empty"),
    "text in a number column": (lambda rows: (_with_cell(rows, _to_forecast(rows, 1), "shelf_price", "abc"),
                                              _to_forecast(rows, 1) + 2),
                                "column 'shelf_price': 'abc' is not a number"),
    "text among the target's actuals": (lambda rows: (_with_cell(rows, 0, "sales", "lots"), 2),
                                        "column 'sales': 'lots' is not a number"),
    "a driver column missing": (lambda rows: (rows.drop(columns=["shelf_price"]), None),
                                "column 'shelf_price': the file has no such column, and the model needs it"),
    "the series column missing": (lambda rows: (rows.drop(columns=["region"]), None),
                                  "column 'region': the file has no such column"),
    "every row with its target": (lambda rows: (rows.dropna(subset=["sales"]), None),
                                  "column 'sales': every row has the target filled"),
}


@pytest.mark.parametrize("which", ["calendar", "recursive"])
@pytest.mark.parametrize("case", sorted(DATA_MISTAKES))
def test_a_mistake_in_the_data_file_names_its_line_and_column(case, which, runs, tmp_path, capsys):
    change, message = DATA_MISTAKES[case]
    rows, line = change(pd.read_csv(runs[which].spec.input.file))
    code, _, err, path = _command(runs[which], rows, tmp_path, capsys)
    _assert_refused(code, err, f"castline: {path}{'' if line is None else f':{line}'}: {message}")
    assert "data.csv" not in err                  # the run's input file is not to blame


def test_an_actual_the_models_log_cannot_take_names_its_line(runs, tmp_path, capsys):
    rows = _with_cell(pd.read_csv(runs["recursive"].spec.input.file), 4, "sales", 0.0)
    code, _, err, path = _command(runs["recursive"], rows, tmp_path, capsys)
    _assert_refused(code, err, f"castline: {path}:6: column 'sales': 0 is not above 0, so target_transform: "
                               "log cannot be applied")

# ------------------------------------------------------------------ tampered files

def _tamper(document: dict, change) -> dict:
    changed = copy.deepcopy(document)
    change(changed)
    return changed


def _part(document: dict, cls: str) -> dict:
    return next(p for p in document["plan"]["parts"] if p["class"] == cls)


TAMPERED = {
    "unknown transformer class": lambda d: _part(d, "TrendTerm").__setitem__("class", "Popen"),
    "unknown plan class": lambda d: d["plan"].__setitem__("class", "os.system"),
    "model class outside the allow-list": lambda d: d["models"]["mean_baseline"].__setitem__(
        "class", "OLSModel"),
    "unknown settings class": lambda d: d["plan"]["state"]["numeric"][0].__setitem__("class", "Path"),
    "a value tagged as something unknown": lambda d: _part(d, "TrendTerm")["state"].__setitem__(
        "first_month_", {"__pickle__": base64.b64encode(b"\x80\x04cos\nsystem\n").decode()}),
    "an unknown array type": lambda d: d["models"]["ols"]["coef"].__setitem__("dtype", "complex128"),
    "missing top-level key": lambda d: d.pop("models"),
    "missing model key": lambda d: d["models"]["ols"].pop("coef"),
    "missing smearing": lambda d: d["models"]["ols"].__setitem__(
        "target_transform", {"column": "sales", "kind": "log"}),
    "an unknown target transform": lambda d: d["models"]["ols"].__setitem__(
        "target_transform", {"column": "sales", "kind": "exp", "smearing": 1.0}),
    "a '__class__' attribute name": lambda d: _part(d, "TrendTerm")["state"].__setitem__(
        "__class__", "FeaturePlan"),
    "a dunder attribute name": lambda d: d["plan"]["state"].__setitem__("__reduce__", "os.system"),
    "a reference to a part not in the file": lambda d: d["plan"]["state"]["row_parts_"][0].__setitem__(
        "__part__", 99),
    "another format": lambda d: d.__setitem__("format", "pickle"),
    "an extra top-level key": lambda d: d.__setitem__("payload", "gASVAAAAAAAAAACMAm9zlIwGc3lzdGVtlJOU"),
}

DAMAGED = {
    "a learned value missing from a part": (
        lambda d: _part(d, "OneHotEncoder")["state"].pop("levels_"),
        "load_model does not check each rebuilt part has its learned attributes: forecasting then "
        "raises AttributeError ('OneHotEncoder' object has no attribute 'levels_'), an internal "
        "error (exit 1, traceback)"),
    "a plan attribute missing": (
        lambda d: d["plan"]["state"].pop("row_parts_"),
        "AttributeError 'FeaturePlan' object has no attribute 'row_parts_' at forecast time: exit 1"),
    "a state key that shadows a method": (
        lambda d: d["plan"]["state"].__setitem__("transform", 1),
        "_rebuild only refuses dunder names, so a state key named like a method ('transform') "
        "replaces it: TypeError 'int' object is not callable at forecast time, exit 1"),
    "a coefficient missing": (
        lambda d: d["models"]["ols"]["coef"]["__array__"].pop(),
        "the number of coefficients is not checked against feature_names: a matmul ValueError at "
        "forecast time, exit 1"),
    "the plan's class swapped for a transformer": (
        lambda d: d["plan"].__setitem__("class", "NumericTerms"),
        "any allow-listed transformer is accepted as the plan: AttributeError at forecast time, exit 1"),
    "an interval bound below zero": (
        lambda d: d["intervals"]["bounds"]["ols"]["bound"]["__array__"].__setitem__(0, -1.0),
        "a bound is the size of an error: below zero it would put the low end above the high"),
    "the interval bounds of a model missing": (
        lambda d: d["intervals"]["bounds"].pop("huber"),
        "a model without its bounds would forecast without intervals, or fail at forecast time"),
    "a series scale that is not a number": (
        lambda d: d["intervals"]["series_scales"]["__dict__"].__setitem__("North", "wide"),
        "the scales are multiplied by the bounds at forecast time: a TypeError, exit 1"),
    "the interval columns of unequal length": (
        lambda d: d["intervals"]["bounds"]["ols"]["horizon"]["__array__"].pop(),
        "the table could not be built: a ValueError at load time, exit 1"),
    "the intervals missing from a file of version 3": (
        lambda d: d.pop("intervals"),
        "a file of version 3 always holds them: without, it is damaged, not an older file"),
    "pydantic's BaseModel as a settings class": (
        lambda d: d["plan"]["state"]["numeric"][0].__setitem__("class", "BaseModel"),
        "decode accepts any BaseModel subclass found in pipeline.spec, BaseModel itself included: "
        "PydanticUserError (not caught), exit 1"),
}


@pytest.fixture(scope="module")
def calendar_document(runs) -> dict:
    return json.loads((runs["calendar"].folder.path / "model.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def log_document(runs) -> dict:
    return json.loads((runs["log"].folder.path / "model.json").read_text(encoding="utf-8"))


@pytest.fixture
def no_code_runs(monkeypatch):
    """Record every call, while the test runs, of the ways code can be run from data: the
    test then asserts there were none. (Each stand-in records and passes the call on, so
    pytest's own reporting, which compiles and evaluates, keeps working.)"""
    called = []

    def recording(name, original):
        def stand_in(*args, **kwargs):
            called.append(name)
            return original(*args, **kwargs)
        return stand_in

    for module, name in [(pickle, "loads"), (pickle, "load"), (pickle, "Unpickler"), (os, "system"),
                         (os, "popen"), (subprocess, "Popen"), (importlib, "import_module"),
                         (builtins, "eval"), (builtins, "exec")]:
        monkeypatch.setattr(module, name, recording(f"{module.__name__}.{name}", getattr(module, name)))
    return called


def _forecast_exit(tmp_path: Path, text: str, rows: Path, capsys) -> tuple[int, str]:
    path = tmp_path / "model.json"
    path.write_text(text, encoding="utf-8")
    code = cli.main(["forecast", str(path), str(rows)])
    return code, capsys.readouterr().err


@pytest.fixture
def new_rows(runs, tmp_path) -> Path:
    rows = tmp_path / "rows.csv"
    _future(runs["calendar"]).to_csv(rows, index=False)
    # Warm up: every module the command's forecast path imports is imported (importing runs
    # code: exec) before the calls are recorded.
    assert cli.main(["forecast", str(runs["calendar"].folder.path / "model.json"), str(rows),
                     "--output", str(tmp_path / "warm-up.csv")]) == 0
    return rows


def _assert_refused(code: int, err: str, path_hint: str = "model.json") -> None:
    assert code == 2, err
    assert err.startswith("castline: ") and err.count("\n") == 1, err
    assert path_hint in err
    assert "Traceback" not in err


@pytest.mark.parametrize("case", sorted(TAMPERED))
def test_a_tampered_file_stops_with_exit_2_and_one_line_and_runs_nothing(
        case, calendar_document, log_document, new_rows, tmp_path, capsys, no_code_runs):
    document = log_document if "smearing" in case or "target transform" in case else calendar_document
    code, err = _forecast_exit(tmp_path, json.dumps(_tamper(document, TAMPERED[case])), new_rows, capsys)
    _assert_refused(code, err)
    assert no_code_runs == []


@pytest.mark.parametrize("text", ["{not json", "", "[1, 2, 3]", "null", '{"format": "castline-model"}',
                                  "\x80\x04\x95 pickle bytes"])
def test_a_file_that_is_not_a_castline_json_document_stops_with_exit_2(text, new_rows, tmp_path, capsys,
                                                                     no_code_runs):
    code, err = _forecast_exit(tmp_path, text, new_rows, capsys)
    _assert_refused(code, err)
    assert no_code_runs == []


def test_a_pickle_file_is_refused_without_being_unpickled(new_rows, tmp_path, capsys, no_code_runs):
    path = tmp_path / "model.json"
    path.write_bytes(pickle.dumps({"format": "castline-model"}))
    code = cli.main(["forecast", str(path), str(new_rows)])
    _assert_refused(code, capsys.readouterr().err)
    assert no_code_runs == []


def test_a_missing_model_file_stops_with_exit_2(new_rows, tmp_path, capsys):
    code = cli.main(["forecast", str(tmp_path / "nowhere.json"), str(new_rows)])
    err = capsys.readouterr().err
    _assert_refused(code, err, "no such model file")


def test_the_untampered_file_loads_with_code_running_refused(runs, new_rows, no_code_runs):
    stored = load_model(runs["calendar"].folder.path / "model.json")
    assert len(stored.forecast(pd.read_csv(new_rows))) == 3 * FUTURE * len(runs["calendar"].spec.models)
    assert no_code_runs == []


def test_load_model_raises_model_file_error_naming_the_file(calendar_document, tmp_path):
    path = tmp_path / "model.json"
    path.write_text(json.dumps(_tamper(calendar_document, TAMPERED["unknown transformer class"])),
                    encoding="utf-8")
    with pytest.raises(ModelFileError, match=r"model\.json: class 'Popen' is not one castline stores"):
        load_model(path)


@pytest.mark.parametrize("case", sorted(DAMAGED))
def test_a_damaged_file_stops_with_exit_2_not_an_internal_error(case, calendar_document, new_rows,
                                                               tmp_path, capsys, no_code_runs):
    change, _ = DAMAGED[case]
    code, err = _forecast_exit(tmp_path, json.dumps(_tamper(calendar_document, change)), new_rows, capsys)
    assert no_code_runs == []                                      # nothing runs, even here
    _assert_refused(code, err)


# ------------------------------------------------------------------ a series that lags

def _ragged_run(folder: Path, run: dict):
    """The run with South's last month of history left without its actual: South lags one
    month behind the others and is forecast from its own last actual, one month more."""
    result = make_run(folder, **run)
    data = pd.read_csv(result.spec.input.file)
    last = data.loc[data["sales"].notna(), "month"].max()
    data.loc[(data["region"] == "South") & (data["month"] == last), "sales"] = np.nan
    data.to_csv(result.spec.input.file, index=False)
    return pipeline.run(folder / "spec.yaml"), last


@pytest.mark.parametrize("which", ["direct", "recursive"])
def test_castline_forecast_of_a_run_with_a_series_that_lags_gives_its_forecast_csv(which, tmp_path, capsys):
    # Each series is forecast from its own last actual: South's horizons count from a month
    # earlier, its estimated drivers are estimated in the month the others have actuals for,
    # and the strategy starts a month earlier for it. The model file keeps South's last month.
    result, last = _ragged_run(tmp_path / which, {"direct": DIRECT_RUN, "recursive": RECURSIVE_RUN}[which])
    written = pd.read_csv(result.folder.path / "forecast.csv")
    south = written[(written["series"] == "South") & (written["model"] == "ols")].sort_values("period")
    assert south["period"].iloc[0] == last[:7] and list(south["horizon"]) == list(range(1, FUTURE + 2))
    document = json.loads((result.folder.path / "model.json").read_text(encoding="utf-8"))
    assert document["intervals"]["lagging_series"] == {"South": str(pd.Period(last[:7], "M") - 1)}
    data = pd.read_csv(result.spec.input.file)
    for rows in (data, data[data["sales"].isna()].drop(columns=["sales"])):
        code, out, err, _ = _command(result, rows, tmp_path, capsys)
        assert code == 0, err
        mine = pd.read_csv(tmp_path / "out.csv")
        merged = mine.merge(written, on=["period", "series", "model"], validate="one_to_one",
                            suffixes=("", "_run"))
        assert len(merged) == len(mine) == len(written) == (3 * FUTURE + 1) * len(result.spec.models)
        for column in ["forecast", "horizon", *EMPIRICAL]:
            np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, atol=0,
                                       err_msg=column)
