"""The report's pictures leave matplotlib's global settings as they were.

Importing pipeline.present.plots and drawing pictures must not change
matplotlib.rcParams nor choose a backend: the pictures are drawn on figures of
their own with the Agg canvas, in a style set only while each is drawn
(matplotlib.rc_context). The reference is a snapshot of matplotlib.rcParams
taken in a fresh interpreter before the import (read without resolving the
backend); the data drawn are a few invented numbers.
"""

from __future__ import annotations

import base64
import json
import os
import subprocess
import sys
import urllib.parse
import warnings
from xml.etree import ElementTree

import matplotlib
import numpy as np
import pandas as pd
import pytest
from conftest import ROOT, kept_figures

from pipeline.core.catalogue import model_label
from pipeline.core.formatting import format_number
from pipeline.present import plots
from pipeline.present.history_plot import plot_history

FRESH = r"""
import json, sys
import matplotlib

def snapshot():
    # dict's own lookup: reading rcParams["backend"] would resolve (and so set) the backend.
    return {key: repr(dict.__getitem__(matplotlib.rcParams, key)) for key in dict.keys(matplotlib.rcParams)}

before = snapshot()
import numpy as np
import pandas as pd
import pytest
from pipeline.core.formatting import format_number
from pipeline.present import plots
after_import = snapshot()
history = pd.DataFrame({"period": [str(p) for p in pd.period_range("2020-01", periods=12, freq="M")],
                        "series": "a", "actual": np.arange(12.0)})
predictions = pd.DataFrame({"origin": "2020-09", "period": history["period"].iloc[-3:].tolist() * 2,
                            "series": "a", "horizon": [1, 2, 3] * 2,
                            "model": ["ols"] * 3 + ["mean_baseline"] * 3,
                            "prediction": [9.5, 10.0, 11.5, 4.0, 4.0, 4.0]})
plots.backtest_picture(history, predictions)
plots.series_picture(history, predictions, "a", "ols", 0.5, ["mean_baseline", "ols"])
after_drawing = snapshot()
changed = lambda after: sorted(k for k in set(before) | set(after) if before.get(k) != after.get(k))
print(json.dumps({"import": changed(after_import), "drawing": changed(after_drawing),
                  "pyplot": "matplotlib.pyplot" in sys.modules}))
"""


def test_importing_the_plots_and_drawing_leaves_rcparams_and_the_backend_unchanged():
    env = dict(os.environ)
    env.pop("MPLBACKEND", None)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    done = subprocess.run([sys.executable, "-c", FRESH], capture_output=True, text=True, env=env,
                          cwd=ROOT, timeout=300)
    assert done.returncode == 0, done.stderr
    found = json.loads(done.stdout.strip().splitlines()[-1])
    assert found == {"import": [], "drawing": [], "pyplot": False}


def _settings() -> dict:
    """Return matplotlib.rcParams as a plain dict, read without resolving the backend (reading
    rcParams["backend"], as comparing RcParams objects does, would choose one)."""
    return {key: dict.__getitem__(matplotlib.rcParams, key) for key in dict.keys(matplotlib.rcParams)}


def _pictures() -> list[str]:
    rng = np.random.default_rng(5)
    residuals = pd.DataFrame({"period": [str(p) for p in pd.period_range("2021-01", periods=24,
                                                                          freq="M")],
                              "fitted": rng.normal(10, 2, 24), "residual": rng.normal(0, 1, 24)})
    return [picture.uri for picture in plots.residual_pictures(residuals)]


def test_drawing_in_this_process_leaves_rcparams_unchanged_and_ignores_the_callers_style():
    before = _settings()
    drawn = _pictures()
    assert _settings() == before
    # The report's own style is set while drawing, over whatever the caller has set.
    with matplotlib.rc_context({"font.size": 20, "axes.grid": False, "grid.color": "red",
                                "figure.dpi": 50, "savefig.dpi": 50}):
        assert _pictures() == drawn
    assert _settings() == before


def test_the_history_plot_leaves_rcparams_unchanged(tmp_path):
    table = pd.DataFrame({"spec_name": "s", "model": ["ols", "ols", "mean_baseline", "mean_baseline"],
                          "run_id": ["a", "b"] * 2, "last_period": ["2023-12", "2024-01"] * 2,
                          "created": ["2024-01-01T00:00:00Z", "2024-02-01T00:00:00Z"] * 2,
                          "mae": [1.0, 0.9, 2.0, 2.1]})
    before = _settings()
    plot_history(table, "mae", tmp_path / "mae.png", "MAE per run")
    assert (tmp_path / "mae.png").stat().st_size > 0
    assert _settings() == before


# ---------------------------------------------------------------- the backtest picture
# Invented data: two series over ten years, 61 rolling origins predicting 1 to 12 months
# ahead; the references are pandas sums and numpy means of the same table.

