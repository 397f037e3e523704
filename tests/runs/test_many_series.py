"""Whole runs with many series: models per series, series effects for the models over all
series, the ways of running the per-series fits, fallbacks, bad input, the stored model.

References, named beside each check:

* statsmodels ``OLS`` fitted here, series by series and window by window, on the rows the
  run's training window holds (the data are invented by ``write_many_series``; no figure
  of theirs is a reference value);
* ``statsmodels.formula.api.ols`` with ``C(series)`` dummies and ``C(series):x1`` slopes for
  the model over all series;
* the Grunfeld data (``statsmodels.datasets.grunfeld``) with firm dummies, against
  statsmodels and the within (fixed effects) estimates printed in Baltagi, *Econometric
  Analysis of Panel Data*, Table 2.1;
* the local run itself, for the runs on worker processes and on a Dask cluster.

Every run writes into tmp_path.
"""

from __future__ import annotations

import io
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
import yaml
from conftest import ROOT, run_cli
from statsmodels.datasets import grunfeld

from pipeline.models import per_series

RTOL = 1e-8

# ---------------------------------------------------------------- the data

# First month (of 63: 60 with actuals, 3 to forecast) each series has a row in.
# 'late' has 2..7 rows in the backtest's training windows (fewer than its 5 terms in the
# first four); 'tiny' has 3 rows of history in all (a fallback in the final fit, and unseen
# in every training window); 'const' has x2 constant; 'dup' has x2 == x1.
FIRST_MONTH = {"north": 0, "south": 0, "east": 0, "west": 6, "upland": 12, "coast": 0,
               "const": 0, "dup": 3, "late": 50, "tiny": 57}
MONTHS = pd.period_range("2018-01", periods=63, freq="M")
SPEC = {
    "name": "many",
    "input": {"file": "data.csv", "date_column": "month", "series": ["region"]},
    "target": "sales",
    "drivers": {"numeric": ["x1", "x2"], "categorical": ["channel"], "calendar": {"trend": True},
                "series_effects": {"slopes": ["x1"]}},
    "validation": {"method": "rolling_origin", "horizon": 3, "min_train_periods": 36, "origins": 6},
    "models": ["ols", {"kind": "ols", "per_series": True}],
    "output": {"folder": "out"},
}


def write_many_series(folder: Path, spec: dict | None = None, seed: int = 20261202) -> Path:
    """Write the invented data and a spec into folder; return the spec's path."""
    rng = np.random.default_rng(seed)
    rows = []
    for name, start in FIRST_MONTH.items():
        b = rng.normal(size=3) * 2
        level = rng.uniform(20, 80)
        for i in range(start, len(MONTHS)):
            x1, x2 = rng.normal(2, 1), rng.normal(-1, 2)
            if name == "const":
                x2 = 1.5
            if name == "dup":
                x2 = x1
            y = level + b[0] * x1 + b[1] * x2 + b[2] * 0.1 * i + rng.normal()
            rows.append({"month": f"{MONTHS[i]}-01", "region": name, "channel": ["shop", "web"][i % 2],
                         "x1": round(x1, 6), "x2": round(x2, 6),
                         "sales": round(y, 6) if i < 60 else None})
    pd.DataFrame(rows).to_csv(folder / "data.csv", index=False)
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec or SPEC, sort_keys=False), encoding="utf-8")
    return path


def read_data(folder: Path) -> pd.DataFrame:
    """Return the data with the reference's own columns: month, trend, the shop indicator."""
    frame = pd.read_csv(folder / "data.csv")
    frame["period"] = pd.to_datetime(frame["month"]).dt.to_period("M")
    frame["trend"] = (frame["period"] - MONTHS[0]).map(lambda offset: offset.n).astype(float)
    frame["shop"] = (frame["channel"] == "shop").astype(float)
    frame["series"] = frame["region"]
    return frame


