"""A whole run of the demo spec, checked against an independent computation.

The demo data is invented, so nothing here uses a demo number as a reference
value: the references are computed in this file from the CSV with pandas and
statsmodels (statsmodels.formula.api.ols), and castline must agree with them.
Every run writes into tmp_path (output_folder / --output-folder), never into
the repository's reports/.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import sqlite3
import subprocess
import sys
from contextlib import closing
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from conftest import DEMO_DATA, DEMO_SPEC, ROOT, tiny_data, write_tiny_spec

import pipeline
import pipeline.present.pages as pages
from pipeline import UserError

# The artefacts every run folder holds (a run may write more beside them).
RUN_FILES = {"spec.yaml", "fingerprint.json", "metrics.json", "predictions.csv", "coefficients.csv",
             "forecast.csv", "summary.md"}

# The demo spec's model written as a statsmodels formula: the reference fit.
# The calendar terms are computed here from the month: a trend counting months since
# the first month (2019-01), and sine/cosine pairs of 2π·k·month/12 for k = 1, 2.
FORMULA = ("bags_sold ~ shelf_price + promo_days + rainfall_mm + mean_temp_c + I(mean_temp_c ** 2)"
           " + C(region, Treatment('North')) + trend + sin1 + cos1 + sin2 + cos2")
CALENDAR_TERMS = {"trend": "months since 2019-01", "sin1": "sin(2π·month/12)",
                  "cos1": "cos(2π·month/12)", "sin2": "sin(2π·2·month/12)",
                  "cos2": "cos(2π·2·month/12)"}


# The models of the (holdout) demo: the mean of the training months, the listed ols, and the simple rules a
# time-ordered validation always compares, in the catalogue's order.
DEMO_MODELS = ["mean_baseline", "ols", "calendar_month_mean", "trailing_mean", "last_value",
               "seasonal_naive"]


def model_kinds(spec) -> list[str]:
    """Return the spec's model names (a model entry is a name or an object with a kind)."""
    return [getattr(model, "kind", model) for model in spec.models]


def reference_term(name: str) -> str:
    """Return castline's name for a statsmodels term of FORMULA."""
    if name == "Intercept":
        return "intercept"
    if name == "I(mean_temp_c ** 2)":
        return "mean_temp_c^2"
    if name in CALENDAR_TERMS:
        return CALENDAR_TERMS[name]
    level = re.fullmatch(r"C\(region, Treatment\('North'\)\)\[T\.(\w+)\]", name)
    return f"region: {level.group(1)}" if level else name


# ---------------------------------------------------------------- the independent reference

@pytest.fixture(scope="module")
def table() -> pd.DataFrame:
    frame = pd.read_csv(DEMO_DATA)
    months = pd.to_datetime(frame["month"]).dt.to_period("M")
    frame["period"] = months.astype(str)
    frame["trend"] = (months - pd.Period("2019-01", "M")).map(lambda offset: offset.n)
    month_number = months.dt.month.to_numpy(float)
    for k in (1, 2):
        frame[f"sin{k}"] = np.sin(2 * np.pi * k * month_number / 12)
        frame[f"cos{k}"] = np.cos(2 * np.pi * k * month_number / 12)
    return frame


# The demo spec estimates these drivers (future: month_mean): after the origin, each is
# replaced by its region's mean for that calendar month over the training months.
ESTIMATED = ["rainfall_mm", "mean_temp_c"]


def estimated(rows: pd.DataFrame, window: pd.DataFrame) -> pd.DataFrame:
    """Return the rows with the estimated drivers replaced by the window's (region, calendar
    month) means, computed here with pandas groupby."""
    month = pd.PeriodIndex(window["period"], freq="M").month
    means = window.groupby([window["region"], month])[ESTIMATED].mean()
    wanted = pd.MultiIndex.from_arrays([rows["region"], pd.PeriodIndex(rows["period"], freq="M").month])
    return rows.assign(**{column: means[column].reindex(wanted).to_numpy() for column in ESTIMATED})


@pytest.fixture(scope="module")
def split(table):
    """Return (train, test, future): test is the last 12 months with actuals, future has none;
    both with the estimated drivers as castline must estimate them (ex-ante)."""
    history = table[table["bags_sold"].notna()]
    future = table[table["bags_sold"].isna()]
    months = sorted(history["period"].unique())
    held_out = months[-12:]
    train = history[~history["period"].isin(held_out)]
    test = history[history["period"].isin(held_out)]
    return train, estimated(test, train), estimated(future, history)


