"""Properties of the data checks on generated monthly files.

A clean file (1-3 series, 6-30 months of actuals each, up to two months to
forecast, a numeric driver with a min/max rule and a categorical driver with
allowed levels, rows in file order or shuffled, any day within each month)
always passes. One fault put into it — a (series, month) given twice, an
interior month deleted, a value out of its range, a word in a numeric column —
is always caught, at the exact line of the file (header = line 1) and column.
The expected lines are worked out here from where the fault was put; there is
no external reference value in this file.
"""

from __future__ import annotations

import string
import tempfile
from datetime import date
from pathlib import Path

import pandas as pd
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import pipeline
from pipeline.stages.check import CheckFailed, check_data
from pipeline.stages.ingest import read_input

COLUMNS = ["month", "region", "sales", "price", "channel"]
LEVELS = ["shop", "web", "mail"]
PRICE_MIN, PRICE_MAX = 0.0, 100.0
TODAY = date(2030, 1, 1)  # after every generated month
SETTINGS = settings(max_examples=40, deadline=None, database=None,
                    suppress_health_check=[HealthCheck.too_slow])
# Words pandas reads as a missing value or a number, which are not "text" here.
NOT_TEXT = {"nan", "na", "null", "none", "inf", "infinity", "true", "false"}


@st.composite
def clean_rows(draw) -> tuple[list[dict], bool]:
    """Return rows (dicts, in file order) of a clean file, and whether it has series."""
    n_series = draw(st.integers(1, 3))
    last_actual = pd.Period("2012-01", freq="M") + draw(st.integers(0, 96))
    n_future = draw(st.integers(0, 2))
    rows = []
    for s in range(n_series):
        months = draw(st.integers(6, 30))
        first = last_actual - (months - 1)
        for k in range(months + n_future):
            period = first + k
            day = draw(st.integers(1, 28))
            rows.append({
                "_id": len(rows),
                "month": f"{period.year:04d}-{period.month:02d}-{day:02d}",
                "region": f"R{s + 1}",
                "sales": "" if k >= months else f"{draw(st.integers(1, 99999)) / 100:.2f}",
                "price": f"{draw(st.integers(1, 9999)) / 100:.2f}",
                # Each series starts with 'shop' and forecasts with it: a level first seen in
                # a month to forecast is a fault of its own ('level not seen in history').
                "channel": "shop" if k == 0 or k >= months else draw(st.sampled_from(LEVELS)),
                "_series": f"R{s + 1}", "_period": period, "_future": k >= months,
            })
    if draw(st.booleans()):
        order = draw(st.permutations(range(len(rows))))
        rows = [rows[i] for i in order]
    return rows, n_series > 1


def write_case(folder: Path, rows: list[dict], with_series: bool) -> Path:
    lines = [",".join(COLUMNS)] + [",".join(str(r[c]) for c in COLUMNS) for r in rows]
    (folder / "data.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    spec = {
        "name": "generated",
        "input": {"file": "data.csv", "date_column": "month",
                  "series": ["region"] if with_series else []},
        "target": "sales",
        "drivers": {"numeric": ["price"], "categorical": ["channel"]},
        "columns": {"price": {"type": "number", "min": PRICE_MIN, "max": PRICE_MAX},
                    "sales": {"type": "number", "min": 0},
                    "channel": {"type": "category", "allowed": LEVELS}},
        "validation": {"method": "holdout", "last_periods": 1},
        "output": {"folder": "reports"},
    }
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def check_rows(rows: list[dict], with_series: bool):
    with tempfile.TemporaryDirectory() as folder:
        spec = pipeline.load_spec(write_case(Path(folder), rows, with_series))
        return check_data(spec, read_input(spec), today=TODAY)


def line_of(rows: list[dict], row_id: int) -> int:
    """Return the file line (header = line 1) of the row with this id."""
    return next(i for i, r in enumerate(rows) if r["_id"] == row_id) + 2


# ------------------------------------------------------------------ clean files pass