def run_folder(stdout: str) -> Path:
    return Path(re.search(r"^run folder: (.+)$", stdout, re.MULTILINE).group(1))


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    """One run of the spec above: (data folder, run folder, exit code, stdout)."""
    folder = tmp_path_factory.mktemp("many")
    spec = write_many_series(folder)
    code, out, err = run_cli(["run", str(spec), "--output-folder", str(folder / "out")])
    assert code == 0, err
    return folder, run_folder(out), code, out


# ---------------------------------------------------------------- the references

PER_SERIES_COLUMNS = ["x1", "x2", "shop", "trend"]
TERM_NAMES = {"x1": "x1", "x2": "x2", "shop": "channel: shop", "trend": "months since 2018-01"}


def per_series_reference(train: pd.DataFrame, test: pd.DataFrame) -> pd.DataFrame:
    """Return statsmodels OLS predictions (point, se_obs, df_resid) for each test row, fitted
    on its series' own training rows, by the rules the model per series states: columns
    constant within the series are left out, then any column in the span of the columns
    before it; a series with no more rows than its remaining terms is its own mean; a series
    with no training rows gets the mean of every training row."""
    out = []
    for name, rows in test.groupby("series", sort=False):
        own = train[train["series"] == name]
        result = pd.DataFrame({"series": name, "period": rows["period"].astype(str)})
        if not len(own):
            result["prediction"], result["se"], result["df"] = train["sales"].mean(), np.nan, np.nan
            out.append(result)
            continue
        varying = [c for c in PER_SERIES_COLUMNS if np.ptp(own[c]) > 0]
        columns = []
        for column in varying:
            trial = np.column_stack([np.ones(len(own)), own[[*columns, column]].to_numpy(float)])
            if np.linalg.matrix_rank(trial) == trial.shape[1]:
                columns.append(column)
        if len(own) <= 1 + len(varying):
            y = own["sales"].to_numpy()
            result["prediction"] = y.mean()
            result["se"] = y.std(ddof=1) * np.sqrt(1 + 1 / len(y)) if len(y) > 1 else np.nan
            result["df"] = len(y) - 1 if len(y) > 1 else np.nan
        else:
            fit = sm.OLS(own["sales"].to_numpy(),
                         sm.add_constant(own[columns].to_numpy(float), has_constant="add")).fit()
            predicted = fit.get_prediction(sm.add_constant(rows[columns].to_numpy(float),
                                                           has_constant="add"))
            result["prediction"], result["se"] = predicted.predicted_mean, predicted.se_obs
            result["df"] = fit.df_resid
        out.append(result)
    return pd.concat(out, ignore_index=True)


def relative(computed, reference) -> float:
    computed, reference = np.asarray(computed, float), np.asarray(reference, float)
    return float(np.max(np.abs(computed - reference) / np.abs(reference)))


def backtest_windows(data: pd.DataFrame, predictions: pd.DataFrame):
    """Yield (origin, training rows, test rows) for each origin of predictions.csv."""
    history = data[data["sales"].notna()]
    for origin in sorted(predictions["origin"].unique()):
        last = pd.Period(origin, "M")
        periods = set(predictions.loc[predictions["origin"] == origin, "period"])
        yield (origin, history[history["period"] <= last],
               history[history["period"].astype(str).isin(periods)])


# ---------------------------------------------------------------- models per series

def test_every_origin_s_per_series_prediction_equals_statsmodels_on_its_window(many):
    folder, run, _, _ = many
    data = read_data(folder)
    predictions = pd.read_csv(run / "predictions.csv")
    mine = predictions[predictions["model"] == "ols_per_series"]
    assert mine["origin"].nunique() == 6
    worst = {"prediction": 0.0, "se": 0.0}
    compared = 0
    for origin, train, test in backtest_windows(data, predictions):
        reference = per_series_reference(train, test)
        got = mine[mine["origin"] == origin].merge(reference, on=["series", "period"],
                                                   validate="one_to_one")
        assert len(got) == len(test) == len(reference)
        worst["prediction"] = max(worst["prediction"], relative(got["prediction_x"], got["prediction_y"]))
        has_se = got["se"].notna()
        np.testing.assert_array_equal(got["prediction_se"].isna(), ~has_se)
        worst["se"] = max(worst["se"], relative(got.loc[has_se, "prediction_se"], got.loc[has_se, "se"]))
        np.testing.assert_array_equal(got["df_resid"].fillna(-1), got["df"].fillna(-1))
        compared += len(got)
    assert compared == len(mine)
    assert worst["prediction"] < RTOL and worst["se"] < RTOL, worst


