"""The Drivers section: a log target's coefficients as percent changes, and many series' levels
summarised as a distribution.

Data: the invented demo (a 12-month holdout) fitted on log(bags_sold), a plumbing run whose
reference is its own coefficients.csv turned into percent changes with numpy
(100·(exp(b) − 1)); and invented panels of 50 series (numpy.random.default_rng, fixed seed)
whose references are numpy medians, minima and maxima of coefficients.csv.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
import yaml
from browser import read_page
from conftest import DEMO_SPEC

import pipeline
from pipeline.core.catalogue import model_label
from pipeline.core.formatting import format_number
from pipeline.present import plots


@pytest.fixture(scope="module")
def logged(tmp_path_factory):
    folder = tmp_path_factory.mktemp("logged")
    text = DEMO_SPEC.read_text(encoding="utf-8")
    assert "target_transform: none" in text
    spec = DEMO_SPEC.parent / "compost_demo_log.yaml"
    spec.write_text(text.replace("target_transform: none", "target_transform: log"), encoding="utf-8")
    return pipeline.run(spec, output_folder=folder).folder.path


@pytest.fixture(scope="module")
def plain(tmp_path_factory):
    return pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("plain")).folder.path


def test_a_log_targets_drivers_table_shows_each_effect_as_a_percent_change(logged):
    coefficients = pd.read_csv(logged / "coefficients.csv")
    own = coefficients[coefficients["model"] == "ols"].set_index("term")
    table = read_page(logged / "report.html").frame("drivers-terms").set_index("term")
    assert list(table.index) == list(own.index)
    # Reference: numpy's exp of coefficients.csv's estimates and interval ends.
    drivers = own.index != "intercept"
    for column, source in (("% change per unit", "estimate"), ("% from (95%)", "low_95"),
                           ("% to (95%)", "high_95")):
        np.testing.assert_allclose(table.loc[drivers, column].to_numpy(float),
                                   100 * (np.exp(own.loc[drivers, source].to_numpy(float)) - 1), rtol=1e-12)
    assert np.isnan(table.loc["intercept", "% change per unit"])   # a level, not a change
    html = (logged / "report.html").read_text(encoding="utf-8")
    drivers_part = html[html.index('<section id="drivers">'):]
    drivers_part = drivers_part[:drivers_part.index("</section>")]
    assert "% change in bags_sold per unit of the driver" in drivers_part
    assert "effect on the target per unit" not in html
    assert "% change per unit" in (logged / "summary.md").read_text(encoding="utf-8")


def test_a_plain_targets_drivers_keep_their_estimates_without_percent_changes(plain):
    table = read_page(plain / "report.html").frame("drivers-terms")
    assert "% change per unit" not in table.columns and "estimate" in table.columns
    assert "effect on the target per unit of the driver" in (plain / "report.html").read_text(encoding="utf-8")


def test_the_coefficient_picture_draws_the_columns_it_is_given(monkeypatch):
    terms = pd.DataFrame({"term": ["intercept", "price", "promo"], "estimate": [2.0, -0.1, 0.05],
                          "low_95": [1.5, -0.2, 0.01], "high_95": [2.5, 0.02, 0.09]})
    terms["pct"] = 100 * np.expm1(terms["estimate"])   # reference: numpy
    terms["pct_low"], terms["pct_high"] = 100 * np.expm1(terms["low_95"]), 100 * np.expm1(terms["high_95"])
    figures = []
    real = plots.inline_picture
    monkeypatch.setattr(plots, "inline_picture", lambda f, alt, *kind: figures.append(f) or real(f, alt, *kind))
    picture = plots.coefficient_picture(terms, "% change in sales per unit of the driver",
                                        ("pct", "pct_low", "pct_high"))
    (axis,) = figures[0].get_axes()
    dots = axis.get_lines()[0].get_xdata()
    np.testing.assert_allclose(dots, terms["pct"].iloc[1:].to_numpy(), rtol=1e-12)
    assert axis.get_xlabel() == "% change in sales per unit of the driver (95% interval)"
    assert "1 of the intervals include zero" in picture.alt
    assert "Furthest from zero for its interval: promo, 5.127%" in picture.alt


# ---------------------------------------------------------------- many series' own levels
SHOPS = 50


def _panel(folder, *, one_hot: bool, log: bool = False):
    """Run an invented panel of 50 shops, 36 months each (sales = own level + 2·x1 + noise),
    a pooled OLS over all shops; the shop's level a 0/1 column of the shop column (one_hot)
    or the series level castline adds itself."""
    rng = np.random.default_rng(50)
    months = pd.period_range("2021-01", periods=39, freq="M").to_timestamp().strftime("%Y-%m-%d")
    frames = []
    for k in range(SHOPS):
        x1 = rng.normal(0, 1, len(months)).round(4)
        sales = (40 + 3 * k + 2 * x1 + rng.normal(0, 1, len(months))).round(4)
        sales[36:] = np.nan
        frames.append(pd.DataFrame({"month": months, "shop": f"shop{k:02d}", "x1": x1, "sales": sales}))
    folder.mkdir(parents=True, exist_ok=True)
    pd.concat(frames).to_csv(folder / "data.csv", index=False)
    drivers = {"numeric": ["x1"]}
    if one_hot:
        drivers["categorical"] = [{"column": "shop", "encoding": "one_hot", "reference": "shop00"}]
    spec = {"name": "many-levels", "input": {"file": "data.csv", "date_column": "month", "series": ["shop"]},
            "target": "sales", "target_transform": "log" if log else "none", "drivers": drivers,
            "validation": {"method": "holdout", "last_periods": 6}, "models": ["ols"],
            "output": {"folder": "runs"}}

    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return pipeline.run(folder / "spec.yaml", output_folder=folder / "runs").folder.path


@pytest.fixture(scope="module")
def shops(tmp_path_factory):
    return _panel(tmp_path_factory.mktemp("shops"), one_hot=True)


@pytest.fixture(scope="module")
def shops_logged(tmp_path_factory):
    return _panel(tmp_path_factory.mktemp("shops-log"), one_hot=False, log=True)


def test_at_most_12_series_levels_are_listed_and_the_rest_summarised_as_a_distribution(shops):
    coefficients = pd.read_csv(shops / "coefficients.csv")
    own = coefficients[coefficients["model"] == "ols"]
    levels = own[own["term"].str.startswith("shop: ")]
    assert len(levels) == SHOPS - 1   # every shop but the reference
    table = read_page(shops / "report.html").frame("drivers-terms")
    listed = table["term"].str.startswith("shop: ") | table["term"].str.startswith("series: ")
    assert listed.sum() <= 12
    # The other drivers' rows are whole: every term that is not a shop's level, as coefficients.csv has it.
    others = own[~own["term"].str.startswith("shop: ")]
    assert list(table["term"]) == list(others["term"])
    np.testing.assert_allclose(table["estimate"].to_numpy(float), others["estimate"].to_numpy(float), rtol=1e-12)
    # The one-line summary: how many, the median and the range (numpy on coefficients.csv).
    html = (shops / "report.html").read_text(encoding="utf-8")
    line = re.search(r'<p id="series-levels">([^<]*)</p>', html).group(1)
    values = levels["estimate"].to_numpy(float)
    low, high = levels.iloc[int(np.argmin(values))], levels.iloc[int(np.argmax(values))]
    assert line.startswith(f"{SHOPS - 1} series levels")
    assert f"median {format_number(float(np.median(values)))}" in line
    assert (f"from {format_number(float(low['estimate']))} ({low['term'][6:]}) to "
            f"{format_number(float(high['estimate']))} ({high['term'][6:]})") in line
    alts = re.findall(r'<section id="drivers">.*?</section>', html, re.S)[0]
    assert f"Histogram of {model_label('ols')}: 49 series levels" in alts
    assert line in (shops / "summary.md").read_text(encoding="utf-8")


def test_the_coefficient_picture_leaves_the_series_levels_to_their_histogram(shops, monkeypatch):
    from pipeline.present.report import render_report
    figures = []
    real = plots.inline_picture
    monkeypatch.setattr(plots, "inline_picture", lambda f, alt, *kind: figures.append((f, alt)) or real(f, alt, *kind))
    render_report(shops)
    (dots,) = [f for f, alt in figures if alt.startswith("Dot chart")]
    labels = [t.get_text() for t in dots.get_axes()[0].get_yticklabels()]
    assert labels and not any(label.startswith("shop: ") for label in labels)
    (histogram,) = [f for f, alt in figures if alt.startswith(f"Histogram of {model_label('ols')}: ")]
    counts = sum(patch.get_height() for patch in histogram.get_axes()[0].patches)
    assert counts == SHOPS - 1


def test_a_log_targets_series_levels_are_summarised_as_percent_changes(shops_logged):
    coefficients = pd.read_csv(shops_logged / "coefficients.csv")
    own = coefficients[coefficients["model"] == "ols"]
    levels = own[own["term"].str.startswith("series: ")]
    assert len(levels) == SHOPS - 1
    # Reference: numpy's exp of coefficients.csv's estimates.
    percents = 100 * (np.exp(levels["estimate"].to_numpy(float)) - 1)
    html = (shops_logged / "report.html").read_text(encoding="utf-8")
    line = re.search(r'<p id="series-levels">([^<]*)</p>', html).group(1)
    assert f"as the % change in sales: median {format_number(float(np.median(percents)))}%" in line
    spread = read_page(shops_logged / "report.html").frame("drivers-across-series").set_index("term")
    row = spread.loc["series level (each series against the first)"]
    assert row["median % change per unit"] == pytest.approx(np.median(percents), rel=1e-12)
    assert row["% 25%"] == pytest.approx(np.quantile(percents, 0.25), rel=1e-12)


# ---------------------------------------------------------------- a few series named, many summarised
def _by_series(count: int) -> pd.DataFrame:
    """Invented coefficients of a model fitted on each of ``count`` series: an intercept, price
    (negative everywhere) and promo (positive but in the last series)."""
    rows = []
    for k in range(count):
        for term, estimate in (("intercept", 10.0 + k), ("price", -1.0 - 0.1 * k),
                               ("promo", 0.5 + 0.2 * k if k < count - 1 else -0.3)):
            rows.append({"series": f"s{k:02d}", "term": term, "estimate": estimate,
                         "low_95": estimate - 0.2, "high_95": estimate + 0.2})
    return pd.DataFrame(rows)


def test_a_few_series_coefficients_are_each_named_in_a_colour_and_marker_of_their_own(monkeypatch):
    terms = _by_series(4)
    figures = []
    real = plots.inline_picture
    monkeypatch.setattr(plots, "inline_picture", lambda f, alt, *kind: figures.append(f) or real(f, alt, *kind))
    picture = plots.coefficient_picture(terms, model="ols_per_series")
    (axis,) = figures[0].get_axes()
    assert [t.get_text() for t in axis.get_legend().get_texts()] == ["s00", "s01", "s02", "s03"]
    drawn = {}
    for container in axis.containers:   # one errorbar per series: its dots and their marker
        line = container.lines[0]
        drawn[container.get_label()] = (line.get_marker(), line.get_color(), list(line.get_xdata()))
    assert len({(marker, colour) for marker, colour, _ in drawn.values()}) == 4
    for name, (_, _, xs) in drawn.items():   # reference: the table's own rows
        own = terms[(terms["series"] == name) & (terms["term"] != "intercept")]
        np.testing.assert_allclose(xs, own["estimate"].to_numpy(), rtol=1e-12)
    assert "each of its 4 series (s00, s01, s02, s03)" in picture.alt
    # The finding: price shares its sign in every series, promo does not (s03 is negative).
    assert "share a sign for 1 of the 2 terms" in picture.alt
    assert "They differ most on promo: from -0.3 (s03) to 0.9 (s02)." in picture.alt


def test_more_than_twelve_series_coefficients_are_summarised_by_term(monkeypatch):
    picture = plots.coefficient_picture(_by_series(13), model="ols_per_series")
    assert "across series" in picture.alt and "s00" not in picture.alt


def _levels(count: int) -> dict:
    values = np.linspace(-20, 40, count)
    names = np.array([f"shop{k:02d}" for k in range(count)])
    return {"count": count, "values": values, "names": names, "median": float(np.median(values)),
            "label": "effect on the target", "text": f"{count} series levels."}


def test_up_to_twelve_series_levels_are_each_named_and_more_are_a_histogram(monkeypatch):
    figures = []
    real = plots.inline_picture
    monkeypatch.setattr(plots, "inline_picture", lambda f, alt, *kind: figures.append(f) or real(f, alt, *kind))
    named = plots.levels_picture(_levels(12), "ols")
    (axis,) = figures[0].get_axes()
    labels = [t.get_text() for t in axis.get_yticklabels()]
    assert labels == [f"shop{k:02d}" for k in range(12)]   # smallest at the bottom
    np.testing.assert_allclose(axis.get_lines()[0].get_xdata(), np.linspace(-20, 40, 12), rtol=1e-12)
    assert named.alt.startswith(f"Dot chart of the 12 series levels of {model_label('ols')}, each named, largest "
                                "first: shop11 40, shop10 34.55, ")
    many = plots.levels_picture(_levels(13), "ols")
    assert many.alt.startswith(f"Histogram of {model_label('ols')}: ") and "shop00" not in many.alt
