"""Shared fixtures, and the paths every test reads the project's files from.

Tests sit at different depths of tests/; they import these paths
(``from conftest import ROOT, TEST_DATA``) instead of working them out from their own file.
"""

import atexit
import contextlib
import io
import shutil
import tempfile
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from pipeline.core import forked

ROOT = Path(__file__).resolve().parents[1]
TEST_DATA = ROOT / "tests" / "data"
SHIPPED_DEMO_SPEC = ROOT / "configs" / "compost_demo.yaml"
SHIPPED_DEMO_DATA = ROOT / "data_samples" / "compost_sales.csv"
_ROLLING = """validation:
  method: rolling_origin
  horizon: 12
  min_train_periods: 36
"""
_HOLDOUT = """validation:
  method: holdout
  last_periods: 12
"""


def _holdout_demo() -> tuple[Path, Path]:
    """Return the spec and data most tests run: the shipped demo, validated on a single
    12-month holdout (one fit per model: a second or two, where the demo's 47 rolling
    origins take ten times as long), copied into a temporary folder in the shipped layout
    (configs/ beside data_samples/, so the spec's relative paths hold and its default
    output folder is the copy's reports/). The shipped demo itself runs in
    tests/runs/test_features_end_to_end.py and tests/spec/test_loader.py."""
    folder = Path(tempfile.mkdtemp(prefix="castline-demo-"))
    atexit.register(shutil.rmtree, folder, True)
    (folder / "configs").mkdir()
    (folder / "data_samples").mkdir()
    text = SHIPPED_DEMO_SPEC.read_text(encoding="utf-8")
    assert _ROLLING in text, "the shipped demo's validation block changed: update _ROLLING"
    spec = folder / "configs" / SHIPPED_DEMO_SPEC.name
    spec.write_text(text.replace(_ROLLING, _HOLDOUT), encoding="utf-8")
    data = folder / "data_samples" / SHIPPED_DEMO_DATA.name
    shutil.copy(SHIPPED_DEMO_DATA, data)
    return spec, data


DEMO_SPEC, DEMO_DATA = _holdout_demo()


def demo_with_planned_weather() -> pd.DataFrame:
    """Return the demo data with the months to forecast given rainfall and temperature (the
    same month a year earlier, as if someone had planned them), for tests of drivers whose
    future values are in the data; the demo itself leaves them empty for castline to estimate."""
    frame = pd.read_csv(DEMO_DATA)
    months = pd.PeriodIndex(frame["month"], freq="M")
    earlier = frame.set_index([frame["region"], months])
    ahead = frame["bags_sold"].isna()
    for column in ("rainfall_mm", "mean_temp_c"):
        wanted = pd.MultiIndex.from_arrays([frame.loc[ahead, "region"], months[ahead.to_numpy()] - 12])
        frame.loc[ahead, column] = earlier[column].reindex(wanted).to_numpy()
    return frame


def run_cli(args: list[str]) -> tuple[int, str, str]:
    """Run castline's command line in this process; return the exit code, stdout and stderr."""
    from pipeline import cli
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main(args)
    return code, out.getvalue(), err.getvalue()


def run_spec(folder: Path, spec: dict) -> Path:
    """Write a spec (a dict) as spec.yaml in the folder, run it as a user would and return the
    run folder it wrote (the run must succeed)."""
    import yaml
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    code, _, err = run_cli(["run", str(folder / "spec.yaml")])
    assert code == 0, err
    (run,) = [path for path in (folder / spec["output"]["folder"]).iterdir() if path.is_dir()]
    return run


@pytest.fixture
def demo_spec_path() -> Path:
    """The demo spec as shipped (rolling origins)."""
    return SHIPPED_DEMO_SPEC


@pytest.fixture(scope="module")
def dask_cluster():
    """An in-process Dask cluster (dask.distributed.LocalCluster) over TCP on this machine."""
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, processes=False, threads_per_worker=1,
                                       protocol="tcp://", host="127.0.0.1", dashboard_address=":0")
    yield cluster
    cluster.close()


# A tiny invented forecast for plumbing tests of the run folder and the ledger: one series (or
# two, with `regions`), monthly from 2020-01, y = 10 + 2·x + noise (seeded). Invented data:
# never a reference value.
TINY_MONTHS = 30


