"""Write the data files of the bad-input corpus (cases.yaml) from one invented table.

base.csv: 24 months of actuals (2020-01 to 2021-12) and 2 months to forecast of an
invented target y = 10 + 2·x1 − x2 + a small wobble; each other file is base.csv with
one fault put in, or its rows dated a week or a quarter apart. Run from this folder: ../../../.venv/bin/python make_data.py
"""

from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path

HERE = Path(__file__).resolve().parent
HEADER = "month,y,x1,x2"


def rows() -> list[list[str]]:
    out = []
    for i in range(26):
        year, month = 2020 + i // 12, i % 12 + 1
        x1 = 3 + (i * 7) % 11
        x2 = 1 + (i * 5) % 7
        y = 10 + 2 * x1 - x2 + (i % 3) - 1
        out.append([f"{year}-{month:02d}-01", str(y) if i < 24 else "", str(x1), str(x2)])
    return out


def spaced(first: date, step, header: str) -> tuple[list[list[str]], str]:
    """Return the rows of base.csv dated from ``first`` on, one ``step`` apart, and the header
    with the date column renamed (``step``: a timedelta, or a number of months)."""
    table = rows()
    for i, row in enumerate(table):
        if isinstance(step, int):
            months = first.month - 1 + i * step
            row[0] = date(first.year + months // 12, months % 12 + 1, first.day).isoformat()
        else:
            row[0] = (first + i * step).isoformat()
    return table, header


def write(name: str, table: list[list[str]], header: str = HEADER, sep: str = ",") -> None:
    text = "\n".join([header.replace(",", sep)] + [sep.join(r) for r in table]) + "\n"
    (HERE / name).write_text(text, encoding="utf-8")


def changed(column: int, value, at: list[int] | None = None) -> list[list[str]]:
    table = rows()
    for i, row in enumerate(table):
        if at is None or i in at:
            row[column] = value(i, row) if callable(value) else value
    return table


def main() -> None:
    # Faults the data corpus in ../broken_inputs already holds (empty, header only, wrong
    # delimiter, not UTF-8, byte-order mark, duplicate months, infinities, ...) are not
    # repeated here: cases.yaml points at those files.
    write("base.csv", rows())
    write("driver_all_missing.csv", changed(3, ""))
    write("constant_driver.csv", changed(3, "5"))
    write("collinear_drivers.csv", changed(3, lambda i, r: str(2 * int(r[2]))))
    table = rows()
    write("unsorted_periods.csv", table[12:24] + table[:12] + table[24:])
    write("near_float_limit.csv", changed(1, lambda i, r: "1e308" if i % 2 else "-1e308",
                                          at=list(range(24))))
    write("near_float_limit_driver.csv", changed(2, lambda i, r: f"{1.5 + (i % 5) / 10}e308"))
    write("one_row.csv", rows()[:1])
    write("text_in_driver.csv", changed(2, "about 7", at=[4]))
    # The same rows spaced otherwise: weekly (Mondays, 7 days apart) and quarterly (the first
    # day of each quarter), for data whose spacing is not the spec's input.period.
    write("weekly.csv", *spaced(date(2020, 1, 6), timedelta(days=7), "week_start,y,x1,x2"))
    write("quarterly.csv", *spaced(date(2015, 1, 1), 3, "quarter,y,x1,x2"))


if __name__ == "__main__":
    main()