@pytest.fixture(scope="module")
def held_out_as_happened(table):
    """Return the held-out months with the drivers as they happened (ex-post)."""
    history = table[table["bags_sold"].notna()]
    return history[history["period"].isin(sorted(history["period"].unique())[-12:])]


def test_the_hindsight_mae_is_statsmodels_with_the_actual_drivers(result, split, held_out_as_happened):
    train, _, _ = split
    fit = smf.ols(FORMULA, data=train).fit()
    reference_mae = float(np.mean(np.abs(held_out_as_happened["bags_sold"] - fit.predict(held_out_as_happened))))
    assert result.evaluation.hindsight.set_index("model").loc["ols", "mae"] == \
        pytest.approx(reference_mae, rel=1e-9)


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    return pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs"))


def test_the_demo_spec_is_the_model_the_reference_formula_writes(result):
    """Guards FORMULA: if the demo spec changes, the reference must change with it."""
    spec = result.spec
    assert spec.input.file == DEMO_DATA
    assert spec.target == "bags_sold" and spec.intercept
    assert [(d.column, d.degree) for d in spec.drivers.numeric] == [
        ("shelf_price", 1), ("promo_days", 1), ("rainfall_mm", 1), ("mean_temp_c", 2)]
    assert [(d.column, d.reference) for d in spec.drivers.categorical] == [("region", "North")]
    calendar = spec.drivers.calendar
    assert (calendar.trend, calendar.month_of_year, calendar.harmonics) == (True, "fourier", 2)
    assert not calendar.quarter and not calendar.working_days
    assert not spec.drivers.lags and not spec.drivers.interactions
    assert spec.target_transform == "none"
    assert spec.input.series == ["region"]
    assert (spec.validation.method, spec.validation.last_periods) == ("holdout", 12)
    assert model_kinds(spec) == DEMO_MODELS


# ---------------------------------------------------------------- the run folder

def test_the_run_folder_holds_every_artefact(result, tmp_path_factory):
    folder = result.folder.path
    assert RUN_FILES <= {p.name for p in folder.iterdir()}
    assert result.folder.summary == folder / "summary.md"
    assert folder.name == result.folder.run_id
    assert not [p for p in folder.parent.iterdir() if p.name.startswith(".incomplete-")]


def test_fingerprint_identifies_the_input(result, table, split):
    train, test, _ = split
    printed = json.loads((result.folder.path / "fingerprint.json").read_text(encoding="utf-8"))
    assert printed["sha256"] == hashlib.sha256(DEMO_DATA.read_bytes()).hexdigest()
    assert printed["rows"] == len(table)
    history = pd.concat([train, test])
    assert printed["first_period"] == min(history["period"])
    assert printed["last_period"] == max(history["period"])


def test_spec_yaml_is_the_resolved_spec_and_loads_again(result):
    written = result.folder.path / "spec.yaml"
    again = pipeline.load_spec(written)
    # The snapshot records where this run's folder actually went (here --output-folder).
    assert again.output.folder == result.folder.path.parent.resolve()
    assert again.model_dump(exclude={"output"}) == result.spec.model_dump(exclude={"output"})
    assert Path(again.input.file).is_absolute()


def test_predictions_csv(result, split):
    _, test, _ = split
    predictions = pd.read_csv(result.folder.path / "predictions.csv")
    for column in ("period", "actual", "model", "prediction"):
        assert column in predictions.columns
    assert set(predictions["model"]) == set(DEMO_MODELS)
    for _model, rows in predictions.groupby("model"):
        assert sorted(rows["period"].astype(str).unique()) == sorted(test["period"].unique())
        assert len(rows) == len(test)
    pd.testing.assert_frame_equal(
        predictions.reset_index(drop=True),
        result.predictions.reset_index(drop=True).astype({"period": str}),
        check_dtype=False, check_exact=False, rtol=1e-12)


def test_coefficients_csv(result):
    coefficients = pd.read_csv(result.folder.path / "coefficients.csv")
    assert {"model", "term", "estimate"} <= set(coefficients.columns)
    assert set(coefficients["model"]) == set(DEMO_MODELS)


