"""Ingest: read the input file as it is, and fingerprint its bytes."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import DataError
from ..spec import Spec


@dataclass(frozen=True)
class RawInput:
    """The input file's rows exactly as read, with the file's identity."""

    frame: pd.DataFrame
    path: Path
    file_format: str
    sha256: str

    def location(self, index: int) -> int:
        """Return the line (CSV, header = line 1) or row number (Parquet) of a frame index."""
        return int(index) + 2 if self.file_format == "csv" else int(index) + 1


def file_sha256(path: Path) -> str:
    """Return the hex sha256 of a file's bytes."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def read_input(spec: Spec) -> RawInput:
    """Return the raw rows of the spec's input file.

    Raises DataError naming the file when it cannot be read as the spec says.
    """
    path = spec.input.file
    file_format = spec.input.resolved_format
    shown = str(path)
    try:
        if file_format == "parquet":
            frame = pd.read_parquet(path)
        else:
            frame = pd.read_csv(path, encoding="utf-8")
    except pd.errors.EmptyDataError:
        raise DataError("the file is empty", file=shown) from None
    except UnicodeDecodeError:
        raise DataError("the file is not UTF-8 text", file=shown) from None
    except pd.errors.ParserError as exc:
        raise DataError(f"cannot be read as CSV: {' '.join(str(exc).split())}", file=shown) from None
    except OSError as exc:
        raise DataError(f"cannot be read: {exc.strerror or exc}", file=shown) from None
    except Exception as exc:  # pyarrow raises many kinds for a file that is not Parquet
        if file_format == "parquet":
            raise DataError(f"cannot be read as Parquet: {' '.join(str(exc).split())}",
                            file=shown) from None
        raise
    if frame.empty:
        raise DataError("the file has a header but no rows", file=shown)
    frame.columns = [str(c).strip() for c in frame.columns]
    return RawInput(frame=frame.reset_index(drop=True), path=path, file_format=file_format,
                    sha256=file_sha256(path))