def tiny_data(regions: tuple[str, ...] = ()) -> pd.DataFrame:
    rng = np.random.default_rng(20240101)
    frames = []
    for region in regions or (None,):
        x = rng.uniform(0, 10, TINY_MONTHS).round(2)
        frame = pd.DataFrame({"month": pd.period_range("2020-01", periods=TINY_MONTHS, freq="M")
                              .to_timestamp().strftime("%Y-%m-%d"),
                              "x": x, "y": (10 + 2 * x + rng.normal(0, 1, TINY_MONTHS)).round(2)})
        if region is not None:
            frame.insert(1, "region", region)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def write_tiny_spec(folder: Path, data, *, actuals_to: str, **keys) -> Path:
    """Write data.csv (the target emptied after `actuals_to`, three months kept to forecast)
    and spec.yaml into folder; return the spec's path. `keys` override top-level spec keys."""
    folder.mkdir(parents=True, exist_ok=True)
    months = pd.PeriodIndex(pd.to_datetime(data["month"]), freq="M")
    cut = pd.Period(actuals_to, "M")
    frame = data[months <= cut + 3].copy()
    frame.loc[months[months <= cut + 3] > cut, "y"] = float("nan")
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": "tiny", "input": {"file": "data.csv", "date_column": "month", "period": "month",
                                      "as_of": "2027-01-31"},
            "target": "y", "drivers": {"numeric": ["x"]},
            "validation": {"method": "holdout", "last_periods": 6}, "models": ["ols"],
            "output": {"folder": "runs"}}
    if "region" in data.columns:
        spec["input"]["series"] = ["region"]
    spec.update(keys)
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


@pytest.fixture(scope="session")
def tiny_runs(tmp_path_factory):
    """Three runs of the tiny spec into one ledger (do not change their files):

    1. actuals to 2021-12, forecasting 2022-01..03;
    2. actuals to 2022-03 (scores run 1's three forecasts), forecasting 2022-04..06;
    3. the same data with 2022-02's actual revised up by 5, and a new description.

    Returns (spec path, ledger path, [(RunResult, the data.csv it read as a table)] oldest first).
    """
    import pipeline
    base = tmp_path_factory.mktemp("tiny_runs")
    data = tiny_data()
    revised = data.copy()
    revised.loc[revised["month"] == "2022-02-01", "y"] += 5
    runs = []
    for frame, cut, keys in [(data, "2021-12", {}), (data, "2022-03", {}),
                             (revised, "2022-03", {"description": "Revised February."})]:
        spec = write_tiny_spec(base, frame, actuals_to=cut, **keys)
        runs.append((pipeline.run(spec), pd.read_csv(base / "data.csv")))
    return spec, base / "runs" / "ledger.sqlite", runs


def invented_shops(history: int, future: int = 3, *, weather_ahead: bool = True, seed: int = 7,
                   remark: bool = False) -> pd.DataFrame:
    """Invented sales of two shops (plumbing only): `history` months with sales, then `future`
    months to forecast with sales and visits empty. visits is the sales plus small noise
    (another measure of the outcome); price is planned in every month; weather is given in the
    months to forecast only when `weather_ahead`; with `remark`, a free-text column the spec
    does not use."""
    rng = np.random.default_rng(seed)
    months = pd.date_range("2021-01-01", periods=history + future, freq="MS")
    rows = []
    for k, month in enumerate(months):
        for j, shop_name in enumerate(("Hill", "Quay")):
            price = round(5 + 0.05 * k + rng.choice([0.0, -0.4]), 2)
            weather = round(10 + 8 * np.sin(2 * np.pi * (month.month - 4) / 12) + rng.normal(0, 1), 1)
            sales = round(200 + 30 * j + 5 * weather - 10 * price + rng.normal(0, 5), 1)
            ahead = k >= history
            row = {"shop": shop_name, "month": month.strftime("%Y-%m-%d"),
                   "sales": None if ahead else sales,
                   "visits": None if ahead else round(sales + rng.normal(0, 1), 1),
                   "price": price, "weather": None if ahead and not weather_ahead else weather}
            if remark:
                row["remark"] = f"counted by hand, sheet {2 * k + j}"
            rows.append(row)
    return pd.DataFrame(rows)


@pytest.fixture(autouse=True)
def _one_process_unless_marked(request, monkeypatch):
    """Run a test's own work (in this process) without forked copies (core.forked), unless it is
    marked ``forks``: whether this process could fork depended on threads an earlier test left (a
    Dask cluster's, loky's), so a test's outcome depended on the order of the tests. A test
    marked ``forks`` stops loky's threads and is skipped where the process still cannot fork (not
    Linux, one core); test_forked_fresh.py runs test_forked.py in a fresh process too. The
    commands a test runs as subprocesses fork as a user's do."""
    if request.node.get_closest_marker("forks") is None:
        monkeypatch.setattr(forked, "can_fork", lambda: False)
        return
    if threading.active_count() > 1:
        from joblib.externals.loky import get_reusable_executor
        get_reusable_executor().shutdown(wait=True)
    if not forked.can_fork():
        pytest.skip("this process cannot fork: not Linux, one core, or threads running "
                    f"({[thread.name for thread in threading.enumerate()]})")


def kept_figures(patch) -> list:
    """Keep each figure a picture function hands to plots.inline_picture (drawn, to read back);
    ``patch``: a monkeypatch, which puts inline_picture back when it is undone."""
    from pipeline.present import plots
    figures = []
    real = plots.inline_picture

    def keep(figure, alt, kind=None):
        picture = real(figure, alt, kind)
        figures.append(figure)
        return picture
    patch.setattr(plots, "inline_picture", keep)
    return figures
