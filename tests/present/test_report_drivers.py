"""The Drivers section: a log target's coefficients as percent changes, and many series' levels
summarised as a distribution.

Data: the invented demo (a 12-month holdout) fitted on log(bags_sold), a plumbing run whose
reference is its own coefficients.csv turned into percent changes with numpy
(100·(exp(b) − 1)); and invented panels of 50 series (numpy.random.default_rng, fixed seed)
whose references are numpy medians, minima and maxima of coefficients.csv.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from browser import read_page
from conftest import DEMO_SPEC

import pipeline
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
    monkeypatch.setattr(plots, "inline_picture", lambda f, alt: figures.append(f) or real(f, alt))
    picture = plots.coefficient_picture(terms, "% change in sales per unit of the driver",
                                        ("pct", "pct_low", "pct_high"))
    (axis,) = figures[0].get_axes()
    dots = axis.get_lines()[0].get_xdata()
    np.testing.assert_allclose(dots, terms["pct"].iloc[1:].to_numpy(), rtol=1e-12)
    assert axis.get_xlabel() == "% change in sales per unit of the driver (95% interval)"
    assert "1 of the intervals include zero" in picture.alt
    assert "Furthest from zero for its interval: promo, 5.127%" in picture.alt
