"""Ingest: read the input file as it is, and fingerprint its bytes."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.errors import DataError
from pipeline.spec import CsvOptions, Spec, text_columns


@dataclass(frozen=True)
class RawInput:
    """The input file's rows exactly as read, with the file's identity."""

    frame: pd.DataFrame
    path: Path
    file_format: str
    sha256: str

    def location(self, index: int) -> int:
        """Return the line (CSV; header = line 1), sheet row (Excel; header = row 1) or
        row number (Parquet; first row = 1) of a frame index."""
        return int(index) + (1 if self.file_format == "parquet" else 2)

    @property
    def first_row_number(self) -> int:
        """Return the location of the frame's first row."""
        return 1 if self.file_format == "parquet" else 2


def file_sha256(path: Path) -> str:
    """Return the hex sha256 of a file's bytes."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


_SIGNATURES = [  # the first bytes of formats an analyst may save under the wrong name
    (b"PK\x03\x04", "a zip archive (an Excel .xlsx workbook?)"),
    (b"PAR1", "a Parquet file"),
    (b"\xd0\xcf\x11\xe0", "an old Excel .xls workbook"),
    (b"%PDF", "a PDF document"),
    (b"SQLite format 3", "an SQLite database"),
    (b"\x1f\x8b", "a gzip archive"),
]


def _head(path: Path, size: int = 4096) -> bytes:
    with path.open("rb") as handle:
        return handle.read(size)


def _undecodable_line(path: Path, encoding: str) -> int | str:
    """Return the line of the first byte that the encoding cannot decode."""
    data = path.read_bytes()
    try:
        data.decode(encoding)
    except UnicodeDecodeError as exc:
        return data[: exc.start].count(b"\n") + 1
    except LookupError:
        return "?"
    return "?"


def _looks_like(head: bytes) -> str | None:
    """Return what a file's first bytes say it is, if they name a known binary format."""
    for signature, name in _SIGNATURES:
        if head.startswith(signature):
            return name
    if b"\x00" in head:
        return "a binary file"
    return None


def _read_csv(options: CsvOptions, path: Path, text_columns: tuple[str, ...] = (),
              nrows: int | None = None) -> pd.DataFrame:
    head = _head(path)
    kind = _looks_like(head)
    if kind:
        raise DataError(f"is {kind}, not CSV text; set input.format or convert the file",
                        file=str(path))
    encoding = "utf-8-sig" if options.encoding.lower().replace("_", "-") in ("utf-8", "utf8") \
        else options.encoding
    # input.csv.missing_values, when given, are the only texts besides an empty cell read as
    # missing (a level 'NA' then stays a level); without it, pandas' own list is.
    missing = {} if options.missing_values is None else {
        "keep_default_na": False, "na_values": [*options.missing_values, ""]}
    frame = pd.read_csv(path, sep=options.delimiter, decimal=options.decimal,
                        thousands=options.thousands, encoding=encoding, skip_blank_lines=False,
                        skipinitialspace=True, dtype={c: str for c in text_columns} or None,
                        nrows=nrows, **missing)
    # Blank lines inside the file stay (as empty rows, at their line); those at its end go.
    empty = frame.isna().all(axis=1).to_numpy()
    if empty.any() and empty[-1]:
        last = len(empty) - int(np.argmin(empty[::-1])) if not empty.all() else 0
        frame = frame.iloc[:last]
    return frame


def _read_parquet(path: Path) -> pd.DataFrame:
    head = _head(path, 4)
    if head != b"PAR1":
        kind = _looks_like(_head(path)) or "text or another format"
        raise DataError(f"is not a Parquet file (it looks like {kind})", file=str(path))
    return pd.read_parquet(path)


def _read_excel(sheet: str | int, path: Path, nrows: int | None = None) -> pd.DataFrame:
    if not _head(path, 4) == b"PK\x03\x04":
        raise DataError("is not an Excel .xlsx workbook", file=str(path))
    try:
        return pd.read_excel(path, sheet_name=sheet, engine="openpyxl", nrows=nrows)
    except (ValueError, KeyError) as exc:
        if "not found" in str(exc) or "Worksheet" in str(exc) or isinstance(exc, IndexError):
            raise DataError(f"has no sheet {sheet!r}", file=str(path)) from None
        raise


def _read_any(path: Path, file_format: str, csv: CsvOptions, sheet: str | int,
              text_columns: tuple[str, ...], nrows: int | None,
              max_megabytes: float | None) -> pd.DataFrame:
    """Return a file's rows as its format reads them, after checking its size."""
    size = path.stat().st_size
    if size == 0:
        raise DataError("the file is empty (0 bytes)", file=str(path))
    if max_megabytes is not None and size > max_megabytes * 1e6:
        raise DataError(f"the file is {size / 1e6:.3g} MB, above the limit input.max_megabytes: "
                        f"{max_megabytes:g}; raise the limit or cut the file", file=str(path))
    if file_format == "parquet":
        return _read_parquet(path)
    if file_format == "excel":
        return _read_excel(sheet, path, nrows)
    return _read_csv(csv, path, text_columns, nrows)


