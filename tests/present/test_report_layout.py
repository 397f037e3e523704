"""report.html as a reviewer's screen shows it: the first screen answers and forecasts, nothing
is wider than the window, and tables fit a desktop window without a sideways scroll.

Measured in Debian's headless Chromium (tests/browser.py measure_layout) on the invented demo,
and on a generated panel of 50 series (plumbing: invented data, never a reference value). The
sizes are the issue's: 1400 × 900 (a desktop window), 1280 × 800 (a laptop), 390 × 844 (a phone).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from browser import CHROMEDRIVER, CHROMIUM, NEEDS_A_BROWSER, measure_layout, read_page
from conftest import DEMO_SPEC

import pipeline

pytestmark = pytest.mark.skipif(not (CHROMIUM and CHROMEDRIVER), reason=NEEDS_A_BROWSER)
SERIES = 50
MODEL_WORDS = {"ols": "OLS", "ridge": "ridge"}   # the catalogue's words for the models the demo may recommend


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    return pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs")).folder.path / "report.html"


def fifty_series(folder: Path) -> Path:
    """Write a generated panel of 50 series (levels 20 to 5,000, so small and large series
    share the page) with a planned driver and a season, and its spec; return the spec's path.
    Invented data (seeded numpy), plumbing only."""
    rng = np.random.default_rng(50)
    months = pd.period_range("2021-01", periods=51, freq="M")
    rows = []
    for number, level in enumerate(np.geomspace(20, 5000, SERIES)):
        for index, month in enumerate(months):
            price = round(4 + rng.uniform(-0.5, 0.5), 2)
            sales = level * (1 + 0.25 * np.sin(2 * np.pi * month.month / 12)) - 3 * price + rng.normal(0, 0.05 * level)
            rows.append({"month": month.to_timestamp().strftime("%Y-%m-%d"), "store": f"store {number:02d}",
                         "price": price, "sales": round(sales, 1) if index < 48 else None})
    pd.DataFrame(rows).to_csv(folder / "panel.csv", index=False)
    spec = {"name": "fifty-stores", "input": {"file": "panel.csv", "date_column": "month", "period": "month",
                                              "series": ["store"], "as_of": "2030-01-01"},
            "target": "sales", "drivers": {"numeric": [{"column": "price", "future": "given"}],
                                           "calendar": {"month_of_year": "fourier", "harmonics": 1}},
            "validation": {"method": "rolling_origin", "horizon": 3, "min_train_periods": 36, "origins": 3},
            "models": [{"kind": "ols", "per_series": True}], "output": {"folder": "runs"}}
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return folder / "spec.yaml"


@pytest.fixture(scope="module")
def panel_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fifty")
    return pipeline.run(fifty_series(folder)).folder.path / "report.html"


def _check_desktop(report, profile, width: int, height: int) -> None:
    layout = measure_layout(report, profile, width, height)
    assert (layout.width, layout.height) == (width, height)
    # The first screen holds the answer, the forecast picture, the next months' numbers and the
    # caution line: each ends within the window's height.
    for part in ("answer", "picture", "numbers", "caution"):
        assert layout.bottoms[part] is not None and layout.bottoms[part] <= height, (part, layout.bottoms)
    # Nothing is wider than the window, and no table needs a sideways scroll.
    assert layout.scroll_width == width and layout.outside == [], layout.outside
    assert layout.scrolling == [], layout.scrolling


@pytest.mark.parametrize("width, height", [(1400, 900), (1280, 800)])
def test_the_demo_reports_first_screen_answers_and_forecasts_and_nothing_scrolls(demo_report, tmp_path,
                                                                                  width, height):
    _check_desktop(demo_report, tmp_path / "profile", width, height)


def test_a_fifty_series_report_keeps_to_the_same_limits(panel_report, tmp_path):
    _check_desktop(panel_report, tmp_path / "profile", 1400, 900)
    phone = measure_layout(panel_report, tmp_path / "phone", 390, 844)
    assert phone.scroll_width == 390 and phone.outside == [], phone.outside


def test_on_a_phone_only_tables_scroll_and_inside_their_own_box(demo_report, tmp_path):
    layout = measure_layout(demo_report, tmp_path / "profile", 390, 844)
    assert layout.width == 390
    assert layout.scroll_width == 390 and layout.outside == [], layout.outside
    # the first screen's parts follow one another in one column
    bottoms = layout.bottoms
    assert bottoms["answer"] < bottoms["picture"] < bottoms["numbers"] < bottoms["caution"]


def test_the_next_months_are_the_stated_forecast_of_the_largest_series(demo_report):
    # The reference: forecast.csv and history.csv of the run folder, read with pandas; the
    # stated interval is the method named under the numbers.
    folder = demo_report.parent
    page = read_page(demo_report)
    shown = page.frame("next-months")
    history = pd.read_csv(folder / "history.csv", dtype={"period": str, "series": str})
    largest = history.groupby("series")["actual"].sum().idxmax()
    forecast = pd.read_csv(folder / "forecast.csv", dtype={"period": str, "series": str})
    text = demo_report.read_text(encoding="utf-8")
    recommended = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["recommended"]
    assert f"{MODEL_WORDS[recommended]}'s forecast with its " in text
    own = forecast[(forecast["model"] == recommended) & (forecast["series"] == largest)].sort_values("period")
    assert f"The next 3 months: {largest}" in text
    assert list(shown["month"]) == list(own["period"].head(3))
    np.testing.assert_allclose(shown["forecast"], own["forecast"].head(3), rtol=1e-12)
    total = forecast[forecast["model"] == recommended].groupby("period")["forecast"].sum().head(3)
    for period, value in total.items():
        assert f'{period} <strong data-value="{value}">' in text


def test_on_a_phone_a_long_data_path_breaks_rather_than_widen_the_page(tmp_path):
    """The run's data file is named by its whole path in the report: a path longer than a phone's
    line (here the demo data in folders of 150 characters) wraps, and the page stays 390 wide."""
    from conftest import DEMO_DATA
    folder = tmp_path / ("a_folder_with_a_long_name_" * 3) / ("and_another_inside_it_" * 3)
    folder.mkdir(parents=True)
    data = folder / "compost_sales_as_delivered_by_the_regional_office.csv"
    data.write_bytes(DEMO_DATA.read_bytes())
    spec = yaml.safe_load(DEMO_SPEC.read_text(encoding="utf-8"))
    spec["input"]["file"] = str(data)
    spec_file = tmp_path / "spec.yaml"
    spec_file.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    report = pipeline.run(spec_file, output_folder=tmp_path / "runs").folder.path / "report.html"
    assert str(data) in report.read_text(encoding="utf-8")
    layout = measure_layout(report, tmp_path / "profile", 390, 844)
    assert layout.scroll_width == 390 and layout.outside == [], layout.outside