def _rolling_backtest(origins: int = 61, horizon: int = 12, seed: int = 3):
    rng = np.random.default_rng(seed)
    months = pd.period_range("2015-01", periods=120, freq="M")
    history = pd.DataFrame([{"period": str(m), "series": s, "actual": 100 + 10 * k + rng.normal(0, 5)}
                            for m in months for k, s in enumerate(["a", "b"])])
    actual = history.set_index(["period", "series"])["actual"]
    rows = []
    first = len(months) - origins - horizon + 1
    for origin in months[first - 1:first - 1 + origins]:
        for h in range(1, horizon + 1):
            period = str(origin + h)
            for series in ("a", "b"):
                truth = actual[(period, series)]
                for model, noise in (("mean_baseline", 8.0), ("ols", 2.0), ("calendar_month_mean", 4.0)):
                    rows.append({"origin": str(origin), "period": period, "horizon": h, "series": series,
                                 "model": model, "actual": truth,
                                 "prediction": truth + rng.normal(0, noise) + 0.3 * h})
    return history, pd.DataFrame(rows)


def _labels(axis) -> list[str]:
    return [t.get_text() for t in axis.get_xticklabels() if t.get_text() and t.get_visible()]


def test_the_backtest_picture_draws_one_month_ahead_apart_from_the_furthest_with_few_labels(monkeypatch):
    history, predictions = _rolling_backtest()
    figures = kept_figures(monkeypatch)
    picture = plots.backtest_picture(history, predictions)
    (figure,) = figures
    axes = figure.get_axes()
    assert [a.get_title() for a in axes] == ["predicted 1 month ahead", "predicted 12 months ahead"]
    assert axes[0].get_shared_y_axes().joined(axes[0], axes[1])
    for axis, months in zip(axes, (1, 12)):
        # Reference: the predictions made this many months ahead, summed over series with pandas.
        own = predictions[(predictions["horizon"] == months) & (predictions["model"] == "ols")]
        expected = own.groupby("period")["prediction"].sum().sort_index().to_numpy()
        (line,) = [ln for ln in axis.get_lines() if ln.get_label() == model_label("ols")]   # the legend's word
        np.testing.assert_allclose(line.get_ydata(), expected, rtol=1e-12)
    # At most 12 date labels over both panels (61 origins would be 61 labels).
    assert sum(len(_labels(a)) for a in axes) <= 12
    # The legend is the figure's, below the panels, clear of both plotting areas.
    assert all(a.get_legend() is None for a in axes) and len(figure.legends) == 1
    renderer = figure.canvas.get_renderer()
    box = figure.legends[0].get_window_extent(renderer)
    assert all(box.y1 <= a.get_window_extent(renderer).y0 for a in axes)
    # The finding: the smallest one-month-ahead MAE, numpy's mean of absolute errors.
    first = predictions[predictions["horizon"] == 1]
    mae = {m: float(np.mean(np.abs(g["prediction"] - g["actual"]))) for m, g in first.groupby("model")}
    best = min(mae, key=mae.get)
    assert best == "ols"
    assert f"1 month ahead, {model_label('ols')} erred least of the models drawn: MAE {format_number(mae['ols'])}" in picture.alt
    assert "61 months" in picture.alt and "origins are marked" not in picture.alt


def test_the_error_picture_by_origin_labels_at_most_12_of_61_origins(monkeypatch):
    _, predictions = _rolling_backtest()
    table = (predictions.assign(error=(predictions["prediction"] - predictions["actual"]).abs())
             .groupby(["model", "origin"], sort=False)["error"].mean().rename("mae").reset_index())
    assert table["origin"].nunique() == 61
    figures = kept_figures(monkeypatch)
    plots.error_picture(table, "origin", "origin")
    (axis,) = figures[0].get_axes()
    labels = _labels(axis)
    assert 6 <= len(labels) <= 12
    assert labels[0] == table["origin"].iloc[0]


# ---------------------------------------------------------------- SVG or PNG
def _decoded(uri: str) -> tuple[str, bytes]:
    """Return a data URI's kind and bytes, read back with the standard library alone."""
    head, data = uri.split(",", 1)
    if head == "data:image/svg+xml":   # percent-encoded UTF-8
        return "svg", urllib.parse.unquote_to_bytes(data)
    assert head == "data:image/png;base64", head
    return "png", base64.b64decode(data, validate=True)


def test_a_line_chart_is_inlined_as_well_formed_svg_of_fewer_bytes_than_its_png(monkeypatch):
    history, predictions = _rolling_backtest(origins=13)
    figures = kept_figures(monkeypatch)
    picture = plots.backtest_picture(history, predictions)
    kind, data = _decoded(picture.uri)
    assert kind == "svg"
    root = ElementTree.fromstring(data)   # reference: the standard library's XML parser
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    assert b"<dc:date>" not in data   # no timestamp in the file
    # The choice: the same figure as PNG is larger.
    with matplotlib.rc_context(plots.STYLE):
        assert len(data) < len(plots.picture_bytes(figures[0], "png"))
    # The same picture drawn again is the same bytes (svg.hashsalt fixes the SVG's ids).
    assert plots.backtest_picture(history, predictions).uri == picture.uri