def test_forecast_csv_has_every_future_month_and_region_for_each_model(result, split):
    _, _, future = split
    forecast = pd.read_csv(result.folder.path / "forecast.csv")
    future_months = sorted(future["period"].unique())
    regions = sorted(future["region"].unique())
    assert len(future_months) == 3 and len(regions) == 4
    expected = sorted((month, region) for month in future_months for region in regions)
    assert list(forecast["model"].unique()) == DEMO_MODELS
    for model in DEMO_MODELS:
        rows = forecast[forecast["model"] == model]
        assert sorted(zip(rows["period"].astype(str), rows["series"])) == expected
        assert np.isfinite(rows["forecast"]).all()


def test_summary_gives_the_verdict_and_the_cautions(result):
    summary = result.folder.summary.read_text(encoding="utf-8")
    assert result.evaluation.verdict in summary
    assert "## Cautions" in summary
    cautions = summary.split("## Cautions", 1)[1].strip().splitlines()
    assert cautions and cautions[0].startswith("- ")


def test_metrics_json_matches_the_returned_table(result):
    metrics = json.loads((result.folder.path / "metrics.json").read_text(encoding="utf-8"))
    assert metrics["recommended"] == result.evaluation.recommended
    assert metrics["verdict"] == result.evaluation.verdict
    by_model = {row["model"]: row for row in metrics["models"]}
    for row in result.metrics.itertuples():
        assert by_model[row.model]["mae"] == pytest.approx(row.mae, rel=1e-12)


# ---------------------------------------------------------------- agreement with the reference

def test_ols_holdout_mae_equals_statsmodels(result, split):
    train, test, _ = split
    fit = smf.ols(FORMULA, data=train).fit()
    reference_mae = float(np.mean(np.abs(test["bags_sold"] - fit.predict(test))))
    ols = result.metrics.set_index("model").loc["ols"]
    assert ols["n"] == len(test)
    assert ols["mae"] == pytest.approx(reference_mae, rel=1e-9)
    metrics = json.loads((result.folder.path / "metrics.json").read_text(encoding="utf-8"))
    written = next(row for row in metrics["models"] if row["model"] == "ols")
    assert written["mae"] == pytest.approx(reference_mae, rel=1e-9)


def test_ols_holdout_predictions_equal_statsmodels_row_by_row(result, split):
    train, test, _ = split
    fit = smf.ols(FORMULA, data=train).fit()
    reference = pd.DataFrame({"period": test["period"], "series": test["region"],
                              "expected": fit.predict(test)})
    ours = result.predictions[result.predictions["model"] == "ols"].astype({"period": str})
    merged = ours.merge(reference, on=["period", "series"], validate="one_to_one")
    assert len(merged) == len(test)
    np.testing.assert_allclose(merged["prediction"], merged["expected"], rtol=1e-9)


def test_ols_coefficients_and_forecast_equal_statsmodels_on_all_history(result, split,
                                                                       held_out_as_happened):
    train, _, future = split
    fit = smf.ols(FORMULA, data=pd.concat([train, held_out_as_happened])).fit()
    ours = result.coefficients[result.coefficients["model"] == "ols"].set_index("term")
    expected = {reference_term(name): value for name, value in fit.params.items()}
    assert set(ours.index) == set(expected)
    for term, value in expected.items():
        assert ours.loc[term, "estimate"] == pytest.approx(value, rel=1e-9), term
        assert ours.loc[term, "std_error"] == pytest.approx(fit.bse[
            next(n for n in fit.params.index if reference_term(n) == term)], rel=1e-7), term
    reference = pd.DataFrame({"period": future["period"], "series": future["region"],
                              "expected": fit.predict(future)})
    forecast = result.forecast[result.forecast["model"] == "ols"].astype({"period": str})
    merged = forecast.merge(reference, on=["period", "series"], validate="one_to_one")
    assert len(merged) == len(future)
    np.testing.assert_allclose(merged["forecast"], merged["expected"], rtol=1e-9)


def test_mean_baseline_predicts_each_region_s_training_mean(result, split):
    train, test, _ = split
    means = train.groupby("region")["bags_sold"].mean()
    ours = result.predictions[result.predictions["model"] == "mean_baseline"]
    assert len(ours) == len(test)
    np.testing.assert_allclose(ours["prediction"], ours["series"].map(means), rtol=1e-12)
    reference_mae = float(np.mean(np.abs(test["bags_sold"] - test["region"].map(means))))
    baseline = result.metrics.set_index("model").loc["mean_baseline"]
    assert baseline["mae"] == pytest.approx(reference_mae, rel=1e-12)