def test_the_final_per_series_fit_equals_statsmodels_on_all_history(many):
    """coefficients.csv (ols_per_series) and forecast.csv against statsmodels per series."""
    folder, run, _, _ = many
    data = read_data(folder)
    history, future = data[data["sales"].notna()], data[data["sales"].isna()]
    forecast = pd.read_csv(run / "forecast.csv")
    got = forecast[forecast["model"] == "ols_per_series"].merge(
        per_series_reference(history, future), on=["series", "period"], validate="one_to_one")
    assert len(got) == len(future)
    assert relative(got["forecast"], got["prediction"]) < RTOL
    coefficients = pd.read_csv(run / "coefficients.csv")
    mine = coefficients[coefficients["model"] == "ols_per_series"]
    for name in ["north", "west", "const", "dup"]:
        own = history[history["series"] == name]
        columns = [c for c in PER_SERIES_COLUMNS if not (name in ("const", "dup") and c == "x2")]
        fit = sm.OLS(own["sales"].to_numpy(), sm.add_constant(own[columns].to_numpy(float))).fit()
        table = mine[mine["series"] == name].set_index("term")
        kept = ["intercept", *(TERM_NAMES[c] for c in columns)]
        assert relative(table.loc[kept, "estimate"], fit.params) < RTOL
        assert relative(table.loc[kept, "std_error"], fit.bse) < RTOL


def test_a_series_too_short_for_its_terms_is_forecast_by_its_training_mean(many):
    """'late' has 2–5 rows in the first four windows against 5 terms: there its prediction
    is the mean of its training rows (pandas mean), series_fallbacks.csv lists it, the notes
    say so, and the run exits 0. 'tiny' (3 rows of history) is its mean in the forecast."""
    folder, run, code, out = many
    assert code == 0
    data = read_data(folder)
    predictions = pd.read_csv(run / "predictions.csv")
    mine = predictions[(predictions["model"] == "ols_per_series") & (predictions["series"] == "late")]
    fell_back = []
    for origin, train, _ in backtest_windows(data, predictions):
        own = train.loc[train["series"] == "late", "sales"]
        rows = mine[mine["origin"] == origin]
        if len(own) <= 5:
            np.testing.assert_allclose(rows["prediction"], own.mean(), rtol=1e-13)
            fell_back.append(origin)
        else:
            assert not np.allclose(rows["prediction"], own.mean())
    assert len(fell_back) == 4
    table = pd.read_csv(run / "series_fallbacks.csv")
    backtest = table[table["stage"] == "backtest"]
    # 'tiny' has test rows in the last windows but no training row there: listed with 0 rows
    # (it is forecast by the mean of every series' training rows).
    tiny_windows = [origin for origin, train, _ in backtest_windows(data, predictions)
                    if not (train["series"] == "tiny").any()
                    and ((mine_all := predictions[(predictions["model"] == "ols_per_series")
                                                  & (predictions["series"] == "tiny")])["origin"]
                         == origin).any()]
    for origin, train, _ in backtest_windows(data, predictions):
        if origin in tiny_windows:
            rows = mine_all[mine_all["origin"] == origin]
            np.testing.assert_allclose(rows["prediction"], train["sales"].mean(), rtol=1e-13)
    assert backtest[["model", "series", "windows", "first_window", "fewest_rows", "terms"]].to_dict(
        "records") == [{"model": "ols_per_series", "series": "late", "windows": 4,
                        "first_window": fell_back[0], "fewest_rows": 2, "terms": 5}] + (
        [{"model": "ols_per_series", "series": "tiny", "windows": len(tiny_windows),
          "first_window": tiny_windows[0], "fewest_rows": 0, "terms": 5}] if tiny_windows else [])
    final = table[table["stage"] == "forecast"]
    assert final["series"].tolist() == ["tiny"] and final["fewest_rows"].tolist() == [3]
    forecast = pd.read_csv(run / "forecast.csv")
    tiny = forecast[(forecast["model"] == "ols_per_series") & (forecast["series"] == "tiny")]
    history = data[data["sales"].notna()]
    np.testing.assert_allclose(tiny["forecast"], history.loc[history["series"] == "tiny", "sales"].mean(),
                               rtol=1e-13)
    notes = json.loads((run / "metrics.json").read_text(encoding="utf-8"))["notes"]
    fallen = 1 + bool(tiny_windows)
    assert any(f"ols_per_series: {fallen} series had no more rows than terms" in n for n in notes), notes
    assert "series_fallbacks.csv" in (run / "summary.md").read_text(encoding="utf-8")
    assert "series_fallbacks.csv" in out


