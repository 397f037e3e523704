"""Reading the input file (pipeline/stages/ingest.py).

CSV dialects are checked against pandas.read_csv given the same delimiter,
decimal mark and thousands separator; the fingerprint against hashlib.sha256 of
the file's bytes. The limits (input.max_rows, input.max_megabytes) must stop with
one line naming the file. Small files are written into tmp_path here.
"""

from __future__ import annotations

import hashlib

import pandas as pd
import pytest

from pipeline.core.errors import DataError
from pipeline.spec import CsvOptions
from pipeline.stages.ingest import file_sha256, read_table

ROWS = [("2023-01-01", "North", 1234.5, 7), ("2023-02-01", "South", 20.25, 8),
        ("2023-03-01", "North", 1000000.75, 9)]


def write_csv(path, delimiter=",", decimal=".", thousands=None):
    def number(value):
        text = f"{value:,.2f}" if thousands else f"{value}"
        return text.replace(",", "\0").replace(".", decimal).replace("\0", thousands or "")
    lines = [delimiter.join(["month", "region", "sales", "stores"])]
    lines += [delimiter.join([m, r, number(s), str(n)]) for m, r, s, n in ROWS]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize(("delimiter", "decimal", "thousands"), [
    (",", ".", None),
    (";", ",", None),
    (";", ",", "."),
    ("\t", ".", ","),
    ("|", ".", " "),
])
def test_csv_dialects_read_as_pandas_reads_them(tmp_path, delimiter, decimal, thousands):
    path = write_csv(tmp_path / "data.csv", delimiter, decimal, thousands)
    frame = read_table(path, "csv", CsvOptions(delimiter=delimiter, decimal=decimal, thousands=thousands))
    expected = pd.read_csv(path, sep=delimiter, decimal=decimal, thousands=thousands)
    pd.testing.assert_frame_equal(frame, expected)
    # and the numbers are the numbers written
    assert frame["sales"].tolist() == [r[2] for r in ROWS]
    assert frame["stores"].tolist() == [7, 8, 9]


def test_column_names_are_stripped_and_trailing_blank_lines_dropped(tmp_path):
    path = tmp_path / "data.csv"
    path.write_text(" month , sales\n2023-01-01,1\n2023-02-01,2\n\n\n", encoding="utf-8")
    frame = read_table(path, "csv")
    assert list(frame.columns) == ["month", "sales"]
    assert frame["sales"].tolist() == [1, 2]


def test_a_byte_order_mark_is_not_part_of_the_first_column_name(tmp_path):
    path = tmp_path / "data.csv"
    path.write_bytes("\ufeffmonth,sales\n2023-01-01,1\n".encode())
    assert list(read_table(path, "csv").columns) == ["month", "sales"]


def assert_one_line_naming(error: DataError, path, words: str) -> None:
    text = str(error)
    assert "\n" not in text
    assert text.startswith(str(path))
    assert words in text


def test_exactly_max_rows_is_read(tmp_path):
    path = write_csv(tmp_path / "data.csv")
    assert len(read_table(path, "csv", max_rows=3)) == 3


def test_more_rows_than_max_rows_is_refused_in_one_line(tmp_path):
    path = write_csv(tmp_path / "data.csv")
    with pytest.raises(DataError) as info:
        read_table(path, "csv", max_rows=2)
    assert_one_line_naming(info.value, path, "more than 2 rows")
    assert "input.max_rows" in str(info.value)


def test_a_file_above_max_megabytes_is_refused_before_reading(tmp_path):
    path = write_csv(tmp_path / "data.csv")
    size = path.stat().st_size                     # about 130 bytes
    with pytest.raises(DataError) as info:
        read_table(path, "csv", max_megabytes=(size - 1) / 1e6)
    assert_one_line_naming(info.value, path, "input.max_megabytes")
    assert len(read_table(path, "csv", max_megabytes=size / 1e6)) == 3   # exactly at the limit: read


@pytest.mark.parametrize(("content", "words"), [
    (b"", "empty"),
    (b"month,sales\n", "no rows"),
    (b"PK\x03\x04rest of a zip", "zip"),
    (b"month,sales\n2023-01-01,\xff\xfe\n", "not utf-8"),
])
def test_unreadable_files_are_one_line_naming_the_file(tmp_path, content, words):
    path = tmp_path / "data.csv"
    path.write_bytes(content)
    with pytest.raises(DataError) as info:
        read_table(path, "csv")
    assert_one_line_naming(info.value, path, words)


def test_sha256_is_the_files_bytes(tmp_path):
    path = write_csv(tmp_path / "data.csv")
    assert file_sha256(path) == hashlib.sha256(path.read_bytes()).hexdigest()