def test_mean_baseline_forecast_is_each_region_s_mean_over_all_history(result, split,
                                                                     held_out_as_happened):
    train, _, _ = split
    means = pd.concat([train, held_out_as_happened]).groupby("region")["bags_sold"].mean()
    ours = result.forecast[result.forecast["model"] == "mean_baseline"]
    np.testing.assert_allclose(ours["forecast"], ours["series"].map(means), rtol=1e-12)


def test_skill_is_one_minus_the_mae_ratio(result):
    table = result.metrics.set_index("model")
    expected = 1 - table.loc["ols", "mae"] / table.loc["mean_baseline", "mae"]
    assert table.loc["ols", "skill_vs_mean"] == pytest.approx(expected, rel=1e-12)


# ---------------------------------------------------------------- the console

def console() -> list[str]:
    """Return the installed castline script, or python -m pipeline when it is not installed."""
    script = Path(sys.executable).with_name("castline")
    return [str(script)] if script.exists() else [sys.executable, "-m", "pipeline"]


def test_the_same_run_from_the_console(tmp_path, split):
    train, test, _ = split
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    done = subprocess.run([*console(), "run", str(DEMO_SPEC), "--output-folder", str(tmp_path / "out")],
                          cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    folder = Path(re.search(r"^run folder: (.+)$", done.stdout, re.MULTILINE).group(1))
    assert folder.parent == tmp_path / "out"
    assert RUN_FILES <= {p.name for p in folder.iterdir()}
    metrics = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))
    fit = smf.ols(FORMULA, data=train).fit()
    reference_mae = float(np.mean(np.abs(test["bags_sold"] - fit.predict(test))))
    written = next(row for row in metrics["models"] if row["model"] == "ols")
    assert written["mae"] == pytest.approx(reference_mae, rel=1e-9)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"], "the run wrote outside its folder"


# ---------------------------------------------------------------- run folders side by side

def test_two_runs_give_two_folders_that_sort_by_time(tmp_path):
    first = pipeline.run(DEMO_SPEC, output_folder=tmp_path).folder.path
    second = pipeline.run(DEMO_SPEC, output_folder=tmp_path).folder.path
    assert first != second
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([first.name, second.name, "ledger.sqlite"])
    for folder in (first, second):
        assert RUN_FILES <= {p.name for p in folder.iterdir()}