# ---------------------------------------------------------------- the model over all series

def pooled_matrix(frame: pd.DataFrame, levels: list[str]) -> np.ndarray:
    """Intercept, x1, x2, shop, trend, then a 0/1 column per level but the first (sorted),
    then x1 times each of those: the treatment coding, written out."""
    dummies = np.column_stack([(frame["series"] == level).to_numpy(float) for level in levels[1:]])
    base = frame[PER_SERIES_COLUMNS].to_numpy(float)
    return np.column_stack([np.ones(len(frame)), base, dummies, dummies * frame[["x1"]].to_numpy()])


def test_the_pooled_fit_with_series_slopes_equals_statsmodels_formula(many):
    """coefficients.csv (ols) against statsmodels.formula.api.ols with C(series) dummies and
    C(series):x1 slopes on all history; forecast.csv against its predictions."""
    folder, run, _, _ = many
    data = read_data(folder)
    history, future = data[data["sales"].notna()], data[data["sales"].isna()]
    fit = smf.ols("sales ~ C(series) + x1 + x2 + shop + trend + C(series):x1", data=history).fit()
    names = {"Intercept": "intercept", "x1": "x1", "x2": "x2", "shop": "channel: shop",
             "trend": "months since 2018-01"}
    for term in fit.params.index:
        level = re.fullmatch(r"C\(series\)\[T\.(\w+)\](:x1)?", term)
        if level:
            names[term] = f"x1 × series: {level.group(1)}" if level.group(2) else f"series: {level.group(1)}"
    coefficients = pd.read_csv(run / "coefficients.csv")
    table = coefficients[coefficients["model"] == "ols"].set_index("term")
    assert sorted(table.index) == sorted(names.values())
    ours = [names[t] for t in fit.params.index]
    assert relative(table.loc[ours, "estimate"], fit.params) < RTOL
    assert relative(table.loc[ours, "std_error"], fit.bse) < RTOL
    forecast = pd.read_csv(run / "forecast.csv")
    pooled = forecast[forecast["model"] == "ols"].assign(period=lambda t: t["period"].astype(str))
    expected = future.assign(prediction=fit.predict(future), period=future["period"].astype(str))
    got = pooled.merge(expected[["series", "period", "prediction"]], on=["series", "period"],
                       validate="one_to_one")
    assert len(got) == len(future)
    assert relative(got["forecast"], got["prediction"]) < RTOL


def test_every_origin_s_pooled_prediction_equals_statsmodels_with_series_dummies(many):
    """Reference: statsmodels OLS on the explicit dummy matrix of each window (levels it holds;
    a series it does not hold gets the reference level and slope, as SeriesTerms states)."""
    folder, run, _, _ = many
    data = read_data(folder)
    predictions = pd.read_csv(run / "predictions.csv")
    pooled = predictions[predictions["model"] == "ols"]
    worst = 0.0
    for origin, train, test in backtest_windows(data, predictions):
        levels = sorted(train["series"].unique())
        fit = sm.OLS(train["sales"].to_numpy(), pooled_matrix(train, levels)).fit()
        expected = test.assign(expected=fit.predict(pooled_matrix(test, levels)),
                               period=test["period"].astype(str))
        got = pooled[pooled["origin"] == origin].merge(expected[["series", "period", "expected"]],
                                                       on=["series", "period"], validate="one_to_one")
        assert len(got) == len(test)
        worst = max(worst, relative(got["prediction"], got["expected"]))
    assert worst < RTOL