def test_a_scatter_of_thousands_of_points_stays_png_when_that_is_smaller(monkeypatch):
    rng = np.random.default_rng(8)
    residuals = pd.DataFrame({"period": np.repeat([str(p) for p in pd.period_range("2015-01", periods=60,
                                                                                 freq="M")], 100),
                              "fitted": rng.normal(100, 20, 6000), "residual": rng.normal(0, 5, 6000)})
    figures = kept_figures(monkeypatch)
    pictures = plots.residual_pictures(residuals)
    for picture, figure in zip(pictures, figures):
        kind, data = _decoded(picture.uri)
        with matplotlib.rc_context(plots.STYLE):   # saved again as the picture was: in the report's style
            sizes = {"png": len(plots.picture_bytes(figure, "png")),
                     "svg": len(plots.picture_bytes(figure, "svg"))}
        assert len(data) == min(sizes.values()) and kind == min(sizes, key=sizes.get)
    assert _decoded(pictures[1].uri)[0] == "png"   # 6,000 points: each a path in SVG


# ---------------------------------------------------------------- what each picture's text finds
def test_the_residual_pictures_texts_state_what_they_show():
    # Invented residuals whose spread grows with the fitted value; references numpy and pandas.
    rng = np.random.default_rng(12)
    fitted = rng.uniform(10, 100, 240)
    residuals = pd.DataFrame({"period": np.repeat([str(p) for p in pd.period_range("2020-01", periods=24,
                                                                                 freq="M")], 10),
                              "fitted": fitted, "residual": rng.normal(0, 1, 240) * fitted / 10})
    over_time, scatter, normal = (p.alt for p in plots.residual_pictures(residuals))
    by_month = residuals.groupby("period")["residual"].mean()
    worst = by_month.abs().idxmax()
    assert f"The month furthest from zero is {worst} ({format_number(float(by_month[worst]))})." in over_time
    middle = np.median(fitted)
    ratio = (residuals.loc[fitted > middle, "residual"].std(ddof=1)
             / residuals.loc[fitted <= middle, "residual"].std(ddof=1))
    assert ratio > 1.5   # the premise: a funnel
    assert f"standard deviation is {format_number(float(ratio))} times that below it" in scatter
    values = residuals["residual"].to_numpy()
    share = np.mean(np.abs(values - values.mean()) > 1.96 * np.std(values, ddof=1))
    assert f"{share:.1%} of the 240 residuals lie more than 1.96 standard deviations" in normal


def test_the_forecast_pictures_text_compares_each_series_with_the_same_months_a_year_earlier():
    months = [str(p) for p in pd.period_range("2023-01", periods=24, freq="M")]
    history = pd.DataFrame({"period": months * 2, "series": ["a"] * 24 + ["b"] * 24,
                            "actual": np.r_[np.arange(24.0) + 100, np.full(24, 50.0)]})
    forecast = pd.DataFrame({"model": "ols", "series": ["a", "a", "b", "b"],
                             "period": ["2025-01", "2025-02"] * 2, "forecast": [130.0, 132.0, 45.0, 45.0]})
    alt = plots.forecast_picture(history, forecast, "ols", "analytic", None).alt
    # Reference: 2024-01 and 2024-02 are a's 13th and 14th months (112 + 113), b's 50 + 50.
    assert f"a {262 / 225 - 1:+.1%}, b {90 / 100 - 1:+.1%}." in alt


# ---------------------------------------------------------------- date axes
@pytest.mark.parametrize("origins", [18, 19, 20, 21, 22])
def test_a_two_panel_backtest_of_30_to_33_months_a_panel_draws_without_a_warning(origins):
    # Each panel spans the scored months and the year before them: 30 to 34 months, where
    # matplotlib's AutoDateLocator with at most 6 ticks found no interval and warned.
    history, predictions = _rolling_backtest(origins=origins)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        picture = plots.backtest_picture(history, predictions)
    assert picture.uri.startswith("data:image/")


@pytest.mark.parametrize(("least", "most"), [(3, 6), (3, 7), (3, 12), (5, 8)])
def test_a_date_axis_of_any_span_is_labelled_without_a_warning(least, most):
    for span in [1, 2, 12, 24, 29, 30, 31, 33, 34, 40, 41, 48, 55, 56, 60, 120, 240, 600]:
        figure, axis = plots._subplots(figsize=(4, 2))
        axis.plot(pd.period_range("2020-01", periods=span, freq="M").to_timestamp(), np.arange(span))
        plots.date_axis(axis, most=most, least=least)
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            figure.canvas.draw()
        labels = _labels(axis)
        assert 1 <= len(labels) <= most + 2, (span, labels)
