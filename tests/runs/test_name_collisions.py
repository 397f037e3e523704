"""A user's column may bear any name castline uses for its own columns or its tables.

castline adds a month, a series and a line number to the checked rows, and marks rows
while it fingerprints or fills them; its tables name columns such as ``actual``,
``horizon`` or ``forecast``. None of these may overwrite or be mistaken for a user's
column: a run whose driver, categorical driver, series key, target or date column bears
one of those names must give exactly the numbers the same data gives under a neutral name.

The data (``_write``): two series, A and B, monthly from 2021-01 to 2024-09 with actuals
and 2024-10 to 2024-12 to forecast, from a fixed seed; a numeric driver x ~ N(5, 2), a
categorical driver alternating low/high by month, and the target
100 + 50 x + 20 [series B] + 15 [high] + N(0, 10). Validated by a rolling origin of
horizon 3 from 24 months; one OLS model (the simple rules come with it).
"""

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import run_cli

from pipeline.core.columns import PERIOD, ROW, SERIES

NEUTRAL = {"date": "month", "series": "store", "target": "sales", "numeric": "x_neutral",
           "categorical": "kind"}
# Names castline gives its own columns (the checked rows' month, series and line; the marks
# it sets while fingerprinting or filling gaps), or the columns of the tables it writes.
CASES = [*[("numeric", name) for name in ("source_row", "period", "series", "actual", "forecast",
                                          "horizon", "_actual", "_ordinal")],
         *[(role, name) for role in ("categorical", "series", "date") for name in ("source_row", "period", "series")],
         *[("target", name) for name in ("source_row", "period", "series", "actual")]]


def _write(folder: Path, names: dict[str, str], gaps: str = "refuse") -> Path:
    rng = np.random.default_rng(20261203)
    months = pd.period_range("2021-01", "2024-12", freq="M")
    rows = []
    for store in ("A", "B"):
        for i, month in enumerate(months):
            x = rng.normal(5, 2)
            kind = ("low", "high")[i % 2]
            y = 100 + 50 * x + (20 if store == "B" else 0) + (15 if kind == "high" else 0) + rng.normal(0, 10)
            rows.append({names["date"]: month.to_timestamp().strftime("%Y-%m-%d"), names["series"]: store,
                         names["target"]: round(y, 3) if month <= pd.Period("2024-09", "M") else None,
                         names["numeric"]: round(x, 4), names["categorical"]: kind})
    frame = pd.DataFrame(rows)
    if gaps == "fill":   # a month missing inside series A: found and filled by the check
        frame = frame[~((frame[names["series"]] == "A") & (frame[names["date"]] == "2022-06-01"))]
    folder.mkdir(parents=True)
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": "collisions",
            "input": {"file": "data.csv", "date_column": names["date"], "series": [names["series"]],
                      "as_of": "2024-09-30", "gaps": gaps},
            "target": names["target"],
            "drivers": {"numeric": [{"column": names["numeric"], "future": "given"}],
                        "categorical": [{"column": names["categorical"], "encoding": "one_hot",
                                         "reference": "low"}]},
            "validation": {"method": "rolling_origin", "horizon": 3, "min_train_periods": 24},
            "models": ["ols"], "output": {"folder": "out"}}
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return folder / "spec.yaml"


def _run(folder: Path, names: dict[str, str], gaps: str = "refuse") -> dict:
    spec = _write(folder, names, gaps)
    code, _, err = run_cli(["run", str(spec)])
    assert code == 0, err
    run = next((folder / "out").glob("run-*"))
    coefficients = pd.read_csv(run / "coefficients.csv")
    ols = coefficients[coefficients["model"] == "ols"]
    metrics = json.loads((run / "metrics.json").read_text(encoding="utf-8"))
    forecast = pd.read_csv(run / "forecast.csv")
    return {"terms": ols["term"].tolist(), "estimates": ols["estimate"].to_numpy(float),
            "mae": {m["model"]: m["mae"] for m in metrics["models"]},
            "forecast": forecast.loc[forecast["model"] == "ols", "forecast"].to_numpy(float),
            "series": sorted(forecast["series"].unique()), "periods": sorted(forecast["period"].unique()),
            "history": pd.read_csv(run / "history.csv")}


@pytest.fixture(scope="module")
def neutral(tmp_path_factory) -> dict:
    return _run(tmp_path_factory.mktemp("neutral") / "data", NEUTRAL)


def test_the_neutral_run_fits_the_data_as_statsmodels_does(neutral, tmp_path):
    # Reference: statsmodels' OLS on the same history, with the same dummies (A and low the
    # references); castline fits OLS on the whole history for its coefficients.
    import statsmodels.api as sm
    _write(tmp_path / "data", NEUTRAL)
    frame = pd.read_csv(tmp_path / "data" / "data.csv").dropna(subset=["sales"])
    exog = sm.add_constant(pd.DataFrame({"x": frame["x_neutral"], "high": (frame["kind"] == "high") * 1.0,
                                         "B": (frame["store"] == "B") * 1.0}))
    fit = sm.OLS(frame["sales"], exog).fit()
    by_term = dict(zip(neutral["terms"], neutral["estimates"], strict=True))
    assert by_term["x_neutral"] == pytest.approx(fit.params["x"], rel=1e-9)
    assert by_term["kind: high"] == pytest.approx(fit.params["high"], rel=1e-9)
    assert by_term["series: B"] == pytest.approx(fit.params["B"], rel=1e-9)
    assert 45 < by_term["x_neutral"] < 55   # the slope the data was made with is 50