def test_grunfeld_with_firm_dummies_equals_statsmodels_and_the_within_estimates(tmp_path):
    """The Grunfeld data, 10 firms (American Steel left out, as in Baltagi), as a run: firms are
    series, years are consecutive months. The final pooled OLS with series intercepts is the
    least-squares dummy variable fit: statsmodels ols('invest ~ C(firm) + value + capital')
    to 1e-8, and Baltagi, Econometric Analysis of Panel Data, Table 2.1 (within estimator):
    value 0.110 (SE 0.012), capital 0.310 (SE 0.017)."""
    data = grunfeld.load_pandas().data
    data = data[data["firm"] != "American Steel"].copy()
    data["month"] = [f"{2000 + (int(year) - 1935) // 12}-{(int(year) - 1935) % 12 + 1:02d}-01"
                     for year in data["year"]]
    data[["month", "firm", "invest", "value", "capital"]].to_csv(tmp_path / "grunfeld.csv", index=False)
    spec = {"name": "grunfeld", "input": {"file": "grunfeld.csv", "date_column": "month",
                                          "series": ["firm"]},
            "target": "invest", "drivers": {"numeric": ["value", "capital"]},
            "validation": {"method": "holdout", "last_periods": 4},
            "models": ["ols", {"kind": "ols", "per_series": True}], "output": {"folder": "out"}}
    (tmp_path / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    code, out, err = run_cli(["run", str(tmp_path / "spec.yaml")])
    assert code == 0, err
    coefficients = pd.read_csv(run_folder(out) / "coefficients.csv")
    table = coefficients[coefficients["model"] == "ols"].set_index("term")
    fit = smf.ols("invest ~ C(firm) + value + capital", data=data).fit()
    names = {t: ("intercept" if t == "Intercept" else
                 f"series: {t[len('C(firm)[T.'):-1]}" if t.startswith("C(firm)") else t)
             for t in fit.params.index}
    assert sorted(table.index) == sorted(names.values())
    ours = [names[t] for t in fit.params.index]
    assert relative(table.loc[ours, "estimate"], fit.params) < RTOL
    assert relative(table.loc[ours, "std_error"], fit.bse) < RTOL
    np.testing.assert_allclose(table.loc[["value", "capital"], "estimate"], [0.110, 0.310], atol=5e-4)
    np.testing.assert_allclose(table.loc[["value", "capital"], "std_error"], [0.012, 0.017], atol=5e-4)
    # And the same run's model per series: each firm alone (statsmodels), as in the unit tests.
    mine = coefficients[coefficients["model"] == "ols_per_series"]
    for firm, own in data.groupby("firm"):
        alone = smf.ols("invest ~ value + capital", data=own).fit()
        got = mine[mine["series"] == firm].set_index("term").loc[["intercept", "value", "capital"]]
        assert relative(got["estimate"], alone.params) < RTOL


# ---------------------------------------------------------------- the stored model

def test_castline_forecast_with_model_json_reproduces_forecast_csv(many, tmp_path):
    """castline forecast (cli.main) on the run's future rows with its model.json: every
    model's forecast equals forecast.csv's, exactly (both written by castline's CSV writer)."""
    folder, run, _, _ = many
    raw = pd.read_csv(folder / "data.csv")
    raw[raw["sales"].isna()].drop(columns="sales").to_csv(tmp_path / "future.csv", index=False)
    written = pd.read_csv(run / "forecast.csv")
    for model in ("ols_per_series", "ols"):
        target = tmp_path / f"{model}.csv"
        code, _, err = run_cli(["forecast", str(run / "model.json"), str(tmp_path / "future.csv"),
                                "--model", model, "--output", str(target)])
        assert code == 0, err
        again = pd.read_csv(target)
        expected = written[written["model"] == model][["period", "series", "forecast"]]
        merged = again.merge(expected, on=["period", "series"], validate="one_to_one")
        assert len(merged) == len(expected) == 30
        np.testing.assert_array_equal(merged["forecast_x"], merged["forecast_y"])


# ---------------------------------------------------------------- where the fits run

def write_six_hundred(folder: Path, compute: dict | None) -> Path:
    """Write 600 short series (more than two chunks of CHUNK_SERIES) and a spec for them."""
    rng = np.random.default_rng(600)
    months = pd.period_range("2020-01", periods=20, freq="M")
    frames = []
    for k in range(600):
        start = 14 if k == 17 else 0          # one series too short in early windows
        n = len(months) - start
        x1, x2 = rng.normal(size=n), rng.normal(size=n)
        if k == 250:
            x2 = np.full(n, 3.0)              # constant within the series
        if k == 401:
            x2 = x1.copy()                    # rank-deficient: the careful fit, in a worker
        y = 10 + k % 7 + rng.normal() * x1 + rng.normal() * x2 + rng.normal(size=n)
        frames.append(pd.DataFrame({"month": [f"{m}-01" for m in months[start:]],
                                    "shop": f"s{k:03d}", "x1": x1.round(6), "x2": x2.round(6),
                                    "units": y.round(6)}))
    pd.concat(frames).to_csv(folder / "data.csv", index=False)
    spec = {"name": "six-hundred", "input": {"file": "data.csv", "date_column": "month",
                                             "series": ["shop"]},
            "target": "units", "drivers": {"numeric": ["x1", "x2"], "calendar": {"trend": True}},
            "validation": {"method": "rolling_origin", "horizon": 2, "min_train_periods": 14,
                           "origins": 3},
            "models": [{"kind": "ols", "per_series": True}, "seasonal_naive"],
            "output": {"folder": "out"}}
    if compute:
        spec["compute"] = compute
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


RUN_ID = re.compile(r"run-\d{8}T\d{6,}Z-[0-9a-f]{6}")
CREATED = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(\+00:00|Z)")


def masked(folder: Path, where: Path) -> dict[str, bytes]:
    """Return every file of a run folder but the report, with run ids, timestamps, the
    folder the run was made in, and the spec's compute section (the one key the runs
    differ in) masked."""
    out = {}
    for path in sorted(folder.iterdir()):
        if path.name == "report.html":
            continue
        text = path.read_text(encoding="utf-8").replace(str(where), "<folder>")
        text = CREATED.sub("<created>", RUN_ID.sub("<run id>", text))
        if path.name == "spec.yaml":
            text, found = re.subn(r"(?m)^compute:\n(  .*\n)+", "compute: <masked>\n", text)
            assert found == 1
        out[path.name] = text.encode("utf-8")
    return out




def test_local_worker_processes_and_dask_give_the_same_artefacts(tmp_path, dask_cluster):
    """Reference: the run in this process. With compute.workers: 2 (joblib worker processes,
    which do not see a monkeypatch, so the series are really more than two chunks) and with
    compute.scheduler (a Dask LocalCluster over TCP), every CSV, model.json, metrics.json,
    summary.md and the spec are the same bytes once run ids and times are masked."""
    assert 600 > 2 * per_series.CHUNK_SERIES
    ways = {"local": None, "workers": {"workers": 2},
            "dask": {"scheduler": dask_cluster.scheduler_address}}
    files = {}
    for way, compute in ways.items():
        folder = tmp_path / way
        folder.mkdir()
        code, out, err = run_cli(["run", str(write_six_hundred(folder, compute))])
        assert code == 0, err
        files[way] = masked(run_folder(out), folder)
    assert {"predictions.csv", "coefficients.csv", "forecast.csv", "model.json",
            "series_fallbacks.csv", "metrics.json"} <= set(files["local"])
    assert "fit_series_chunk" in dask_cluster.scheduler.task_prefixes   # it ran there
    fallbacks = pd.read_csv(io.BytesIO(files["local"]["series_fallbacks.csv"]))
    assert fallbacks["series"].tolist() == ["s017"]       # the fallback ran, in every way
    for way in ("workers", "dask"):
        assert sorted(files[way]) == sorted(files["local"])
        differing = [name for name in files["local"] if files[way][name] != files["local"][name]]
        assert not differing, f"{way}: {differing} differ from the run in this process"


def test_an_unreachable_scheduler_is_one_line_naming_compute_scheduler(tmp_path):
    """Through the console (subprocess): exit 2, one stderr line naming compute.scheduler
    at its line of the spec, no traceback, no run folder and no ledger written."""
    spec = dict(SPEC, compute={"scheduler": "tcp://127.0.0.1:1"})
    path = write_many_series(tmp_path, spec)
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    done = subprocess.run([sys.executable, "-m", "pipeline", "run", str(path)], cwd=tmp_path,
                          env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 2, done.stderr
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr, done.stderr
    line = next(n for n, text in enumerate(path.read_text().splitlines(), 1) if "scheduler" in text)
    assert done.stderr.startswith(f"castline: {path}:{line}: compute.scheduler: "), done.stderr
    assert "tcp://127.0.0.1:1" in done.stderr
    assert not (tmp_path / "out").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data.csv", "spec.yaml"]


# ---------------------------------------------------------------- progress on the console

def test_the_console_run_with_stderr_captured_shows_no_progress_bar(many, tmp_path):
    """stderr is a pipe here, not a terminal: nothing of the bar (its labels, its bar
    characters, cursor control) is written; compare the run with stderr on a terminal in
    test_progress_is_shown_when_stderr_is_a_terminal."""
    folder, _, _, _ = many
    env = dict(os.environ, TERM="xterm-256color", COLUMNS="120")
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    done = subprocess.run([sys.executable, "-m", "pipeline", "run", str(folder / "spec.yaml"),
                           "--output-folder", str(tmp_path / "out")], cwd=tmp_path, env=env,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""
    for fragment in ("series fitted", "━", "\x1b["):   # stdout has the word origins itself
        assert fragment not in done.stdout


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="needs a pseudo-terminal")
def test_progress_is_shown_when_stderr_is_a_terminal(many, tmp_path):
    """The counterpart of the test above (so that it can fail): with stderr on a
    pseudo-terminal, the run's bar labels reach it."""
    import pty
    import threading
    folder, _, _, _ = many
    env = dict(os.environ, TERM="xterm-256color", COLUMNS="120")
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    leader, follower = pty.openpty()
    chunks: list[bytes] = []

    def read() -> None:
        while True:
            try:
                chunk = os.read(leader, 65536)
            except OSError:
                return
            if not chunk:
                return
            chunks.append(chunk)

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    done = subprocess.run([sys.executable, "-m", "pipeline", "run", str(folder / "spec.yaml"),
                           "--output-folder", str(tmp_path / "out")], cwd=tmp_path, env=env,
                          stdout=subprocess.PIPE, stderr=follower, timeout=300)
    os.close(follower)
    reader.join(timeout=10)
    os.close(leader)
    assert done.returncode == 0
    shown = b"".join(chunks).decode("utf-8", "replace")
    assert "origins" in shown and "series fitted" in shown, shown[:500]


def test_a_plan_whose_features_refer_to_others_is_stored_and_forecasts_again(tmp_path):
    """Series slopes and interactions hold the driver's own fitted terms: model.json must
    store them as references (it raised TypeError at publish before), and castline
    forecast must give forecast.csv's numbers exactly."""
    drivers = dict(SPEC["drivers"], interactions=[["x1", "x2"]])
    path = write_many_series(tmp_path, dict(SPEC, drivers=drivers))
    code, out, err = run_cli(["run", str(path)])
    assert code == 0, err
    run = run_folder(out)
    stored = json.loads((run / "model.json").read_text(encoding="utf-8"))
    assert {"InteractionTerms", "SeriesTerms"} <= {p["class"] for p in stored["plan"]["parts"]}
    raw = pd.read_csv(tmp_path / "data.csv")
    raw[raw["sales"].isna()].drop(columns="sales").to_csv(tmp_path / "future.csv", index=False)
    code, _, err = run_cli(["forecast", str(run / "model.json"), str(tmp_path / "future.csv"),
                            "--output", str(tmp_path / "again.csv")])
    assert code == 0, err
    again = pd.read_csv(tmp_path / "again.csv")
    written = pd.read_csv(run / "forecast.csv")[["period", "series", "model", "forecast"]]
    merged = again.merge(written, on=["period", "series", "model"], validate="one_to_one")
    # 30 forecast rows for each of 7 models: the mean of the training months, ols, ols per series and the
    # four simple rules a rolling origin always compares
    assert set(written["model"]) == {"mean_baseline", "ols", "ols_per_series", "calendar_month_mean",
                                     "trailing_mean", "last_value", "seasonal_naive"}
    assert len(merged) == len(written) == 7 * 30
    np.testing.assert_array_equal(merged["forecast_x"], merged["forecast_y"])


# ---------------------------------------------------------------- bugs found and mended

# The multi-step branch once skipped collecting the fallbacks of a model per series.
def test_fallbacks_under_the_multi_step_strategy_are_listed(tmp_path):
    drivers = dict(SPEC["drivers"], lags=[{"column": "sales", "lags": [1]}])
    path = write_many_series(tmp_path, dict(SPEC, drivers=drivers))
    raw = pd.read_csv(tmp_path / "data.csv")
    raw[raw["region"] != "tiny"].to_csv(tmp_path / "data.csv", index=False)   # no lags to read
    code, out, err = run_cli(["run", str(path)])
    assert code == 0, err
    run = run_folder(out)
    predictions = pd.read_csv(run / "predictions.csv")
    late = predictions[(predictions["model"] == "ols_per_series") & (predictions["series"] == "late")]
    # 'late' has 1–6 usable rows (its first has no lag) against 6 terms: it falls back in the
    # first windows, as its prediction_se (s·sqrt(1 + 1/n), df = n − 1) shows ...
    assert (late.groupby("origin")["df_resid"].first().iloc[:3] <= 3).all()
    # ... and the run should say so.
    table = pd.read_csv(run / "series_fallbacks.csv")
    assert "late" in set(table.loc[table["stage"] == "backtest", "series"])


# The ledger once stored a model per series' terms without the series, so compare paired
# every series' intercept with every other's.
def test_compare_of_two_identical_per_series_runs_reports_no_coefficient_moves(tmp_path):
    path = write_many_series(tmp_path)
    folders = []
    for _ in range(2):
        code, out, err = run_cli(["run", str(path)])
        assert code == 0, err
        folders.append(str(run_folder(out)))
    code, out, err = run_cli(["compare", *folders, "--format", "json"])
    assert code == 0, err
    assert json.loads(out)["coefficient_moves"] == []


def test_series_columns_too_large_for_memory_stop_with_one_line_at_series_effects(tmp_path, monkeypatch):
    # The models over all series hold a dense 0/1 column per series; beyond
    # FeaturePlan.LARGEST_SERIES_DESIGN cells the check stops before any fit, naming the key
    # and pointing to the model per series. The bound is lowered here so ten series cross it.
    from pipeline.features.plan import FeaturePlan
    monkeypatch.setattr(FeaturePlan, "LARGEST_SERIES_DESIGN", 100)
    path = write_many_series(tmp_path)
    code, out, err = run_cli(["check", str(path)])
    assert code == 2, (out, err)
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "drivers.series_effects" in lines[0] and "per_series" in lines[0]
    assert "Traceback" not in err
    code, out, err = run_cli(["run", str(path)])
    assert code == 2 and not (tmp_path / "out").exists()
