"""`castline init` and `castline check` on a real open dataset, and init's promises.

The real data is statsmodels.datasets.co2 (Scripps/NOAA: weekly CO2 at Mauna
Loa, shipped with statsmodels), resampled to month starts with
``.resample('MS').mean()``. Every reference value about it is computed from that
dataset here, and interpolated values are compared with numpy.interp (reference
library). The demo CSV is invented and used for plumbing only.

Every command runs as a real ``python -m pipeline`` process; the processes of
one module start together because importing castline dominates each one.
"""

from __future__ import annotations

import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import DEMO_DATA, TEST_DATA

import pipeline
import pipeline.runner
from pipeline.core.columns import PERIOD

CORPUS = TEST_DATA / "broken_inputs"


@dataclass
class Outcome:
    returncode: int
    stdout: str
    stderr: str
    cwd: Path


def start(args: list[str], cwd: Path) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "pipeline", *args], cwd=cwd, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)


def finish(process: subprocess.Popen, cwd: Path) -> Outcome:
    stdout, stderr = process.communicate(timeout=300)
    return Outcome(process.returncode, stdout, stderr, cwd)


def co2_monthly() -> pd.DataFrame:
    """Return statsmodels.datasets.co2 (Scripps/NOAA) as month-start means, date as a column."""
    import statsmodels.api as sm
    weekly = sm.datasets.co2.load_pandas().data
    monthly = weekly.resample("MS").mean()
    monthly.index.name = "date"
    return monthly.reset_index()


@pytest.fixture(scope="module")
def outcomes(tmp_path_factory) -> dict[str, Outcome]:
    folders = {name: tmp_path_factory.mktemp(name) for name in
               ("co2", "demo", "no_date", "exists", "exists_default", "decimal", "decimal_all")}
    co2_monthly().to_csv(folders["co2"] / "co2.csv", index=False)
    (folders["no_date"] / "counts.csv").write_text(
        "store,units,price\nA,3,1.5\nB,4,1.25\nA,5,1.75\nB,6,1.5\n", encoding="utf-8")
    (folders["exists"] / "mine.yaml").write_text("# my own spec\n", encoding="utf-8")
    (folders["exists_default"] / "compost_sales.spec.yaml").write_text("keep: me\n", encoding="utf-8")
    european = str(CORPUS / "decimal_comma_semicolon.csv")
    commands = {
        "co2": ["init", "co2.csv"],
        "demo": ["init", str(DEMO_DATA), "--spec-file", "demo.yaml"],
        "no_date": ["init", "counts.csv"],
        "exists": ["init", str(DEMO_DATA), "--spec-file", "mine.yaml"],
        "exists_default": ["init", str(DEMO_DATA)],
        "decimal": ["init", european, "--spec-file", "eu.yaml", "--decimal", ",", "--thousands", "."],
        "decimal_all": ["init", european, "--spec-file", "eu.yaml", "--delimiter", ";",
                        "--decimal", ",", "--thousands", "."],
    }
    started = {name: start(args, folders[name]) for name, args in commands.items()}
    done = {name: finish(process, folders[name]) for name, process in started.items()}
    # The second step of each init-then-check scenario.
    follow = {"co2_check": ("co2", ["check", "co2.spec.yaml", "--problems", "allowed.csv"])}
    if done["decimal_all"].returncode == 0:
        follow["decimal_all_check"] = ("decimal_all", ["check", "eu.yaml"])
    started = {name: (start(args, folders[base]), folders[base]) for name, (base, args) in follow.items()}
    done.update({name: finish(process, cwd) for name, (process, cwd) in started.items()})
    return done


def assert_user_error(outcome: Outcome, fragment: str) -> None:
    assert outcome.returncode == 2, outcome.stderr
    assert "Traceback" not in outcome.stderr
    lines = outcome.stderr.strip().splitlines()
    assert len(lines) == 1, outcome.stderr
    assert lines[0].startswith("castline: ") and fragment in lines[0]


# ------------------------------------------------------------------ real data: statsmodels co2

def test_init_on_co2_writes_a_monthly_spec_on_the_date_column(outcomes):
    outcome = outcomes["co2"]
    assert outcome.returncode == 0, outcome.stderr
    spec = yaml.safe_load((outcome.cwd / "co2.spec.yaml").read_text(encoding="utf-8"))
    assert spec["input"]["period"] == "month"
    assert spec["input"]["date_column"] == "date"
    assert spec["input"]["series"] == []
    assert spec["target"] == "co2"
    assert spec["columns"]["date"] == {"type": "date"}
    assert spec["columns"]["co2"]["type"] == "number"
    # statsmodels.datasets.co2 (Scripps/NOAA) has months with no weekly reading at all.
    assert co2_monthly()["co2"].isna().any()
    assert spec["input"]["gaps"] == "fill"


