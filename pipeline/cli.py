"""The castline command: argument parsing, exit codes and printing, no modelling.

Exit codes: 0 success, 2 a user mistake (one line, no traceback), 1 an
internal error.
"""

from __future__ import annotations

import argparse
import math
import sys
import traceback

from . import __version__
from .errors import UserError
from .stages.check import CheckFailed

EXIT_OK, EXIT_INTERNAL, EXIT_USER = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line and exit 2, like every user mistake
        self.exit(EXIT_USER, f"castline: {message} (see 'castline --help')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="castline", description=(
        "Rerun a monthly forecast from one YAML spec and see whether the linear model "
        "beats the plain mean of the target."))
    parser.add_argument("--version", action="version", version=f"castline {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    run = commands.add_parser("run", help="check the data, backtest, forecast and write a run folder")
    run.add_argument("spec", help="the YAML spec file")
    run.add_argument("--output-folder", help="write the run folder here instead of the spec's "
                                             "output.folder")
    check = commands.add_parser("check", help="check the spec and its data; writes nothing")
    check.add_argument("spec", help="the YAML spec file")
    return parser


def _fmt(value) -> str:
    if isinstance(value, float):
        return "n/a" if not math.isfinite(value) else f"{value:,.4g}"
    return str(value)


def _print_table(rows: list[dict], columns: list[str]) -> None:
    cells = [[_fmt(row[c]) for c in columns] for row in rows]
    widths = [max(len(c), *(len(r[i]) for r in cells)) for i, c in enumerate(columns)]
    print("  ".join(c.ljust(w) for c, w in zip(columns, widths)))
    for row in cells:
        print("  ".join(v.rjust(w) if i else v.ljust(w) for i, (v, w) in enumerate(zip(row, widths))))


def _command_run(args) -> int:
    from .runner import run
    result = run(args.spec, output_folder=args.output_folder)
    table = result.metrics
    _print_table(table.to_dict(orient="records"),
                 ["model", "n", "mae", "rmse", "mape", "bias", "skill_vs_mean"])
    print()
    print(result.evaluation.verdict)
    for warning in result.warnings:
        print(f"warning: {warning}")
    print(f"run folder: {result.folder.path}")
    print(f"summary:    {result.folder.summary}")
    return EXIT_OK


def _command_check(args) -> int:
    from .runner import check
    try:
        data = check(args.spec)
    except CheckFailed as failure:
        for problem in failure.problems:
            print(problem.describe(failure.file))
        print(f"castline: {len(failure.problems)} problem(s) found; nothing was fitted",
              file=sys.stderr)
        return EXIT_USER
    print(f"{data.raw.path}: {len(data.raw.frame)} rows pass the checks "
          f"({len(data.history)} with actuals from {data.first_period} to {data.last_period}, "
          f"{len(data.future)} to forecast, {len(data.series_names)} series)")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    """Run the castline command line and return its exit code."""
    args = build_parser().parse_args(argv)
    handlers = {"run": _command_run, "check": _command_check}
    try:
        return handlers[args.command](args)
    except UserError as mistake:
        print(f"castline: {mistake.one_line()}", file=sys.stderr)
        return EXIT_USER
    except KeyboardInterrupt:
        print("castline: interrupted; no run folder was written", file=sys.stderr)
        return 130
    except Exception:  # an internal error: keep the traceback for the bug report
        traceback.print_exc()
        print("castline: internal error (a bug in castline, not in your spec or data)",
              file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
