"""The castline command: argument parsing, exit codes and printing, no modelling.

Exit codes: 0 success, 2 a user mistake (one line, no traceback), 1 an
internal error.
"""

from __future__ import annotations

import argparse
import math
import sys
import traceback
from pathlib import Path

from . import __version__
from .errors import UserError

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
    check = commands.add_parser("check", help="check the spec and its data; writes nothing "
                                                "but the problems file if asked")
    check.add_argument("spec", help="the YAML spec file")
    check.add_argument("--problems", metavar="FILE", help="also write the problems to this CSV file")
    report = commands.add_parser("report", help="rebuild a run folder's report.html from its files")
    report.add_argument("run_folder", help="a run folder written by castline run")
    forecast = commands.add_parser("forecast", help="forecast new rows with a run's saved model.json")
    forecast.add_argument("model_file", help="model.json from a run folder")
    forecast.add_argument("data_file", help="CSV, Parquet or Excel rows with the drivers filled in")
    forecast.add_argument("--model", help="only this model (default: every model in the file)")
    forecast.add_argument("--output", metavar="FILE", help="write the forecasts to this CSV file")
    init = commands.add_parser("init", help="write a starter spec from a data file")
    init.add_argument("data_file", help="a CSV, Parquet or Excel file")
    init.add_argument("--spec-file", help="where to write the spec (default: DATA.spec.yaml here); "
                                          "never overwritten")
    init.add_argument("--delimiter", help="CSV: the delimiter (default: sniffed)")
    init.add_argument("--decimal", default=".", help="CSV: the decimal mark (default '.')")
    init.add_argument("--thousands", help="CSV: the thousands separator (default none)")
    init.add_argument("--encoding", default="utf-8", help="CSV: the text encoding (default utf-8)")
    init.add_argument("--sheet", default="0", help="Excel: the sheet name or position (default 0)")
    return parser


def _fmt(value) -> str:
    if isinstance(value, float):
        return "n/a" if not math.isfinite(value) else f"{value:,.4g}"
    return str(value)


def _print_table(rows: list[dict], columns: list[str], align_right: tuple[str, ...] | None = None) -> None:
    cells = [[_fmt(row[c]) for c in columns] for row in rows]
    widths = [max(len(c), *(len(r[i]) for r in cells)) for i, c in enumerate(columns)]
    right = set(align_right) if align_right is not None else set(columns[1:])
    print("  ".join(c.ljust(w) for c, w in zip(columns, widths)).rstrip())
    for row in cells:
        print("  ".join(v.rjust(w) if c in right else v.ljust(w)
                        for c, v, w in zip(columns, row, widths)).rstrip())


def _command_run(args) -> int:
    from .runner import run
    result = run(args.spec, output_folder=args.output_folder)
    table = result.metrics
    _print_table(table.to_dict(orient="records"),
                 ["model", "n", "mae", "rmse", "mape", "mase", "bias", "skill_vs_mean", "against_mean"])
    print()
    print(result.evaluation.verdict)
    for warning in result.forecast_result.warnings:
        print(f"warning: {warning}")
    for note in result.evaluation.notes:
        print(f"note: {note}")
    print(f"run folder: {result.folder.path}")
    print(f"report:     {result.folder.report}")
    print(f"summary:    {result.folder.summary}")
    return EXIT_OK


def _write_problems(path: str, problems) -> None:
    from .stages.check import problems_table
    target = Path(path)
    try:
        problems_table(problems).to_csv(target, index=False)
    except OSError as exc:
        raise UserError(f"{target}: cannot write the problems file: {exc.strerror}") from None
    print(f"problems written to {target}")


def _print_problems(problems) -> None:
    rows = [{"row": p.row if p.row else "-", "column": p.column or "-", "check": p.check,
             "value": p.value, "count": p.count} for p in problems]
    _print_table(rows, ["row", "column", "check", "value", "count"], align_right=("row", "count"))


def _command_check(args) -> int:
    from .runner import check
    from .stages.check import CheckFailed
    try:
        data = check(args.spec)
    except CheckFailed as failure:
        print(f"{failure.file}: {len(failure.problems)} problem(s); rows count the header as "
              "line 1")
        _print_problems(failure.problems)
        if args.problems:
            _write_problems(args.problems, failure.problems)
        print(f"castline: {len(failure.problems)} problem(s) in {failure.file}; nothing was fitted",
              file=sys.stderr)
        return EXIT_USER
    print(f"{data.raw.path}: {len(data.raw.frame)} rows pass the checks "
          f"({len(data.history)} with actuals from {data.first_period} to {data.last_period}, "
          f"{len(data.future)} to forecast, {len(data.series_names)} series)")
    if data.problems_allowed:
        print("allowed by the spec:")
        _print_problems(data.problems_allowed)
    if args.problems:
        _write_problems(args.problems, data.problems_allowed)
    return EXIT_OK


def _command_forecast(args) -> int:
    from .stages.ingest import read_table
    from .starter import guess_format
    from .stored_model import load_model
    stored = load_model(args.model_file)
    data_path = Path(args.data_file)
    if not data_path.is_file():
        raise UserError(f"{data_path}: no such data file")
    frame = read_table(data_path, guess_format(data_path))
    table = stored.forecast(frame, args.model, file=str(data_path))
    if args.output:
        try:
            table.to_csv(args.output, index=False)
        except OSError as exc:
            raise UserError(f"{args.output}: cannot write the forecasts: {exc.strerror}") from None
        print(f"forecasts written to {args.output}")
    else:
        _print_table(table.to_dict(orient="records"), list(table.columns))
    return EXIT_OK


def _command_report(args) -> int:
    from .report import build_report
    print(f"report: {build_report(args.run_folder)}")
    return EXIT_OK


def _command_init(args) -> int:
    from .spec import CsvOptions
    from .starter import write_starter_spec
    given = args.delimiter or args.decimal != "." or args.thousands or args.encoding != "utf-8"
    try:
        csv = None
        if given:
            from .starter import sniff_delimiter
            delimiter = args.delimiter or sniff_delimiter(Path(args.data_file))
            csv = CsvOptions(delimiter=delimiter, decimal=args.decimal, thousands=args.thousands,
                             encoding=args.encoding)
    except ValueError as exc:
        raise UserError(f"the CSV options are inconsistent: {exc.errors()[0]['msg']}") from None
    sheet = int(args.sheet) if str(args.sheet).isdigit() else args.sheet
    path, found = write_starter_spec(args.data_file, args.spec_file, csv=csv, sheet=sheet)
    print(f"wrote {path}: date column '{found.date_column}' ({found.frequency}ly, "
          f"{found.periods} months), target '{found.target}', "
          f"series key {found.series or 'none'}")
    for note in found.notes:
        print(f"note: {note}")
    print(f"next: edit {path}, then 'castline check {path}'")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    """Run the castline command line and return its exit code."""
    args = build_parser().parse_args(argv)
    handlers = {"run": _command_run, "check": _command_check, "init": _command_init, "report": _command_report,
                "forecast": _command_forecast}
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