def _reading_error(exc: Exception, path: Path, file_format: str, csv: CsvOptions,
                   sheet: str | int) -> DataError | None:
    """Return the one-line DataError a failure to read the file means, or None for a bug."""
    shown = str(path)
    if isinstance(exc, pd.errors.EmptyDataError):
        return DataError("the file holds no header and no rows", file=shown)
    if isinstance(exc, UnicodeDecodeError):
        return DataError(f"is not {csv.encoding} text (line {_undecodable_line(path, csv.encoding)} "
                         "holds a byte that cannot be decoded); set input.csv.encoding", file=shown)
    if isinstance(exc, UnicodeError):   # e.g. UTF-16 without its byte-order mark
        return DataError(f"is not {csv.encoding} text ({' '.join(str(exc).split())}); set "
                         "input.csv.encoding", file=shown)
    if isinstance(exc, pd.errors.ParserError):
        return DataError(f"cannot be read as CSV: {' '.join(str(exc).split())}", file=shown)
    if isinstance(exc, PermissionError):
        return DataError("cannot be read: permission denied", file=shown)
    if isinstance(exc, OSError):
        return DataError(f"cannot be read: {exc.strerror or exc}", file=shown)
    if isinstance(exc, IndexError):
        return DataError(f"has no sheet {sheet!r}", file=shown)
    if file_format in ("parquet", "excel"):   # pyarrow and openpyxl raise many kinds for a damaged file
        return DataError(f"cannot be read as {file_format}: {' '.join(str(exc).split())}", file=shown)
    return None


def read_table(path: Path, file_format: str, csv: CsvOptions | None = None,
               sheet: str | int = 0, text_columns: tuple[str, ...] = (),
               max_rows: int | None = None, max_megabytes: float | None = None) -> pd.DataFrame:
    """Return a data file's rows as read, column names stripped.

    Raises DataError naming the file when it is empty, unreadable, not of the format, or
    beyond the limits: larger than max_megabytes (checked before reading) or holding more
    than max_rows rows (CSV and Excel stop reading one row past the limit).
    """
    csv = csv or CsvOptions()
    # One row past the limit is enough to know the limit is exceeded.
    nrows = max_rows + 1 if max_rows is not None else None
    try:
        frame = _read_any(path, file_format, csv, sheet, text_columns, nrows, max_megabytes)
    except DataError:
        raise
    except Exception as exc:
        error = _reading_error(exc, path, file_format, csv, sheet)
        if error is None:
            raise
        raise error from None
    if frame.empty:
        raise DataError("the file has a header but no rows", file=str(path))
    if max_rows is not None and len(frame) > max_rows:
        raise DataError(f"the file holds more than {max_rows} rows, the limit input.max_rows: "
                        f"{max_rows}; raise the limit or cut the file", file=str(path))
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame.reset_index(drop=True)


def read_as_missing(raw: RawInput, options: CsvOptions, line: int | None, column: str) -> str | None:
    """Return the text of a CSV cell that was read as missing when it is not empty (``NA``,
    ``None``: pandas' own list, without input.csv.missing_values); None otherwise."""
    if raw.file_format != "csv" or options.missing_values is not None or not line or line < 2:
        return None
    import csv as csv_module
    import itertools
    encoding = "utf-8-sig" if options.encoding.lower().replace("_", "-") in ("utf-8", "utf8") \
        else options.encoding
    try:
        with raw.path.open(encoding=encoding, newline="") as handle:
            records = csv_module.reader(handle, delimiter=options.delimiter, skipinitialspace=True)
            header = [name.strip() for name in next(records, [])]
            record = next(itertools.islice(records, line - 2, None), None)
    except (OSError, UnicodeDecodeError, csv_module.Error):
        return None
    if record is None or column not in header or header.index(column) >= len(record):
        return None
    text = record[header.index(column)].strip()
    return text or None


MISSING_HINT = ("; to keep it as a value, list the texts that do mean missing in "
                "input.csv.missing_values (e.g. [\"\"])")


def read_input(spec: Spec) -> RawInput:
    """Return the raw rows of the spec's input file with the file's identity."""
    path = spec.input.file
    file_format = spec.input.resolved_format
    frame = read_table(path, file_format, spec.input.csv, spec.input.sheet,
                       text_columns=tuple(text_columns(spec)), max_rows=spec.input.max_rows,
                       max_megabytes=spec.input.max_megabytes)
    return RawInput(frame=frame, path=path, file_format=file_format, sha256=file_sha256(path))