def test_check_passes_on_the_co2_spec_that_init_wrote(outcomes):
    outcome = outcomes["co2_check"]
    assert outcome.returncode == 0, outcome.stdout + outcome.stderr
    assert "Traceback" not in outcome.stderr
    monthly = co2_monthly()  # statsmodels.datasets.co2 (Scripps/NOAA)
    assert f"{len(monthly)} rows pass the checks" in outcome.stdout
    allowed = pd.read_csv(outcome.cwd / "allowed.csv")
    assert list(allowed["check"]) == ["target missing in history, filled by interpolation"]
    assert allowed["count"].iloc[0] == monthly["co2"].isna().sum()
    assert allowed["row"].iloc[0] == monthly["co2"].isna().to_numpy().argmax() + 2  # header = line 1


def test_co2_months_without_a_reading_are_filled_like_numpy_interp(outcomes):
    data = pipeline.check(outcomes["co2"].cwd / "co2.spec.yaml")
    monthly = co2_monthly()  # statsmodels.datasets.co2 (Scripps/NOAA)
    months = monthly["date"].dt.to_period("M")
    ordinal = np.array([m.ordinal for m in months], dtype=float)
    given = monthly["co2"].notna().to_numpy()
    expected = np.interp(ordinal[~given], ordinal[given], monthly["co2"].to_numpy()[given])  # numpy.interp
    history = data.history.set_index(PERIOD)
    assert len(data.history) == len(monthly)
    # The file has no months to forecast, so init wrote forecast.months: castline adds the
    # twelve after the last actual (pandas' period_range, an independent construction).
    assert list(data.future[PERIOD]) == list(pd.period_range(months.max() + 1, periods=12, freq="M"))
    got = history.loc[list(months[~given]), "co2"].to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    np.testing.assert_array_equal(history.loc[list(months[given]), "co2"].to_numpy(),
                                  monthly["co2"].to_numpy()[given])


# ------------------------------------------------------------------ init's promises

def test_init_on_the_demo_infers_series_target_and_every_type(outcomes):
    outcome = outcomes["demo"]  # invented demo data: plumbing only
    assert outcome.returncode == 0, outcome.stderr
    assert "series key ['region']" in outcome.stdout
    spec = yaml.safe_load((outcome.cwd / "demo.yaml").read_text(encoding="utf-8"))
    assert spec["input"]["date_column"] == "month"
    assert spec["input"]["period"] == "month"
    assert spec["input"]["series"] == ["region"]
    assert spec["target"] == "bags_sold"
    types = {column: rule["type"] for column, rule in spec["columns"].items()}
    assert types == {"month": "date", "region": "category", "bags_sold": "whole_number",
                     "shelf_price": "number", "promo_days": "whole_number",
                     "rainfall_mm": "number", "mean_temp_c": "number"}
    assert spec["columns"]["region"]["allowed"] == sorted(pd.read_csv(DEMO_DATA)["region"].unique())
    assert spec["columns"]["bags_sold"]["missing_allowed"] is True
    demo = pd.read_csv(DEMO_DATA)
    ahead = demo[demo["bags_sold"].isna()]   # the months to forecast: given where all are filled
    drivers = ["shelf_price", "promo_days", "rainfall_mm", "mean_temp_c"]
    assert spec["drivers"]["numeric"] == [
        {"column": c, "future": "given" if ahead[c].notna().all() else "month_mean"} for c in drivers]
    # The history (94 months) allows a test: rolling origins, at least 12 of them (MIN_ORIGINS),
    # each of them forecasting a full horizon inside the history.
    validation = spec["validation"]
    assert validation["method"] == "rolling_origin"
    months = demo.loc[demo["bags_sold"].notna(), "month"].nunique()
    assert months - validation["min_train_periods"] - validation["horizon"] + 1 >= 12
    pipeline.load_spec(outcome.cwd / "demo.yaml")  # the draft is a valid spec


def test_the_starter_spec_of_the_demo_runs_and_estimates_the_weather(outcomes, tmp_path):
    # The demo's months to forecast carry no weather: the starter marks it month_mean and
    # the run estimates it in the backtest and the forecast (invented data: plumbing only).
    outcome = outcomes["demo"]
    result = pipeline.run(outcome.cwd / "demo.yaml", output_folder=tmp_path)
    assert result.backtest.estimated == {"rainfall_mm": "month_mean", "mean_temp_c": "month_mean"}
    assert result.forecast["forecast"].notna().all()
    assert any("estimated by castline" in note and "rainfall_mm (month_mean)" in note
               for note in result.warnings)