@SETTINGS
@given(clean_rows())
def test_a_clean_file_always_passes(generated):
    rows, with_series = generated
    data = check_rows(rows, with_series)
    assert len(data.history) == sum(not r["_future"] for r in rows)
    assert len(data.future) == sum(r["_future"] for r in rows)
    assert data.problems_allowed == []


# ------------------------------------------------------------------ one fault is caught where it is

FAULTS = ["duplicate", "deleted_month", "out_of_range", "text"]


@st.composite
def one_fault(draw, kind: str):
    """Return (rows, with_series, check fragment, column, line, value) for a clean file with
    one fault; value is a fragment of the problem's value, or the number it must show."""
    rows, with_series = draw(clean_rows())
    rows = [dict(r) for r in rows]

    if kind == "duplicate":
        original = draw(st.sampled_from(rows))
        copy = dict(original, _id=len(rows))
        period = original["_period"]
        copy["month"] = f"{period.year:04d}-{period.month:02d}-{draw(st.integers(1, 28)):02d}"
        rows.insert(draw(st.integers(0, len(rows))), copy)
        first, second = sorted([line_of(rows, original["_id"]), line_of(rows, copy["_id"])])
        value = f"{period} for series '{original['_series'] if with_series else 'all'}' (first on row {first})"
        return rows, with_series, "month given twice", "month", second, value

    if kind == "deleted_month":
        series = draw(st.sampled_from(sorted({r["_series"] for r in rows})))
        own = sorted((r for r in rows if r["_series"] == series), key=lambda r: r["_period"])
        position = draw(st.integers(1, len(own) - 2))  # neither the first month nor the last
        gone, after = own[position], own[position + 1]
        rows = [r for r in rows if r["_id"] != gone["_id"]]
        # After the series' last actual the month is one to forecast, and named as such.
        last_actual = max(r["_period"] for r in own if not r["_future"] and r["_id"] != gone["_id"])
        word = "month to forecast missing" if gone["_period"] > last_actual else "month missing"
        return rows, with_series, word, "month", line_of(rows, after["_id"]), str(gone["_period"])

    if kind == "out_of_range":
        rule = draw(st.sampled_from(["price_above", "price_below", "sales_below"]))
        pool = [r for r in rows if not r["_future"]] if rule == "sales_below" else rows
        victim = draw(st.sampled_from(pool))
        if rule == "price_above":
            column, bad, check = "price", draw(st.integers(10001, 10**8)) / 100, "above the maximum 100"
        else:
            column, bad = ("price", "sales")[rule == "sales_below"], -draw(st.integers(1, 10**6)) / 100
            check = "below the minimum 0"
        victim[column] = f"{bad:.2f}"
        return rows, with_series, check, column, line_of(rows, victim["_id"]), bad

    column = draw(st.sampled_from(["price", "sales"]))
    if column == "sales":
        # Not in the last month of actuals: a word there turns that month into one to forecast
        # and may add 'level not seen in history' (the corpus case text_in_last_actual_month).
        last = max(r["_period"] for r in rows if not r["_future"])
        pool = [r for r in rows if not r["_future"] and r["_period"] != last]
    else:
        pool = rows
    victim = draw(st.sampled_from(pool))
    word = draw(st.text(string.ascii_letters, min_size=1, max_size=8).filter(
        lambda w: w.lower() not in NOT_TEXT))
    victim[column] = word
    return rows, with_series, "not a number", column, line_of(rows, victim["_id"]), repr(word)


@pytest.mark.parametrize("kind", FAULTS)
@SETTINGS
@given(data=st.data())
def test_one_fault_is_caught_at_its_line_and_column(kind, data):
    rows, with_series, check, column, line, value = data.draw(one_fault(kind))
    with pytest.raises(CheckFailed) as caught:
        check_rows(rows, with_series)
    problems = caught.value.problems
    assert len(problems) == 1, problems
    problem = problems[0]
    assert check in problem.check
    assert (problem.column, problem.row) == (column, line)
    if isinstance(value, float):
        assert float(problem.value) == pytest.approx(value, rel=1e-12)
    else:
        assert value in problem.value
    assert problem.count == 1