def tree_bytes(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


@pytest.fixture
def earlier_run(tmp_path):
    """An output folder holding one finished run; return (output folder, run folder, its bytes)."""
    out = tmp_path / "out"
    folder = pipeline.run(DEMO_SPEC, output_folder=out).folder.path
    return out, folder, tree_bytes(folder)


def assert_only_the_earlier_run(out: Path, folder: Path, before: dict[str, bytes]) -> None:
    assert sorted(p.name for p in out.iterdir()) == sorted([folder.name, "ledger.sqlite"]), \
        "a failed run left a folder behind"
    with closing(sqlite3.connect(out / "ledger.sqlite")) as ledger:
        assert ledger.execute("SELECT run_id FROM runs").fetchall() == [(folder.name,)], \
            "a failed run left a row in the run ledger"
    assert tree_bytes(folder) == before, "a failed run changed an earlier run"


@pytest.mark.parametrize("exception", [OSError("disk full"), KeyboardInterrupt()])
def test_a_run_failing_while_writing_leaves_nothing(earlier_run, monkeypatch, exception):
    out, folder, before = earlier_run
    original = pd.DataFrame.to_csv
    written = []

    def failing_to_csv(self, path_or_buf=None, *args, **kwargs):
        if Path(str(path_or_buf)).name == "forecast.csv":
            written.extend(p.name for p in Path(str(path_or_buf)).parent.iterdir())
            raise exception
        return original(self, path_or_buf, *args, **kwargs)

    monkeypatch.setattr(pd.DataFrame, "to_csv", failing_to_csv)
    with pytest.raises(type(exception)):
        pipeline.run(DEMO_SPEC, output_folder=out)
    assert "predictions.csv" in written, "the failure was not injected mid-way through publish"
    assert_only_the_earlier_run(out, folder, before)


def test_a_run_failing_on_the_summary_leaves_nothing(earlier_run, monkeypatch):
    out, folder, before = earlier_run

    def broken(*args, **kwargs):
        raise RuntimeError("summary failed")

    monkeypatch.setattr(pages, "render_summary", broken)
    with pytest.raises(RuntimeError):
        pipeline.run(DEMO_SPEC, output_folder=out)
    assert_only_the_earlier_run(out, folder, before)


def spec_with_an_unseen_future_region(tmp_path: Path) -> tuple[Path, Path, int]:
    """Copy the demo with one extra future row for a region the history lacks.

    Return the spec, the data file and the line of the extra row (header = line 1).
    """
    (tmp_path / "configs").mkdir(parents=True)
    (tmp_path / "data_samples").mkdir()
    spec = tmp_path / "configs" / "demo.yaml"
    data = tmp_path / "data_samples" / "compost_sales.csv"
    shutil.copy(DEMO_SPEC, spec)
    lines = DEMO_DATA.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    last = dict(zip(header, lines[-1].split(",")))
    assert last["bags_sold"] == "", "the demo's last row is a month to forecast"
    extra = {**last, "region": "Central"}
    lines.append(",".join(extra[column] for column in header))
    data.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return spec, data, len(lines)


def test_a_run_refused_for_an_unseen_region_leaves_nothing(earlier_run, tmp_path):
    out, folder, before = earlier_run
    spec, _, _ = spec_with_an_unseen_future_region(tmp_path / "unseen")
    with pytest.raises(UserError) as info:
        pipeline.run(spec, output_folder=out)
    assert "Central" in str(info.value)
    assert_only_the_earlier_run(out, folder, before)


def test_an_unseen_region_is_reported_at_its_file_and_line(tmp_path):
    spec, data, line = spec_with_an_unseen_future_region(tmp_path)
    with pytest.raises(UserError) as info:
        pipeline.run(spec, output_folder=tmp_path / "out")
    assert f"{data}:{line}" in str(info.value)


# ---------------------------------------------------------------- the simple references

def _reference_predictions(window: pd.DataFrame, rows: pd.DataFrame) -> pd.DataFrame:
    """Return the calendar-month average, the trailing 12-month mean, the last value and the
    same month's latest value (seasonal naive) of `rows` from the months of `window`, computed
    here with pandas groupby (each region's months are consecutive, so its last 12 rows are
    its last 12 months)."""
    window = window.sort_values("period", kind="stable")
    month = pd.PeriodIndex(window["period"], freq="M").month
    by_month = window.groupby([window["region"], month])["y"].mean()
    latest_in_month = window.groupby([window["region"], month])["y"].last()
    trailing = window.groupby("region").tail(12).groupby("region")["y"].mean()
    last = window.groupby("region")["y"].last()
    wanted = pd.MultiIndex.from_arrays([rows["region"], pd.PeriodIndex(rows["period"], freq="M").month])
    return pd.concat([
        pd.DataFrame({"period": rows["period"].to_numpy(), "series": rows["region"].to_numpy(),
                      "model": "last_value", "expected": rows["region"].map(last).to_numpy()}),
        pd.DataFrame({"period": rows["period"].to_numpy(), "series": rows["region"].to_numpy(),
                      "model": "seasonal_naive",
                      "expected": latest_in_month.reindex(wanted).to_numpy()}),
        pd.DataFrame({"period": rows["period"].to_numpy(), "series": rows["region"].to_numpy(),
                      "model": "calendar_month_mean", "expected": by_month.reindex(wanted).to_numpy()}),
        pd.DataFrame({"period": rows["period"].to_numpy(), "series": rows["region"].to_numpy(),
                      "model": "trailing_mean", "expected": rows["region"].map(trailing).to_numpy()})])


def test_the_simple_references_run_end_to_end_under_rolling_origin(tmp_path):
    """A spec with models [calendar_month_mean, trailing_mean] under rolling_origin (which adds
    the other simple rules, last_value and seasonal_naive, after them): every
    origin's predictions and the forecast equal pandas groupby over the months before them.
    Plumbing data (conftest.tiny_data, invented): the references are computed here."""
    data = tiny_data(("North", "South"))
    spec = write_tiny_spec(tmp_path, data, actuals_to="2021-12",
                           validation={"method": "rolling_origin", "horizon": 2, "min_train_periods": 14,
                                       "step": 2},
                           models=["calendar_month_mean", "trailing_mean"])
    result = pipeline.run(spec)
    assert list(result.metrics["model"]) == ["mean_baseline", "calendar_month_mean", "trailing_mean",
                                             "last_value", "seasonal_naive"]
    history = data.assign(period=pd.to_datetime(data["month"]).dt.to_period("M").astype(str))
    history = history[history["period"] <= "2021-12"]
    predictions = result.predictions[result.predictions["model"] != "mean_baseline"].astype(
        {"origin": str, "period": str})
    assert predictions["origin"].nunique() > 1
    expected = pd.concat([
        _reference_predictions(history[history["period"] <= origin],
                               history[history["period"].isin(rows["period"])]).assign(origin=origin)
        for origin, rows in predictions.groupby("origin")])
    merged = predictions.merge(expected, on=["origin", "period", "series", "model"], validate="one_to_one")
    assert len(merged) == len(predictions)
    np.testing.assert_allclose(merged["prediction"], merged["expected"], rtol=1e-12)
    forecast = result.forecast[result.forecast["model"] != "mean_baseline"].astype({"period": str})
    future = forecast[["period", "series"]].drop_duplicates().rename(columns={"series": "region"})
    merged = forecast.merge(_reference_predictions(history, future), on=["period", "series", "model"],
                            validate="one_to_one")
    assert len(merged) == len(forecast) == 4 * 2 * 3    # four rules, two regions, three months
    np.testing.assert_allclose(merged["forecast"], merged["expected"], rtol=1e-12)


@pytest.mark.parametrize("kind", ["log", "log1p"])
def test_a_log_target_run_states_analytic_intervals_found_on_the_log_scale(tmp_path, kind):
    """target_transform: log (or log1p) over the tiny data (invented plumbing data, one
    series, y on x). Reference: statsmodels OLS of log(y) (log(1 + y)) on x over all history,
    get_prediction(future x).summary_frame(alpha = 1 − level), its observation interval turned
    back with exp (expm1); the forecast is the smeared mean exp(mean)·S (− 1 for log1p)."""
    data = tiny_data()
    spec = write_tiny_spec(tmp_path, data, actuals_to="2021-12", target_transform=kind)
    result = pipeline.run(spec)
    forecast = pd.read_csv(result.folder.path / "forecast.csv")
    ols = forecast[forecast["model"] == "ols"].reset_index(drop=True)
    assert len(ols) == 3
    columns = [f"analytic_{side}_{level}" for side in ("low", "high") for level in (80, 95)]
    assert ols[columns].notna().all().all()

    history = data.iloc[:24]
    future = data.iloc[24:27]
    forward, inverse, shift = (np.log, np.exp, 0.0) if kind == "log" else (np.log1p, np.expm1, 1.0)
    fit = smf.ols("z ~ x", data=history.assign(z=forward(history["y"]))).fit()
    smearing = float(np.mean(np.exp(fit.resid)))
    np.testing.assert_allclose(ols["forecast"], np.exp(fit.predict(future)) * smearing - shift, rtol=1e-9)
    for level in (80, 95):
        frame = fit.get_prediction(future).summary_frame(alpha=1 - level / 100)
        np.testing.assert_allclose(ols[f"analytic_low_{level}"], inverse(frame["obs_ci_lower"]), rtol=1e-9)
        np.testing.assert_allclose(ols[f"analytic_high_{level}"], inverse(frame["obs_ci_upper"]), rtol=1e-9)
        assert ((ols[f"analytic_low_{level}"] < ols["forecast"])
                & (ols["forecast"] < ols[f"analytic_high_{level}"])).all()

    # predictions.csv carries each row's centre on the log scale beside its smeared mean: the
    # holdout's fit (the spec's last 6 months held out) made again with statsmodels.
    predictions = pd.read_csv(result.folder.path / "predictions.csv")
    own = predictions[predictions["model"] == "ols"]
    window = smf.ols("z ~ x", data=history.iloc[:18].assign(z=forward(history["y"].iloc[:18]))).fit()
    held = window.get_prediction(history.iloc[18:24])
    np.testing.assert_allclose(own["centre"], held.predicted_mean, rtol=1e-9)
    np.testing.assert_allclose(own["prediction_se"], held.se_obs, rtol=1e-9)
    np.testing.assert_allclose(own["prediction"], np.exp(held.predicted_mean)
                               * np.mean(np.exp(window.resid)) - shift, rtol=1e-9)
    assert predictions.loc[predictions["model"] != "ols", "centre"].isna().all()
    summary = (result.folder.path / "summary.md").read_text(encoding="utf-8")
    assert "centred on the median of y" in summary
