"""How numbers and Markdown tables are written for people (pipeline/core/formatting.py).

Each rule is stated in its test; expected strings are worked out by hand in the comments
beside them (rounding half up to four significant digits, or two for a p-value, grouping
digits in threes); the table's layout is the
GitHub-flavoured Markdown pipe table, whose escape for a literal pipe in a cell is ``\\|``.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from pipeline.core.formatting import (
    DASH_NOTE,
    MISSING,
    format_cell,
    format_number,
    format_p,
    format_percent,
    format_share,
    format_text,
    is_missing,
    is_p_column,
    markdown_table,
    p_phrase,
)


@pytest.mark.parametrize("missing", [None, "", float("nan"), np.nan, math.inf, -math.inf, pd.NA, pd.NaT])
def test_a_value_that_does_not_exist_reads_as_a_dash(missing):
    # Rule: a missing value is a dash, never "nan", "None" or "n/a" on the page.
    assert format_number(missing) == MISSING == "—"
    assert format_p(missing) == "—"
    assert is_missing(missing)


@pytest.mark.parametrize(("value", "shown"), [
    (7, "7"),
    (1234, "1,234"),              # one group of three after the thousands
    (1234567, "1,234,567"),       # 1 | 234 | 567
    (-9876543, "-9,876,543"),
    (0, "0"),
    (np.int64(2256), "2,256"),    # a count from a pandas column reads as a Python int does
])
def test_whole_numbers_are_written_in_full_with_thousands_separators(value, shown):
    # Rule: integer counts in full, digits grouped in threes by commas.
    assert format_number(value) == shown


@pytest.mark.parametrize(("value", "shown"), [
    (3.14159265, "3.142"),        # 3.14159… to four significant digits: 3.142
    (0.123456, "0.1235"),         # four significant digits after the leading zero
    (-2.5, "-2.5"),               # no trailing zeros added
    (456.0, "456"),               # nor a trailing ".0"
    (151.54, "151.5"),            # 151.5|4 → 151.5
    (0.001, "0.001"),             # the smallest value not counted as tiny
    (0.0, "0"),
    (99.996, "100"),              # 99.99|6 rounds up to 100.0, written without its zeros
])
def test_fractions_keep_four_significant_digits(value, shown):
    # Rule: metrics to four significant digits, no trailing zeros.
    assert format_number(value) == shown


@pytest.mark.parametrize(("value", "shown"), [
    (1234.5, "1,235"),            # four digits already: the half rounds up, 1235, grouped
    (1234.5678, "1,235"),         # 1234.5678 → 1235 (the fifth digit, 5, rounds up)
    (12345.6, "12,346"),          # five whole digits are all kept: 12345.6 → 12346, not 12350
    (1234567.8, "1,234,568"),     # every whole digit kept, grouped: 1 | 234 | 568
    (-98765.4, "-98,765"),
    (999.96, "1,000"),            # 999.9|6 rounds to 1000.0, which reads as a thousand
])
def test_large_values_keep_every_whole_digit_with_separators_and_no_exponent(value, shown):
    # Rule: from 1,000 up, never drop a whole digit, never write an exponent, separate thousands.
    assert format_number(value) == shown
    assert "e" not in shown


@pytest.mark.parametrize(("value", "shown"), [
    (0.00012345, "0.000123"),     # below 0.001: three significant digits, 1.2345e-4 → 0.000123
    (-0.0005, "-0.0005"),
    (0.0000012345, "0.00000123"),  # down to 0.000001 still in decimals
    (1.5e-9, "1.5 × 10⁻⁹"),       # far below: a power of ten, never "1.5e-09", never rounded to 0
    (-2.25e-12, "-2.25 × 10⁻¹²"),
])
def test_tiny_values_are_not_rounded_to_zero(value, shown):
    # Rule: below 0.001, three significant digits, so a small number never reads as 0; below
    # 0.000001 a power of ten with a superscript exponent, never the "e" of a program.
    assert format_number(value) == shown
    assert "e" not in shown
    plain = shown.replace(" × 10", "e").translate(str.maketrans("⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "-0123456789"))
    assert float(plain) != 0.0 and abs(float(plain) - value) <= 0.005 * abs(value)


@pytest.mark.parametrize(("p", "shown"), [
    (0.03709, "0.037"),           # two significant digits: 0.037|09 → 0.037
    (0.003709, "0.0037"),         # 0.0037|09 → 0.0037
    (0.5, "0.50"),                # the second digit is kept though it is 0
    (1.0, "1.0"),
    (0.05165, "0.052"),           # 0.051|65 rounds up to 0.052
    (0.9996, "1.0"),              # 0.99|96 rounds up to 1.0: two digits, not "1.00"
    (0.001, "0.0010"),            # 0.001 is not below 0.001
    (0.000999, "< 0.001"),
    (5.5e-210, "< 0.001"),        # never an exponent
    (0.0, "< 0.001"),
])
def test_p_values_have_two_significant_digits_and_read_below_0_001_below_it(p, shown):
    # Rule: p-values to two significant digits, "< 0.001" below 0.001 (common practice in
    # journals' reporting guidelines).
    assert format_p(p) == shown


def test_a_p_value_in_words():
    assert p_phrase(0.003709) == "p = 0.0037"
    assert p_phrase(0.0001) == "p < 0.001"
    assert p_phrase(float("nan")) == "p not available"


@pytest.mark.parametrize(("column", "is_p"), [
    ("p_value", True), ("p_holm", True), ("p_best_rule_holm", True), ("p-value", True), ("p", True),
    ("mape", False), ("share p < 0.05", False), ("skill_vs_mean", False),
])
def test_a_table_cell_is_a_p_value_by_its_column_name(column, is_p):
    # Rule: a table column named p, p-value or p_… holds p-values; every other column metrics.
    assert is_p_column(column) is is_p
    assert format_cell(0.5, column) == ("0.50" if is_p else "0.5")


def test_booleans_read_yes_and_no_not_one_and_zero():
    # bool is a subclass of int: it must not be written 1 or 0.
    assert (format_number(True), format_number(False)) == ("yes", "no")


def test_numpy_floats_are_formatted_like_python_floats():
    # np.float64 is what a pandas column hands back; it must read as the same number.
    assert format_number(np.float64(3.14159265)) == format_number(3.14159265) == "3.142"
    assert format_number(np.float64(12345.6)) == "12,346"
    assert format_number(np.float64("nan")) == "—"


def test_text_is_passed_through_and_missing_text_is_a_dash():
    assert format_number("ols") == format_text("ols") == "ols"
    assert format_text(float("nan")) == format_text(None) == format_text("") == "—"


def test_markdown_table_layout_and_cells():
    frame = pd.DataFrame({"model": ["ols", "mean_baseline"], "mae": [3.14159265, float("nan")],
                          "n": [1234, 5], "p_holm": [0.003709, float("nan")]})
    lines = markdown_table(frame).splitlines()
    # Rule: a table with a dash says what it means in one line under it.
    assert lines == [
        "| model | MAE | forecasts scored | p (Holm) |",   # headed in the catalogue's words
        "| --- | --- | --- | --- |",
        "| OLS | 3.142 | 1,234 | 0.0037 |",                 # models named as the answer names them
        "| mean of the training months | — | 5 | — |",
        "",
        DASH_NOTE,
    ]
    assert DASH_NOTE.startswith("— no value")
    # every table line has one more pipe than it has cells
    assert all(line.count("|") == 5 for line in lines[:4])


def test_markdown_table_without_a_missing_value_has_no_footnote():
    frame = pd.DataFrame({"model": ["ols"], "mae": [12345.6]})
    assert markdown_table(frame).splitlines() == ["| model | MAE |", "| --- | --- |", "| OLS | 12,346 |"]


def test_markdown_table_escapes_pipes_and_folds_newlines():
    frame = pd.DataFrame({"a|b": ["x | y", "two\nlines"]})
    lines = markdown_table(frame).splitlines()
    assert lines[0] == "| a\\|b |"
    assert lines[2] == "| x \\| y |"
    assert lines[3] == "| two lines |"
    # a reader splitting on unescaped pipes sees exactly one cell per row
    for line in (lines[0], lines[2], lines[3]):
        unescaped = line.replace("\\|", "")
        assert unescaped.count("|") == 2


@pytest.mark.parametrize(("share", "shown"), [
    (0.12, "12%"),                # 0.12 × 100 = 12
    (0.4375, "44%"),              # 43.75 rounds to 44
    (-0.2, "-20%"),
    (1.0, "100%"),
    (-0.0016, "-0.2%"),           # −0.16 would read "-0%" whole: one decimal, −0.16 → −0.2
    (0.004, "0.4%"),
    (-0.0004, "0%"),              # −0.04 is 0 even to one decimal
    (0.0, "0%"),
])
def test_a_share_is_a_whole_percent_unless_that_reads_as_zero(share, shown):
    assert format_percent(share) == shown


@pytest.mark.parametrize(("share", "shown"), [
    (0.8, "80%"),          # an interval's level: a whole percent, no ".0"
    (0.8016, "80.2%"),     # three significant digits: 80.1|6 → 80.2
    (0.9498, "95%"),       # 94.9|8 → 95.0 → "95%"
    (0.0123, "1.23%"),
    (0.0, "0%"),
    (float("nan"), "—"),
])
def test_shares_read_as_percents_to_three_significant_digits(share, shown):
    # Rule: a share (an interval's level, the share of actuals it held) reads as a percent to
    # three significant digits, trailing zeros dropped; a share that does not exist is a dash.
    assert format_share(share) == shown


def test_level_and_coverage_columns_hold_shares_and_other_columns_do_not():
    assert format_cell(0.8016, "coverage") == "80.2%" and format_cell(0.95, "level") == "95%"
    assert format_cell(0.8016, "mae") == "0.8016"
