"""The kinds of user mistake castline reports, each carrying where it happened.

A user mistake becomes a one-line message and exit code 2 in the CLI; anything
else that escapes is an internal error (exit code 1).
"""

from __future__ import annotations


class UserError(Exception):
    """A mistake the user can fix: the message names the place to look."""

    exit_code = 2

    def one_line(self) -> str:
        """Return the message folded onto a single line."""
        return " ".join(str(self).split())

    def lines(self) -> list[str]:
        """Return one line per problem (a single one unless the error gathers several)."""
        return [self.one_line()]


class SpecError(UserError):
    """The spec file is unreadable, malformed or inconsistent.

    Rendered as ``FILE:LINE: key.path: what is wrong``.
    """

    def __init__(self, message: str, *, file: str | None = None, line: int | None = None,
                 key: str | None = None) -> None:
        self.message = message
        self.file = file
        self.line = line
        self.key = key
        super().__init__(self._render())

    def _render(self) -> str:
        place = ""
        if self.file:
            place = f"{self.file}:{self.line}: " if self.line else f"{self.file}: "
        key = f"{self.key}: " if self.key else ""
        return f"{place}{key}{self.message}"

    @property
    def problems(self) -> tuple[SpecError, ...]:
        """Return every problem this error reports: here, itself."""
        return (self,)

    @staticmethod
    def of(problems: list[SpecError]) -> SpecError:
        """Return the error to raise for one or more problems: the problem, or SpecErrors."""
        if not problems:
            raise ValueError("no problems to report")
        return problems[0] if len(problems) == 1 else SpecErrors(problems)


class SpecErrors(SpecError):
    """Several problems in one spec file, each placed at its line, in the order given.

    It reads as its first problem (``str``, ``message``, ``file``, ``line``,
    ``key``), so a caller that expects one SpecError still sees one;
    ``problems`` holds them all and ``lines()`` renders one line each.
    """

    def __init__(self, problems: list[SpecError]) -> None:
        if not problems:
            raise ValueError("SpecErrors needs at least one problem")
        self._problems = tuple(p for problem in problems for p in problem.problems)
        first = self._problems[0]
        super().__init__(first.message, file=first.file, line=first.line, key=first.key)

    @property
    def problems(self) -> tuple[SpecError, ...]:
        return self._problems

    def lines(self) -> list[str]:
        return [problem.one_line() for problem in self._problems]

    def __reduce__(self):
        return (SpecErrors, (list(self._problems),))


class DataError(UserError):
    """The input data cannot be used as the spec describes it.

    Carries the file, and where known the column and the row (the line in the
    file for CSV, counting the header as line 1).
    """

    def __init__(self, message: str, *, file: str | None = None, column: str | None = None,
                 row: int | None = None) -> None:
        self.message = message
        self.file = file
        self.column = column
        self.row = row
        super().__init__(self._render())

    def _render(self) -> str:
        parts = []
        if self.file:
            parts.append(f"{self.file}:{self.row}" if self.row else self.file)
        elif self.row:
            parts.append(f"row {self.row}")
        if self.column:
            parts.append(f"column '{self.column}'")
        prefix = ": ".join(parts)
        return f"{prefix}: {self.message}" if prefix else self.message


class ModelFileError(UserError):
    """A model file that is not one castline wrote, or is damaged."""
