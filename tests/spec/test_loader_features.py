"""The spec's feature keys: each mistake is a SpecError naming file, line and key."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest
from conftest import DEMO_DATA

from pipeline.core.errors import SpecError
from pipeline.spec import load_spec

DATA = DEMO_DATA

BASE = """\
name: features
input:
  file: {data}
  date_column: month
  series: [region]
target: bags_sold
drivers:
{drivers}
validation:
  method: holdout
  last_periods: 12
output:
  folder: out
{top}"""


def write_spec(tmp_path: Path, drivers: str, top: str = "") -> Path:
    text = BASE.format(data=DATA, drivers=textwrap.indent(textwrap.dedent(drivers).strip("\n"), "  "),
                       top=textwrap.dedent(top))
    path = tmp_path / "spec.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def line_of(path: Path, text: str) -> int:
    """Return the 1-based line of the first line of the spec containing text."""
    for number, line in enumerate(path.read_text().splitlines(), start=1):
        if text in line:
            return number
    raise AssertionError(f"{text!r} is not in the spec")


def refused(path: Path) -> SpecError:
    with pytest.raises(SpecError) as caught:
        load_spec(path)
    return caught.value


def test_every_feature_key_is_accepted(tmp_path):
    path = write_spec(tmp_path, """
        numeric:
          - column: shelf_price
            transform: log
            clip_quantiles: [0.01, 0.99]
            missing: median
            standardise: true
            degree: 2
          - rainfall_mm
        categorical:
          - column: region
            encoding: target_mean
            smoothing: 5
            group_below: 3
            unseen: use_reference
        interactions:
          - [shelf_price, region]
        calendar:
          trend: true
          month_of_year: fourier
          harmonics: 3
          working_days: true
          closures: [2024-12-25, 2025-12-25]
        lags:
          - column: bags_sold
            lags: [12]
            rolling_means: [3]
            differences: [1]
            start_lag: 12
          - column: rainfall_mm
            lags: [1]
        """, top="target_transform: log1p\n")
    spec = load_spec(path)
    assert spec.target_transform == "log1p"
    assert spec.drivers.calendar.effective_harmonics == 3
    assert spec.drivers.lags[1].start_lag == 1
    assert spec.filled_driver_columns == {"shelf_price"}


@pytest.mark.parametrize("drivers, top, where, key, words", [
    ("""
     calendar:
       harmonic: 2
     """, "", "harmonic:", "drivers.calendar.harmonic", "did you mean 'harmonics'?"),
    ("""
     categorical:
       - column: region
         encoding: dummy
     """, "", "encoding: dummy", "drivers.categorical[0].encoding", "'one_hot', 'ordinal' or 'target_mean'"),
    ("""
     numeric:
       - column: shelf_price
         missing: zero
     """, "", "missing: zero", "drivers.numeric[0].missing", "'refuse', 'mean' or 'median'"),
    ("""
     numeric:
       - column: shelf_price
         clip_quantiles: [0.99, 0.01]
     """, "", "clip_quantiles", "drivers.numeric[0].clip_quantiles", "0 <= low < high <= 1"),
    ("""
     numeric:
       - column: shelf_price
         clip_quantiles: [0.5]
     """, "", "clip_quantiles", "drivers.numeric[0].clip_quantiles", "give two quantiles"),
    ("""
     numeric: [shelf_price]
     """, "target_transform: sqrt\n", "target_transform", "target_transform", "'none', 'log' or 'log1p'"),
    ("""
     lags:
       - column: bags_sold
         lags: [0]
     """, "", "lags: [0]", "drivers.lags[0].lags[0]", "greater than or equal to 1"),
    ("""
     lags:
       - column: bags_sold
         rolling: [3]
     """, "", "rolling:", "drivers.lags[0].rolling", "did you mean 'rolling_means'?"),
    ("""
     calendar:
       harmonics: 9
       month_of_year: fourier
     """, "", "harmonics: 9", "drivers.calendar.harmonics", "at most 6 sine/cosine pairs"),
])
def test_a_bad_value_or_unknown_key_is_placed_at_its_line(tmp_path, drivers, top, where, key, words):
    path = write_spec(tmp_path, drivers, top)
    error = refused(path)
    assert error.key == key
    assert error.line == line_of(path, where)
    assert words in error.message
    assert str(error).startswith(f"{path}:{error.line}: {key}: ")


@pytest.mark.parametrize("drivers, where, key, words", [
    ("""
     categorical:
       - column: region
         encoding: ordinal
     """, "encoding: ordinal", "drivers.categorical[0].encoding", "needs `order`"),
    ("""
     categorical:
       - column: region
         order: [North, South]
     """, "order:", "drivers.categorical[0].order", "applies to encoding: ordinal"),
    ("""
     categorical:
       - column: region
         encoding: ordinal
         order: [North, South, East, West]
         group_below: 3
     """, "group_below", "drivers.categorical[0].group_below", "break the order"),
    ("""
     categorical:
       - column: region
         smoothing: 3
     """, "smoothing", "drivers.categorical[0].smoothing", "applies to encoding: target_mean"),
    ("""
     numeric: [shelf_price]
     interactions:
       - [shelf_price, rainfall_mm]
     """, "[shelf_price, rainfall_mm]", "drivers.interactions[0][1]", "'rainfall_mm' is not a driver"),
    ("""
     numeric: [shelf_price]
     interactions:
       - [shelf_price]
     """, "- [shelf_price]", "drivers.interactions[0]", "a pair of drivers"),
    ("""
     calendar:
       month_of_year: dummies
       harmonics: 2
     """, "harmonics", "drivers.calendar.harmonics", "applies to season: fourier"),
    ("""
     calendar:
       closures: [2024-12-25]
     """, "closures", "drivers.calendar.closures", "applies to working_days: true"),
    ("""
     calendar:
       month_of_year: dummies
       quarter: true
     """, "quarter", "drivers.calendar.quarter", "use one or the other"),
    ("""
     lags:
       - column: region
         lags: [1]
     """, "column: region", "drivers.lags[0].column", "'region' is a series column; lags are taken of numbers"),
    ("""
     lags:
       - column: bags_sold
         lags: [12]
         future: month_mean
     """, "future: month_mean", "drivers.lags[0].future", "multi_step decides"),
    ("""
     numeric: [shelf_price]
     lags:
       - column: shelf_price
         lags: [1]
         future: mean
     """, "future: mean", "drivers.lags[0].future", "set future on its entry in drivers.numeric"),
    ("""
     lags:
       - column: bags_sold
     """, "column: bags_sold", "drivers.lags[0]", "at least one of lags"),
])
def test_contradictory_feature_keys_are_refused_at_their_key(tmp_path, drivers, where, key, words):
    path = write_spec(tmp_path, drivers)
    error = refused(path)
    assert error.key == key
    assert error.line == line_of(path, where)
    assert words in error.message


def test_missing_allowed_on_a_driver_needs_a_fill(tmp_path):
    drivers = """
        numeric:
          - column: rainfall_mm
            {missing}
        """
    top = "columns:\n  rainfall_mm:\n    type: number\n    missing_allowed: true\n"
    error = refused(write_spec(tmp_path, drivers.format(missing=""), top))
    assert error.key == "columns.rainfall_mm.missing_allowed"
    assert "set missing: mean or median" in error.message
    load_spec(write_spec(tmp_path, drivers.format(missing="missing: mean"), top))


def test_a_spec_with_only_calendar_terms_may_leave_out_the_intercept(tmp_path):
    spec = load_spec(write_spec(tmp_path, "calendar:\n  month_of_year: dummies\n", "intercept: false\n"))
    assert spec.intercept is False
    assert spec.drivers.calendar.month_of_year == "dummies"
    assert spec.drivers.numeric == [] and spec.drivers.categorical == []