@pytest.mark.parametrize(("role", "name"), CASES)
def test_a_column_named_as_castlines_own_gives_the_same_run(neutral, tmp_path, role, name):
    names = {**NEUTRAL, role: name}
    taken = _run(tmp_path / "data", names)
    np.testing.assert_array_equal(taken["estimates"], neutral["estimates"])
    assert taken["mae"] == neutral["mae"]
    np.testing.assert_array_equal(taken["forecast"], neutral["forecast"])
    # Only the renamed column's own terms are named differently, by the user's name.
    old, new = NEUTRAL[role], name
    expected = [term.replace(old, new) if role in ("numeric", "categorical") else term
                for term in neutral["terms"]]
    if role == "categorical" and name == "series":   # the series' own terms take another word
        expected = [f"the {term}" if term.startswith("series: ") and term != "series: high" else term
                    for term in expected]
    assert taken["terms"] == expected
    # The run's tables keep their plain headers, and castline's rows their values.
    assert taken["series"] == neutral["series"] == ["A", "B"]
    assert taken["periods"] == neutral["periods"] == ["2024-10", "2024-11", "2024-12"]
    pd.testing.assert_frame_equal(taken["history"], neutral["history"])


@pytest.mark.parametrize("name", ["source_row", "_ordinal"])
def test_a_filled_gap_reads_the_users_column_of_castlines_name(tmp_path, name):
    # Filling a missing month marks the rows castline inserts by their line number: a driver
    # called like that mark must still be interpolated from its own values.
    neutral = _run(tmp_path / "neutral", NEUTRAL, gaps="fill")
    taken = _run(tmp_path / "taken", {**NEUTRAL, "numeric": name}, gaps="fill")
    np.testing.assert_array_equal(taken["estimates"], neutral["estimates"])
    assert taken["mae"] == neutral["mae"]


def test_castlines_own_names_cannot_be_a_column_the_reader_gives():
    # The reader strips the spaces around every column name (stages/ingest.read_table), so a
    # name that begins with a space is castline's alone.
    from pipeline.stages.ingest import read_table
    for own in (PERIOD, SERIES, ROW):
        assert own != own.strip()
    import tempfile
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "data.csv"
        path.write_text(f'"{PERIOD}","{SERIES}","{ROW}"\n1,2,3\n', encoding="utf-8")
        assert list(read_table(path, "csv").columns) == ["period", "series", "source_row"]


def test_a_column_named_as_the_fingerprints_mark_is_fingerprinted(tmp_path):
    # The ledger's month fingerprints mark each row with or without an actual: a driver named
    # like that mark is the user's column, and a change to it changes its month's hash.
    from pipeline.record.ledger.fingerprints import period_fingerprints
    from pipeline.spec import load_spec
    from pipeline.stages.check import check_data
    from pipeline.stages.ingest import read_input
    names = {**NEUTRAL, "numeric": "_actual"}
    spec_path = _write(tmp_path / "data", names)

    def hashes():
        spec = load_spec(spec_path)
        return period_fingerprints(check_data(spec, read_input(spec))).set_index("period")["sha256"]
    before = hashes()
    data = pd.read_csv(tmp_path / "data" / "data.csv")
    data.loc[data["month"] == "2023-03-01", "_actual"] += 1.0
    data.to_csv(tmp_path / "data" / "data.csv", index=False)
    after = hashes()
    assert list(before.index[before != after]) == ["2023-03"]


def test_a_categorical_driver_named_series_keeps_its_terms_apart_from_the_series(tmp_path):
    # The series' own levels are terms "series: <label>"; a user's categorical driver named
    # "series", with the levels A and B as the series have, keeps that name, and the series'
    # terms take another word. The model file forecasts as the run did.
    names = {**NEUTRAL, "categorical": "series"}
    spec_path = _write(tmp_path / "data", names)
    data = pd.read_csv(tmp_path / "data" / "data.csv")
    data["series"] = data["series"].map({"low": "A", "high": "B"})
    data.to_csv(tmp_path / "data" / "data.csv", index=False)
    spec = yaml.safe_load(spec_path.read_text(encoding="utf-8"))
    spec["drivers"]["categorical"][0]["reference"] = "A"
    spec["drivers"]["series_effects"] = {"intercepts": True}
    spec_path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    code, _, err = run_cli(["run", str(spec_path)])
    assert code == 0, err
    run = next((tmp_path / "data" / "out").glob("run-*"))
    terms = pd.read_csv(run / "coefficients.csv").query("model == 'ols'")["term"].tolist()
    assert terms == ["intercept", "x_neutral", "series: B", "the series: B"]
    again, ran = _forecast_again(run, tmp_path)
    np.testing.assert_allclose(again["forecast"], ran["forecast"], rtol=1e-12)


def _forecast_again(run, tmp_path) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return `castline forecast` of the run's model.json on its own data, and the run's
    forecast.csv, both in the same order."""
    code, _, err = run_cli(["forecast", str(run / "model.json"), str(tmp_path / "data" / "data.csv"),
                            "--output", str(tmp_path / "again.csv")])
    assert code == 0, err
    keys = ["model", "period", "series"]
    return (pd.read_csv(tmp_path / "again.csv").sort_values(keys, ignore_index=True),
            pd.read_csv(run / "forecast.csv").sort_values(keys, ignore_index=True))


def test_a_series_key_named_series_forecasts_from_the_model_file(tmp_path):
    # The model file names castline's series column by its plain word "series"; a data file
    # whose series key is itself named "series" is read by its own column.
    spec_path = _write(tmp_path / "data", {**NEUTRAL, "series": "series"})
    code, _, err = run_cli(["run", str(spec_path)])
    assert code == 0, err
    run = next((tmp_path / "data" / "out").glob("run-*"))
    again, ran = _forecast_again(run, tmp_path)
    assert again["series"].tolist() == ran["series"].tolist()
    np.testing.assert_allclose(again["forecast"], ran["forecast"], rtol=1e-12)
