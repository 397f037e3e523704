"""A problem the check finds in the data: one kind of fault in one column, at its first row."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

PROBLEM_COLUMNS = ["check", "column", "row", "value", "count"]


@dataclass(frozen=True)
class Problem:
    """One kind of fault in one column, located at its first row, with how often it occurs."""

    check: str
    column: str
    row: int | None
    value: str
    count: int = 1

    def describe(self, file: str) -> str:
        """Return the problem as one line, naming file, row and column."""
        place = f"{file}:{self.row}" if self.row else file
        more = f" ({self.count} rows like this)" if self.count > 1 else ""
        column = f"column '{self.column}': " if self.column else ""
        return f"{place}: {column}{self.check}: {self.value}{more}"


def problems_table(problems: list[Problem]) -> pd.DataFrame:
    """Return the problems as a table: check, column, row, value, count."""
    return pd.DataFrame([[p.check, p.column, p.row, p.value, p.count] for p in problems],
                        columns=PROBLEM_COLUMNS).astype({"row": "Int64"})
