"""Rules across keys (pipeline/spec/rules.py): each problem at its own key and line.

Every spec is written into tmp_path; an expected line is found in the text
written (the n-th line holding a marker), so it is the line a reader of that file sees.
"""

from __future__ import annotations

import pytest

from pipeline import SpecError, load_spec
from pipeline.spec.rules import column_roles, text_columns

BASE = """\
name: rules
input:
  file: data.csv
  date_column: month
  series: [region]
target: sold
drivers:
  numeric: [price, rain]
  categorical: [shop]
validation:
  method: rolling_origin
  horizon: 3
  min_train_periods: 12
models: [ols]
output:
  folder: out
"""


@pytest.fixture
def problems(tmp_path):
    """Load a spec text; return its problems as (key, line, message)."""
    (tmp_path / "data.csv").write_text("month,region,shop,sold,price,rain\n", encoding="utf-8")

    def _problems(text: str) -> list[tuple[str, int, str]]:
        path = tmp_path / "spec.yaml"
        path.write_text(text, encoding="utf-8")
        with pytest.raises(SpecError) as info:
            load_spec(path)
        return [(p.key, p.line, p.message) for p in info.value.problems]
    return _problems


def line_of(text: str, needle: str) -> int:
    return next(number for number, line in enumerate(text.splitlines(), 1) if needle in line)


def test_the_base_spec_is_sound(tmp_path):
    (tmp_path / "data.csv").write_text("month,region,shop,sold,price,rain\n", encoding="utf-8")
    (tmp_path / "spec.yaml").write_text(BASE, encoding="utf-8")
    spec = load_spec(tmp_path / "spec.yaml")
    assert column_roles(spec) == {"month": "the date column", "sold": "the target", "region": "a series column",
                                  "price": "a numeric driver", "rain": "a numeric driver",
                                  "shop": "a categorical driver"}
    assert text_columns(spec) == ["region", "shop"]


def test_models_that_need_time_order_under_kfold_each_at_their_place(problems):
    text = BASE.replace("  method: rolling_origin\n  horizon: 3\n  min_train_periods: 12\n",
                        "  method: kfold\n").replace("models: [ols]", "models:\n  - ols\n  - drift\n"
                                                     "  - seasonal_naive\nselect_by: mase")
    found = problems(text)
    assert [(key, line) for key, line, _ in found] == [
        ("models[1]", line_of(text, "- drift")), ("models[2]", line_of(text, "- seasonal_naive")),
        ("select_by", line_of(text, "select_by"))]
    assert "'drift' needs months in time order" in found[0][2]
    assert "MASE needs months in time order" in found[2][2]


def test_calendar_keys_that_contradict_each_other(problems):
    text = BASE.replace("  categorical: [shop]\n", "  categorical: [shop]\n  calendar:\n"
                        "    month_of_year: dummies\n    harmonics: 2\n    quarter: true\n")
    found = problems(text)
    assert [(key, line) for key, line, _ in found] == [
        ("drivers.calendar.harmonics", line_of(text, "harmonics")),
        ("drivers.calendar.quarter", line_of(text, "quarter"))]


def test_interactions_lags_and_slopes_are_judged_each_on_their_own(problems):
    text = BASE.replace("  categorical: [shop]\n", "  categorical: [shop]\n"
                        "  interactions:\n    - [price, wind]\n    - [price, price]\n"
                        "  lags:\n    - column: shop\n      lags: [12]\n"
                        "  series_effects:\n    slopes: [rain, shop]\n")
    found = problems(text)
    keys = [key for key, _, _ in found]   # in the file's order
    assert keys == ["drivers.interactions[0][1]", "drivers.interactions[1]", "drivers.lags[0].column",
                    "drivers.series_effects.slopes[1]"]
    assert "'wind' is not a driver" in found[0][2]
    assert "two different drivers" in found[1][2]
    assert "'shop' is a categorical driver; lags are taken of numbers" in found[2][2]
    assert "'shop' is not a numeric driver" in found[3][2]
    assert found[0][1] == line_of(text, "[price, wind]")
    assert found[2][1] == line_of(text, "- column: shop")
    assert found[3][1] == line_of(text, "slopes:")


def test_a_column_given_two_roles_is_placed_at_the_second(problems):
    text = BASE.replace("numeric: [price, rain]", "numeric: [price, sold]")
    found = problems(text)
    assert found == [("drivers.numeric[1].column", line_of(text, "numeric:"),
                      "column 'sold' is already the target")]


def test_column_rules_that_contradict_themselves_or_the_role(problems):
    text = BASE + "columns:\n  price:\n    type: number\n    min: 5\n    max: 1\n" \
                  "  region:\n    type: category\n    missing_allowed: true\n"
    found = problems(text)
    assert [(key, line) for key, line, _ in found] == [
        ("columns.price.min", line_of(text, "min: 5")),
        ("columns.region.missing_allowed", line_of(text, "missing_allowed"))]
    assert found[0][2] == "min 5 is above max 1"