@pytest.mark.parametrize(("name", "spec_file", "before"), [
    ("exists", "mine.yaml", "# my own spec\n"),
    ("exists_default", "compost_sales.spec.yaml", "keep: me\n"),
])
def test_init_never_overwrites_a_file(outcomes, name, spec_file, before):
    outcome = outcomes[name]
    assert_user_error(outcome, "already exists; castline init never overwrites a file")
    assert (outcome.cwd / spec_file).read_text(encoding="utf-8") == before
    assert sorted(p.name for p in outcome.cwd.iterdir()) == [spec_file]


def test_init_without_a_date_column_is_one_line(outcomes):
    outcome = outcomes["no_date"]
    assert_user_error(outcome, "counts.csv: no column holds dates")
    assert not (outcome.cwd / "counts.spec.yaml").exists()


def test_init_honours_decimal_and_thousands_without_delimiter(outcomes):
    outcome = outcomes["decimal"]
    assert outcome.returncode == 0, outcome.stderr
    spec = yaml.safe_load((outcome.cwd / "eu.yaml").read_text(encoding="utf-8"))
    assert spec["columns"]["sales"]["type"] == "number"


def test_init_with_every_csv_option_infers_the_numbers(outcomes):
    outcome = outcomes["decimal_all"]
    assert outcome.returncode == 0, outcome.stderr
    spec = yaml.safe_load((outcome.cwd / "eu.yaml").read_text(encoding="utf-8"))
    assert spec["target"] == "sales"
    assert spec["columns"]["sales"]["type"] == "number"
    assert spec["columns"]["price"]["type"] == "number"


def test_check_passes_on_the_spec_init_wrote_for_a_decimal_comma_file(outcomes):
    spec = yaml.safe_load((outcomes["decimal_all"].cwd / "eu.yaml").read_text(encoding="utf-8"))
    assert spec["input"]["csv"] == {"delimiter": ";", "decimal": ",", "thousands": "."}
    assert outcomes["decimal_all_check"].returncode == 0, outcomes["decimal_all_check"].stdout


# ------------------------------------------------------------------ a generated file, end to end

def shops(history: int = 30, future: int = 3, seed: int = 5) -> pd.DataFrame:
    """Invented sales of two shops (plumbing only): price and weather filled in every month,
    visits = sales plus small noise (another measure of the outcome, empty ahead like sales)."""
    rng = np.random.default_rng(seed)
    rows = []
    for k, month in enumerate(pd.date_range("2021-01-01", periods=history + future, freq="MS")):
        for j, shop in enumerate(("Hill", "Quay")):
            price = round(5 + 0.05 * k + rng.choice([0.0, -0.4]), 2)
            weather = round(10 + 8 * np.sin(2 * np.pi * (month.month - 4) / 12) + rng.normal(0, 1), 1)
            sales = round(200 + 30 * j + 5 * weather - 10 * price + rng.normal(0, 5), 1)
            ahead = k >= history
            rows.append({"month": month.strftime("%Y-%m-%d"), "shop": shop,
                         "sales": None if ahead else sales,
                         "visits": None if ahead else round(sales + rng.normal(0, 1), 1),
                         "price": price, "weather": weather})
    return pd.DataFrame(rows)


def test_the_starter_spec_runs_end_to_end_on_a_generated_file(tmp_path):
    shops().to_csv(tmp_path / "shops.csv", index=False)
    spec_path, _ = pipeline.runner.init(tmp_path / "shops.csv", tmp_path / "shops.spec.yaml")
    spec = pipeline.load_spec(spec_path)
    assert [d.column for d in spec.drivers.numeric] == ["price", "weather"]   # visits left out
    assert spec.drivers.calendar.trend and spec.drivers.calendar.month_of_year == "fourier"
    result = pipeline.runner.run(spec_path, output_folder=tmp_path / "runs")
    assert result.folder.path.is_dir() and result.folder.report.is_file()
    assert len(result.data.future) == 6   # 3 months to forecast × 2 shops
    assert "ols" in result.metrics["model"].tolist()
    forecast = result.forecast_result.forecast
    assert np.isfinite(forecast.loc[forecast["model"] == "ols", "forecast"]).all()
    assert (forecast["model"] == "ols").sum() == 6
