"""Dates as people write them: `input.date_format`, day-first and month-first files,
offsets from UTC, and numbers that are not dates (pipeline/stages/dates.py, the check,
`castline init`).

A corpus of small invented files is written to tmp_path, one series of 15 months
(2019-01 to 2020-03, the day of each date varying from 1 to 28), each in one way of
writing dates. Every file is run through the command line in this process
(``pipeline.cli.main``): it is read right, or refused with problems that name how the
dates were read. The months each file should give come from an independent
construction: Python's ``datetime`` (``strftime`` to write each date; ``fromisoformat``
and ``astimezone(timezone.utc)`` for the offsets; day arithmetic from 1899-12-30 for
spreadsheet serial days and ``datetime.timestamp`` for Unix seconds), never from
pandas' own date reading.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta

import pandas as pd
import pytest
import yaml

import pipeline
from pipeline import cli
from pipeline.core.columns import PERIOD, ROW
from pipeline.core.errors import SpecError
from pipeline.stages.check import CheckFailed

MONTHS = 15


def days() -> list[date]:
    """Return one date per month from 2019-01 on, the day varying from 1 to 28 (some above 12)."""
    return [date(2019 + (k // 12), k % 12 + 1, 1 + (k * 5) % 28) for k in range(MONTHS)]


def monthly_days() -> list[date]:
    """Return one date per month from 2019-01 on, about a month apart: the 5th for the first
    four months (a day that reads as a month too), the 20th after."""
    return [date(2019 + (k // 12), k % 12 + 1, 5 if k < 4 else 20) for k in range(MONTHS)]


def expected_months(values: list[date | datetime]) -> list[str]:
    """Return the months of the dates, as 'YYYY-MM' (from datetime, not pandas)."""
    return [f"{v.year:04d}-{v.month:02d}" for v in values]


def write_data(folder, written: list, name: str = "data.csv") -> object:
    frame = pd.DataFrame({"date": written, "sales": [100 + 3 * k for k in range(len(written))],
                          "price": [2.0 + 0.1 * (k % 4) for k in range(len(written))]})
    path = folder / name
    frame.to_csv(path, index=False)
    return path


def write_spec(folder, data, date_format: str | None = None) -> object:
    spec = {"name": "dates", "input": {"file": str(data), "date_column": "date"},
            "target": "sales", "drivers": {"numeric": ["price"]},
            "validation": {"method": "holdout", "last_periods": 2},
            "output": {"folder": str(folder / "reports")}}
    if date_format is not None:
        spec["input"]["date_format"] = date_format
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def call(argv: list[str], capsys) -> tuple[int, str, str]:
    code = cli.main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def problem_lines(out: str) -> list[str]:
    lines = out.splitlines()
    header = next(i for i, line in enumerate(lines) if line.split()[:3] == ["row", "column", "check"])
    return lines[header + 1:]


def checked_months(spec_path) -> list[str]:
    data = pipeline.check(pipeline.load_spec(spec_path))
    rows = pd.concat([data.history, data.future]).sort_values(ROW)
    rows = rows[rows[ROW].notna()]   # the file's rows, not the months forecast.months adds
    return [str(p) for p in rows[PERIOD]]


def assert_refused_in_one_line(code: int, out: str, err: str, fragments: list[str]) -> list[str]:
    """Assert a user mistake: exit 2, one stderr line, no traceback; every problem printed
    names each fragment. Return the problem lines."""
    assert code == 2, err
    assert "Traceback" not in out + err
    assert err.startswith("castline: ") and err.count("\n") == 1, err
    lines = problem_lines(out)
    assert lines, out
    for line in lines:
        for fragment in fragments:
            assert fragment in line, (fragment, out)
    return lines


# ------------------------------------------------------------------ read right

READ_RIGHT = [
    # (id, strftime format the file is written in, date_format given in the spec)
    ("day_first_with_format", "%d/%m/%Y", "%d/%m/%Y"),
    ("day_first_dots_two_digit_year", "%d.%m.%y", "%d.%m.%y"),
    ("us_month_first_with_format", "%m/%d/%Y", "%m/%d/%Y"),
    ("us_month_first_read_automatically", "%m/%d/%Y", None),
    ("iso_read_automatically", "%Y-%m-%d", None),
    ("iso_with_format", "%Y-%m-%d", "%Y-%m-%d"),
    ("year_month_read_automatically", "%Y-%m", None),
    ("year_month_with_format", "%Y-%m", "%Y-%m"),
    ("month_name_read_automatically", "%b %Y", None),
    ("month_name_with_format", "%b %Y", "%b %Y"),
]


@pytest.mark.parametrize(("written", "date_format"), [case[1:] for case in READ_RIGHT],
                         ids=[case[0] for case in READ_RIGHT])
def test_a_file_is_read_in_the_months_it_was_written_for(tmp_path, capsys, written, date_format):
    dates = days()
    data = write_data(tmp_path, [d.strftime(written) for d in dates])   # Python's strftime
    spec = write_spec(tmp_path, data, date_format)
    code, out, err = call(["check", str(spec)], capsys)
    assert code == 0, out + err
    assert err == ""
    assert f"{MONTHS} rows pass the checks" in out
    assert sorted(checked_months(spec)) == expected_months(dates)


def test_offsets_from_utc_are_converted_to_utc_before_the_month_is_taken(tmp_path, capsys):
    # Each time lies an hour from a month's edge in its own offset: in UTC it falls in the
    # month next to the one its wall clock says, both ways, with the offsets mixed.
    written = []
    for k in range(MONTHS):   # row k falls in month k (from 2019-01) in UTC
        if k % 2:   # 01:00 on the 1st at +02:00 is 23:00 on the last day of the month before
            after = date(2019 + ((k + 1) // 12), (k + 1) % 12 + 1, 1)
            written.append(f"{after:%Y-%m-%d}T01:00:00+02:00")
        else:       # 23:00 on the last day at -05:00 is 04:00 on the 1st of the next month
            last = date(2019 + (k // 12), k % 12 + 1, 1) - timedelta(days=1)
            written.append(f"{last:%Y-%m-%d}T23:00:00-05:00")
    in_utc = [datetime.fromisoformat(w).astimezone(UTC) for w in written]   # Python's own reading
    data = write_data(tmp_path, written)
    spec = write_spec(tmp_path, data)
    code, out, err = call(["check", str(spec)], capsys)
    assert code == 0, out + err
    assert "Traceback" not in err
    assert checked_months(spec) == expected_months(in_utc)
    assert len(set(expected_months(in_utc))) == MONTHS   # the construction is one row a month


def test_offsets_with_a_format_are_converted_to_utc(tmp_path):
    written = [f"{d:%d/%m/%Y} 23:30 +0100" for d in days()]
    in_utc = [datetime.strptime(w, "%d/%m/%Y %H:%M %z").astimezone(UTC) for w in written]
    spec = write_spec(tmp_path, write_data(tmp_path, written), "%d/%m/%Y %H:%M %z")
    assert checked_months(spec) == expected_months(in_utc)


def test_year_and_month_as_one_number_are_read_with_a_format(tmp_path):
    dates = days()
    spec = write_spec(tmp_path, write_data(tmp_path, [int(d.strftime("%Y%m")) for d in dates]), "%Y%m")
    assert checked_months(spec) == expected_months(dates)


# ------------------------------------------------------------------ refused, naming the format

def test_day_first_dates_read_automatically_are_refused_naming_the_key(tmp_path, capsys):
    data = write_data(tmp_path, [d.strftime("%d/%m/%Y") for d in days()])
    code, out, err = call(["check", str(write_spec(tmp_path, data))], capsys)
    lines = assert_refused_in_one_line(code, out, err, ["input.date_format"])
    twice = [line for line in lines if "month given twice" in line]
    assert len(twice) == 1
    assert "read automatically (month first where ambiguous)" in twice[0]
    assert 'set input.date_format: "%d/%m/%Y"' in twice[0]


def test_a_month_given_twice_names_the_format_given(tmp_path):
    dates = days()
    written = [d.strftime("%d/%m/%Y") for d in dates]
    written[3] = dates[2].strftime("%d/%m/%Y")   # line 5 repeats line 4's date
    spec = write_spec(tmp_path, write_data(tmp_path, written), "%d/%m/%Y")
    with pytest.raises(CheckFailed) as caught:
        pipeline.check(pipeline.load_spec(spec))
    [problem] = [p for p in caught.value.problems if p.check == "month given twice"]
    assert problem.row == 5
    assert 'the dates were read with input.date_format "%d/%m/%Y"' in problem.value


def test_a_date_that_does_not_match_the_format_names_row_value_and_format(tmp_path, capsys):
    written = [d.strftime("%d/%m/%Y") for d in days()]
    written[6] = "2019-07-11"          # line 8 (the header is line 1)
    spec = write_spec(tmp_path, write_data(tmp_path, written), "%d/%m/%Y")
    code, out, err = call(["check", str(spec)], capsys)
    [line] = assert_refused_in_one_line(code, out, err, ["'2019-07-11'", 'input.date_format "%d/%m/%Y"'])
    assert line.split()[:2] == ["8", "date"] and "not a date" in line


def test_an_offset_that_cannot_be_converted_is_one_problem_naming_the_row(tmp_path, capsys):
    written = [f"{d:%Y-%m-%d}T12:00:00+02:00" for d in days()]
    written[4] = "2019-13-40T12:00:00+02:00"   # line 6: no such day
    code, out, err = call(["check", str(write_spec(tmp_path, write_data(tmp_path, written)))], capsys)
    [line] = assert_refused_in_one_line(code, out, err, ["'2019-13-40T12:00:00+02:00'", "offset from UTC"])
    assert line.split()[:2] == ["6", "date"]


def test_spreadsheet_serial_days_are_refused_in_one_line(tmp_path, capsys):
    dates = days()
    serials = [(d - date(1899, 12, 30)).days for d in dates]   # the spreadsheet day count
    assert serials[0] == 43466 + (dates[0].day - 1)            # 43466 is 2019-01-01
    code, out, err = call(["check", str(write_spec(tmp_path, write_data(tmp_path, serials)))], capsys)
    [line] = assert_refused_in_one_line(code, out, err, ["spreadsheet serial day numbers",
                                                         f"{serials[0]} is {dates[0]:%Y-%m-%d}"])
    assert line.split()[:2] == ["2", "date"] and line.split()[-1] == str(MONTHS)


def test_unix_seconds_are_refused_in_one_line(tmp_path, capsys):
    dates = days()
    seconds = [int(datetime(d.year, d.month, d.day, tzinfo=UTC).timestamp()) for d in dates]
    code, out, err = call(["check", str(write_spec(tmp_path, write_data(tmp_path, seconds)))], capsys)
    assert_refused_in_one_line(code, out, err, ["Unix time, seconds since 1970-01-01 UTC",
                                                f"{seconds[0]} is {dates[0]:%Y-%m-%d} 00:00 UTC"])


def test_year_and_month_as_one_number_without_a_format_name_the_key(tmp_path, capsys):
    numbers = [int(d.strftime("%Y%m")) for d in days()]
    code, out, err = call(["check", str(write_spec(tmp_path, write_data(tmp_path, numbers)))], capsys)
    assert_refused_in_one_line(code, out, err, ['input.date_format: "%Y%m"'])


# ------------------------------------------------------------------ the key in the spec

@pytest.mark.parametrize(("written", "fragment"), [
    ("'%d/%m'", "has no year"),
    ("'%Y-%d'", "has no month"),
    ("2019", "valid string"),
    ("'%d/%m/%Y %Q'", "not a date format castline can read"),
], ids=["no_year", "no_month", "not_a_string", "unknown_directive"])
def test_a_date_format_the_loader_refuses_is_placed_at_its_line(tmp_path, written, fragment):
    data = write_data(tmp_path, [d.isoformat() for d in days()])
    path = write_spec(tmp_path, data)
    text = path.read_text(encoding="utf-8").replace("  date_column: date\n",
                                                    f"  date_column: date\n  date_format: {written}\n")
    path.write_text(text, encoding="utf-8")
    line = text.splitlines().index(f"  date_format: {written}") + 1
    with pytest.raises(SpecError) as caught:
        pipeline.load_spec(path)
    assert str(caught.value).startswith(f"{path}:{line}: input.date_format: "), str(caught.value)
    assert fragment in str(caught.value)


# ------------------------------------------------------------------ castline init

def init(tmp_path, capsys, written: list) -> tuple[int, str, str, object]:
    data = write_data(tmp_path, written)
    spec = tmp_path / "data.spec.yaml"
    code, out, err = call(["init", str(data), "--spec-file", str(spec)], capsys)
    return code, out, err, spec


@pytest.mark.parametrize(("written", "expected"), [
    ("%d/%m/%Y", "%d/%m/%Y"), ("%d.%m.%y", "%d.%m.%y"), ("%d-%m-%Y", "%d-%m-%Y"), ("%m/%d/%Y", "%m/%d/%Y"),
    ("%m-%d-%y", "%m-%d-%y"),
], ids=["day_first", "day_first_dots_short_year", "day_first_dashes", "us_month_first",
        "us_month_first_dashes_short_year"])
def test_init_writes_the_date_format_it_finds_and_check_reads_the_months(tmp_path, capsys, written, expected):
    dates = monthly_days()
    code, out, err, spec = init(tmp_path, capsys, [d.strftime(written) for d in dates])
    assert code == 0, err
    assert "(monthly, 15 months)" in out      # not a daily file
    assert not any("aggregate" in line for line in out.splitlines())
    order = "day" if expected.startswith("%d") else "month"
    decisive = dates[4].strftime(written)     # the first date whose day is above 12
    assert f"note: the dates are written {order} first (like {decisive})" in out
    assert yaml.safe_load(spec.read_text(encoding="utf-8"))["input"]["date_format"] == expected
    assert "gaps: refuse" in spec.read_text(encoding="utf-8")
    code, out, err = call(["check", str(spec)], capsys)
    assert code == 0, out + err
    assert sorted(checked_months(spec)) == expected_months(dates)


def test_init_on_dates_that_read_either_way_names_the_key(tmp_path, capsys):
    firsts = [date(2019 + k // 12, k % 12 + 1, 1) for k in range(MONTHS)]   # every field <= 12
    code, out, err, spec = init(tmp_path, capsys, [d.strftime("%d/%m/%Y") for d in firsts])
    assert code == 0, err
    assert "date_format" not in yaml.safe_load(spec.read_text(encoding="utf-8"))["input"]
    notes = [line for line in out.splitlines() if "could be read either way" in line]
    assert len(notes) == 1 and 'input.date_format: "%d/%m/%Y"' in notes[0]


def test_init_on_mixed_offsets_reads_the_months_in_utc(tmp_path, capsys):
    dates = monthly_days()
    written = [f"{d:%Y-%m-%d}T12:00:00{'+02:00' if k % 2 else '-05:00'}" for k, d in enumerate(dates)]
    code, out, err, spec = init(tmp_path, capsys, written)
    assert code == 0, err
    assert "(monthly, 15 months)" in out
    code, out, err = call(["check", str(spec)], capsys)
    assert code == 0, out + err
    assert checked_months(spec) == expected_months(dates)   # noon: the same month in UTC


def test_init_on_spreadsheet_serial_days_is_one_line_saying_what_they_look_like(tmp_path, capsys):
    serials = [(d - date(1899, 12, 30)).days for d in days()]
    code, out, err, spec = init(tmp_path, capsys, serials)
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert "no column holds dates" in err and "column 'date' holds spreadsheet serial day numbers" in err
    assert not spec.exists()


def test_time_zone_aware_dates_in_parquet_are_taken_in_utc(tmp_path):
    # Half an hour after midnight on the 1st in Berlin (UTC+1 in winter, +2 in summer) is
    # still the month before in UTC: each row's month is the one before its local month.
    local = [datetime(2019 + (k + 1) // 12, (k + 1) % 12 + 1, 1, 0, 30) for k in range(MONTHS)]
    berlin = pd.Series(pd.DatetimeIndex(local).tz_localize("Europe/Berlin"))
    frame = pd.DataFrame({"date": berlin, "sales": [100.0 + k for k in range(MONTHS)],
                          "price": [2.0 + 0.1 * (k % 4) for k in range(MONTHS)]})
    data = tmp_path / "data.parquet"
    frame.to_parquet(data)
    in_utc = [d.astimezone(UTC) for d in berlin.dt.to_pydatetime()]   # Python's conversion
    assert checked_months(write_spec(tmp_path, data)) == expected_months(in_utc)
    assert expected_months(in_utc)[0] == "2019-01"


def test_init_leaves_years_of_two_widths_to_the_automatic_reading(tmp_path, capsys):
    dates = monthly_days()
    written = [d.strftime("%d/%m/%Y" if k % 2 else "%d/%m/%y") for k, d in enumerate(dates)]
    code, out, err, spec = init(tmp_path, capsys, written)
    assert code == 0, err
    assert "date_format" not in yaml.safe_load(spec.read_text(encoding="utf-8"))["input"]
