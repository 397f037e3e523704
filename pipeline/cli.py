"""The castline command: argument parsing, exit codes and printing, no modelling.

Exit codes: 0 success, 2 a user mistake (one line, no traceback), 1 an
internal error.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from pipeline.core.catalogue import BASELINE, METRIC_NAMES, SKILL, column_label, model_label
from pipeline.core.errors import UserError
from pipeline.core.formatting import dash_note, format_cell, has_missing
from pipeline.core.version import __version__

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
    check.add_argument("--overwrite", action="store_true", help="replace a file already at --problems")
    report = commands.add_parser("report", help="rebuild a run folder's report.html from its files")
    report.add_argument("run_folder", help="a run folder written by castline run")
    forecast = commands.add_parser("forecast", help="forecast new rows with a run's saved model.json, "
                                                          "with the run's empirical 80%% and 95%% intervals")
    forecast.add_argument("model_file", help="model.json from a run folder")
    forecast.add_argument("data_file", help="CSV, Parquet or Excel rows with the drivers filled in: the "
                                            "rows with the target empty are forecast; rows with it filled "
                                            "are actuals the target's lags read (the run's own input will "
                                            "do: its history and its months to forecast)")
    forecast.add_argument("--model", help="only this model (default: every model in the file)")
    forecast.add_argument("--output", metavar="FILE", help="write the forecasts to this CSV file")
    forecast.add_argument("--overwrite", action="store_true", help="replace a file already at --output")
    init = commands.add_parser("init", help="write a starter spec from a data file")
    init.add_argument("data_file", help="a CSV, Parquet or Excel file")
    init.add_argument("--spec-file", help="where to write the spec (default: DATA.spec.yaml here); "
                                          "never overwritten")
    init.add_argument("--delimiter", help="CSV: the delimiter (default: sniffed)")
    init.add_argument("--decimal", default=".", help="CSV: the decimal mark (default '.')")
    init.add_argument("--thousands", help="CSV: the thousands separator (default none)")
    init.add_argument("--encoding", default="utf-8", help="CSV: the text encoding (default utf-8)")
    init.add_argument("--sheet", default="0", help="Excel: the sheet name or position (default 0)")
    history = commands.add_parser("history", help="the runs in the run ledger: metrics over time and "
                                                  "how their forecasts turned out (the last 6 runs "
                                                  "and their recommended models; --all for every "
                                                  "run and model)")
    history.add_argument("spec_or_name", nargs="?", metavar="SPEC_OR_NAME",
                         help="a spec file (its ledger and name), or a spec's name with --ledger; "
                              "without it, every run in --ledger")
    history.add_argument("--ledger", metavar="PATH", help="the ledger file (default: the spec's)")
    history.add_argument("--show", choices=["metrics", "realised", "all"],
                         help="the backtest metrics per run, how the forecasts turned out, or both "
                              "(default: both; metrics for --format csv)")
    history.add_argument("--format", choices=["table", "csv", "json"], default="table",
                         help="how to print (default table)")
    history.add_argument("--model", help="only this model (in the table: instead of each run's "
                                         "recommended one)")
    history.add_argument("--all", action="store_true",
                         help="the table of every run and model, and of the forecasts per months "
                              "ahead (default: the last 6 runs, each run's recommended model, and "
                              "its forecasts over all months ahead; csv and json always hold "
                              "everything)")
    history.add_argument("--plot", metavar="FILE", help="also draw --metric per model by each run's "
                                                        "last month of actuals into this image "
                                                        "(.png, .svg, .pdf); reruns on the same month "
                                                        "sit just right of it, with open markers")
    history.add_argument("--html", metavar="FILE",
                         help="also write one self-contained page of the spec's runs (metrics across "
                              "runs, realised accuracy, forecast revisions, changes between runs, "
                              "warnings) to this .html file; it replaces only a page it wrote before")
    history.add_argument("--metric", default="mae", choices=[*PLOT_METRICS, "skill"],
                         help="the metric to plot (default mae; skill = skill_vs_mean)")
    compare = commands.add_parser("compare", help="what changed between two runs: spec keys, data and "
                                                  "planned drivers, forecasts, coefficients and metrics")
    compare.add_argument("first", metavar="RUN_A", help="a run id (or its start) or a run folder")
    compare.add_argument("second", metavar="RUN_B", help="a run id (or its start) or a run folder")
    compare.add_argument("--ledger", metavar="PATH", help="the ledger file (default: the one "
                                                          "beside the run folders given)")
    compare.add_argument("--format", choices=["table", "json"], default="table")
    compare.add_argument("--top", type=int, default=10, metavar="N",
                         help="how many coefficient moves, forecast revisions and planned-driver "
                              "changes to show (default 10)")
    compare.add_argument("--model", help="the model whose forecasts to compare month by month "
                                         "(default: the later run's recommended model)")
    compare.add_argument("--revisions", metavar="FILE", help="also write every forecast revision "
                                                             "to this CSV file")
    compare.add_argument("--overwrite", action="store_true", help="replace a file already at --revisions")
    for command in commands.choices.values():
        command.add_argument("--verbose", action="store_true", help="also print the warnings of "
                             "the libraries castline uses (pandas, matplotlib, ...), after the output")
    return parser


# The metrics history can plot (review.history.HISTORY_METRICS); the catalogue loads no pandas.
PLOT_METRICS = [*METRIC_NAMES, SKILL]


def _print_table(rows: list[dict], columns: list[str], align_right: tuple[str, ...] | None = None,
                 cadence=None) -> None:
    """Print a table headed in words (the catalogue's labels), models named as the answer names
    them, numbers as the report shows them; periods named by ``cadence`` (months when None)."""
    cells = [[model_label(row[c], cadence) if c in ("model", "recommended") and isinstance(row[c], str)
              else format_cell(row[c], c) for c in columns] for row in rows]
    heads = [column_label(c, cadence) for c in columns]
    widths = [max(len(h), *(len(r[i]) for r in cells)) for i, h in enumerate(heads)]
    right = set(align_right) if align_right is not None else set(columns[1:])
    print("  ".join(h.ljust(w) for h, w in zip(heads, widths)).rstrip())
    for row in cells:
        print("  ".join(v.rjust(w) if c in right else v.ljust(w)
                        for c, v, w in zip(columns, row, widths)).rstrip())
    if has_missing([[row[c] for c in columns] for row in rows]):
        print(dash_note(cadence))


def _command_run(args) -> int:
    from pipeline.core.progress import showing
    from pipeline.runner import run
    with showing(sys.stderr) as bar:   # a bar only when standard error is a terminal
        result = run(args.spec, output_folder=args.output_folder, progress=bar)
    _print_run(result)   # once the run has landed, a failure to print cannot fail it (outcome)
    return EXIT_OK


def _cadence(labels):
    """Return the spacing of periods their labels are written in (months when none reads as one)."""
    from pipeline.core.cadence import cadence_of_labels
    return cadence_of_labels(labels)


def _print_run(result) -> None:
    from pipeline.core.cadence import cadence_named
    table, cadence = result.metrics, cadence_named(result.spec.input.period)
    _print_table(table.to_dict(orient="records"),
                 ["model", "n", "mae", "rmse", "mape", "mase", "bias", "skill_vs_mean", "against_mean"], cadence=cadence)
    print()
    print(result.evaluation.verdict)
    summary = result.evaluation.series_summary
    if len(summary) and int(summary["series"].max()) > 1:
        from pipeline.stages.answer import is_simple_rule
        tested = result.evaluation.tested
        for row in summary.itertuples():
            if is_simple_rule(row.model) and row.model != result.evaluation.recommended:
                continue   # the simple rules' per-series lines are in series.csv
            significant = (f"significantly in {row.beats_significantly} ({row.significant_share:.0%}, "
                           "Holm-adjusted across series)" if tested else "not tested")
            print(f"per series: {model_label(row.model, cadence)} beats the {model_label(BASELINE, cadence)} in "
                  f"{row.beats} of {row.series} series ({row.beats_share:.0%}), {significant}; see series.csv")
    if result.evaluation.interval_warning:
        print(f"warning: {result.evaluation.interval_warning}")
    for warning in result.forecast_result.warnings:
        print(f"warning: {warning}")
    for note in result.notes:
        print(f"note: {note}")
    track = result.track
    for warning in track.warnings if track else []:
        print(f"warning: {warning}")
    print(f"run folder: {result.folder.path}")
    print(f"report:     {result.folder.report}")
    print(f"summary:    {result.folder.summary}")
    if track:
        print(f"ledger:     {track.ledger}")


def _ledger_to_read(args) -> tuple[Path, str | None]:
    """Return the ledger file and the spec name (if any) a history command asks about."""
    from pipeline.record.ledger import ledger_path
    from pipeline.spec import load_spec
    given = args.spec_or_name
    ledger_file = Path(args.ledger) if args.ledger else None
    name = None
    if given:
        as_path = Path(given)
        if as_path.is_file() or as_path.suffix.lower() in (".yaml", ".yml"):
            spec = load_spec(as_path)
            name, ledger_file = spec.name, ledger_file or ledger_path(spec)
        else:
            name = given
    if ledger_file is None:
        raise UserError(f"give --ledger PATH to read the runs of '{given}', or give its spec file"
                        if given else "give a spec file, or --ledger PATH, to say which run "
                                      "ledger to read")
    return ledger_file, name


def _shown(table, columns: list[str]) -> list[dict]:
    rows = table.to_dict(orient="records")
    for row in rows:
        for key, value in row.items():
            if isinstance(value, bool):
                row[key] = "yes" if value else "no"
            elif key in ("created", "forecast_created") and isinstance(value, str):
                row[key] = value[:19].replace("T", " ")
            elif value is None:
                row[key] = float("nan")
    return [{c: row[c] for c in columns} for row in rows]


def _command_history(args) -> int:
    from pipeline.present.history_plot import plot_history
    from pipeline.record import ledger
    from pipeline.record.new_file import page_target, replace_page
    from pipeline.review import history
    path, name = _ledger_to_read(args)
    if args.html:   # the page's modules (and matplotlib) load only when a page is asked for
        from pipeline.present.history_page import MARKER
        page_target(Path(args.html), MARKER, what="history page", option="--html")
    with ledger.reading(path) as conn:
        runs = ledger.visible_runs(conn)
        if not len(runs):
            raise UserError(f"{path}: no runs recorded yet; 'castline run' records every run here")
        if name is not None and name not in set(runs["spec_name"]):
            raise UserError(f"{path}: no runs of '{name}' (recorded: "
                            f"{', '.join(sorted(set(runs['spec_name'])))})")
        page = _history_page(conn, path, name, runs, args.html) if args.html else None
        metrics = history.metrics_history(conn, name)
        realised = history.realised_history(conn, name)
        per_run = history.realised_per_run(conn, name)
    if args.model:
        if args.model not in set(metrics["model"]):
            raise UserError(f"--model: no runs with model '{args.model}' (models: "
                            f"{', '.join(sorted(set(metrics['model'])))})")
        metrics = metrics[metrics["model"] == args.model]
        realised = realised[realised["model"] == args.model]
        per_run = per_run[per_run["model"] == args.model]
    _print_history_tables(args, path, name, metrics, realised, per_run)
    if args.plot:
        metric = "skill_vs_mean" if args.metric == "skill" else args.metric
        title = f"{name or 'every spec'}: {metric.replace('_', ' ')} per run"
        plot_history(metrics, metric, Path(args.plot), title)
        if args.format == "table":
            print(f"plot written to {args.plot} (x: the last {_cadence(metrics['last_period']).name} of actuals each run used)")
    if page is not None:
        replace_page(Path(args.html), page, MARKER, what="history page", option="--html")
        if args.format == "table":
            print(f"history page written to {args.html}")
    return EXIT_OK


def _print_history_tables(args, path: Path, name: str | None, metrics, realised, per_run) -> None:
    from pipeline.record import ledger
    show = args.show or ("metrics" if args.format == "csv" else "all")
    if args.format == "csv":
        if show == "all":
            raise UserError("--format csv writes one table: add --show metrics or --show realised")
        from pipeline.record.safe_csv import write_csv
        write_csv(metrics if show == "metrics" else realised, sys.stdout)
    elif args.format == "json":
        document = {"ledger": str(path), "spec_name": name}
        if show in ("metrics", "all"):
            document["metrics"] = ledger.json_records(metrics)
        if show in ("realised", "all"):
            document["realised"] = ledger.json_records(realised)
        print(json.dumps(document, indent=2, ensure_ascii=False))
    elif args.all:
        _print_history(path, name, metrics, realised, show)
    else:
        _print_recent(path, name, metrics, per_run, show, args.model)


def _history_page(conn, path: Path, name: str | None, runs, html: str) -> str:
    """Return the history page of the one spec the command names (or the ledger holds)."""
    from pipeline.present.history_page import render_history_page
    from pipeline.review.history_book import history_book
    if name is None:
        names = sorted(set(runs["spec_name"]))
        if len(names) > 1:
            raise UserError(f"--html {html}: the page shows one spec's runs and {path} holds "
                            f"{len(names)} ({', '.join(names)}); give the spec file or its name")
        name = names[0]
    return render_history_page(history_book(conn, name, path))


def _print_heading(path: Path, name: str | None, metrics) -> bool:
    """Print the ledger line; return whether the runs of several specs are shown."""
    runs = metrics.drop_duplicates("run_id")
    print(f"ledger: {path}; {len(runs)} run(s)" + (f" of {name}" if name else "")
          + f", {runs['created'].iloc[0][:10]} to {runs['created'].iloc[-1][:10]}")
    return name is None and metrics["spec_name"].nunique() > 1


def _print_recent(path: Path, name: str | None, metrics, per_run, show: str, model: str | None) -> None:
    from pipeline.review.history import RECENT_RUNS, recent_runs
    lead = ["spec_name"] if _print_heading(path, name, metrics) else []
    recent = recent_runs(metrics, RECENT_RUNS, model)
    cadence = _cadence(metrics["last_period"])
    mean, plural = model_label(BASELINE, cadence), cadence.plural
    whose = f"{model_label(model, cadence)}'s" if model else "its recommended model's"
    if show in ("metrics", "all"):
        print()
        print(f"The last {RECENT_RUNS} runs" + (" of each spec" if lead else "") + f", each with "
              f"{whose} backtest metrics (change: from that "
              f"model's run before; skill = 1 − the select_by metric / that of the {mean}):")
        columns = [*lead, "created", "run_id", "last_period", "model", "mae", "mae_change", "rmse",
                   "skill_vs_mean", "skill_vs_mean_change"]
        _print_table(_shown(recent, columns), columns, align_right=tuple(columns[len(lead) + 4:]), cadence=cadence)
    if show in ("realised", "all"):
        print()
        shown = per_run[per_run["forecast_run_id"].isin(set(recent["run_id"]))]
        shown = shown[shown["model"] == model] if model else shown[shown["recommended"].astype(bool)]
        if not len(shown):
            print("How these runs' forecasts turned out: none has an actual in a later run's data yet.")
        else:
            print(f"How these runs' forecasts turned out ({model or 'the recommended model'}, over "
                  f"the {plural} ahead with an actual so far; error = forecast − actual; expected = "
                  f"the backtest MAE at the same {plural} ahead):")
            columns = [*lead, "forecast_run_id", "last_period", "model", "months_ahead", "n",
                       "realised_mae", "expected_mae", "realised_bias", "inside_80", "inside_95",
                       "scored_through"]
            _print_table(_shown(shown, columns), columns, align_right=tuple(columns[len(lead) + 3:-1]),
                         cadence=cadence)
    runs = metrics["run_id"].nunique()
    print()
    print(f"Shown: {recent['run_id'].nunique()} of {runs} run(s), " + (f"{model_label(model, cadence)} only"
          if model else "each run's recommended model") + "; add --all for every run and model, and the "
          f"forecasts per {plural} ahead.")


def _print_history(path: Path, name: str | None, metrics, realised, show: str) -> None:
    lead = ["spec_name"] if _print_heading(path, name, metrics) else []
    cadence = _cadence(metrics["last_period"])
    if show in ("metrics", "all"):
        print()
        print("Backtest metrics per run (change: from the run before; skill = 1 − the run's "
              f"select_by metric / that of the {model_label(BASELINE, cadence)}):")
        _print_table(_shown(metrics, [*lead, "created", "run_id", "last_period", "model", "mae",
                                      "mae_change", "rmse", "rmse_change", "skill_vs_mean",
                                      "skill_vs_mean_change", "recommended"]),
                     [*lead, "created", "run_id", "last_period", "model", "mae", "mae_change", "rmse",
                      "rmse_change", "skill_vs_mean", "skill_vs_mean_change", "recommended"],
                     align_right=("mae", "mae_change", "rmse", "rmse_change", "skill_vs_mean",
                                  "skill_vs_mean_change"), cadence=cadence)
    if show in ("realised", "all"):
        print()
        if not len(realised):
            print("How the forecasts turned out: none of the forecasts has an actual in a later "
                  "run's data yet.")
            return
        print("How the forecasts turned out (error = forecast − actual; expected = the run's "
              f"backtest MAE at the same {cadence.plural} ahead; inside = share of actuals within the "
              "stated interval):")
        columns = [*lead, "forecast_created", "forecast_run_id", "model", "horizon", "n",
                   "realised_mae", "expected_mae", "realised_bias", "inside_80", "inside_95",
                   "scored_through"]
        _print_table(_shown(realised, columns), columns,
                     align_right=("horizon", "n", "realised_mae", "expected_mae", "realised_bias",
                                  "inside_80", "inside_95"), cadence=cadence)


def _command_compare(args) -> int:
    from pipeline.record import ledger
    from pipeline.review.compare import compare_runs
    references, beside = [], None
    for given in (args.first, args.second):
        folder = Path(given)
        if folder.is_dir():
            references.append(folder.resolve().name)
            beside = beside or folder.resolve().parent / ledger.LEDGER_FILE
        else:
            references.append(given)
    path = Path(args.ledger) if args.ledger else beside
    if path is None:
        raise UserError("give --ledger PATH to find runs by id, or give the run folders")
    if args.top < 1:
        raise UserError("--top: give 1 or more")
    from pipeline.runner import output_target, write_table_file
    revisions = output_target("--revisions", args.revisions, inputs={"ledger": path}, overwrite=args.overwrite)
    with ledger.reading(path) as conn:
        comparison = compare_runs(conn, references[0], references[1], path, top=args.top,
                                  model=args.model)
    if args.format == "json":
        print(json.dumps(comparison.as_dict(), indent=2, ensure_ascii=False))
    else:
        _print_comparison(comparison, args.top)
    if revisions:
        write_table_file(comparison.revisions.table.assign(model=comparison.revisions.model), revisions,
                         option="--revisions", what="forecast revisions")
        if args.format == "table":
            print(f"forecast revisions written to {revisions}")
    return EXIT_OK


def _print_planned(planned, top: int, name: str = "month") -> None:
    """Print which planned drivers changed in which periods (``name``: month, quarter, week), or why
    they cannot be named."""
    if not planned.months:
        return
    if not planned.named:
        print(f"  planned drivers: {planned.note}")
        return
    shown = planned.by_month()
    if not len(shown):
        print(f"  planned drivers: no driver's planned value differs (the {name}s' other columns changed)")
        return
    print("  planned drivers whose values changed (series_changed: how many series' plans changed):")
    _print_table(shown.head(top).to_dict(orient="records"), list(shown.columns),
                 align_right=("series_changed",))
    if len(shown) > top:
        print(f"  … and {len(shown) - top} more driver-{name}s (all of them with --format json)")


def _print_revisions(revisions, top: int, cadence=None) -> None:
    """Print the forecasts that moved most between the runs, capped at `top`."""
    from pipeline.review.revisions import largest_revisions
    if revisions.model is None or not len(revisions.table):
        print(f"Forecast revisions: none to show ({revisions.note})")
        return
    table = revisions.table
    stated = (f"the change in widths of the earlier run's stated 80% interval ({revisions.interval_method})"
              if revisions.interval_method else "no width: the earlier run stated no interval")
    print(f"Forecast revisions of {model_label(revisions.model, cadence)}: {len(table)} "
          f"{cadence.name if cadence else 'month'}-series in both runs "
          f"(change = later − earlier; change_in_widths: {stated})")
    shown = largest_revisions(table, top)
    _print_table(shown.to_dict(orient="records"), list(shown.columns), align_right=tuple(shown.columns[2:]))
    if len(table) > top:
        print(f"  … the {top} that moved most of {len(table)}; all of them with --revisions FILE "
              "or --format json")
    if revisions.note:
        print(f"  note: {revisions.note}")


def _print_comparison(comparison, top: int) -> None:
    cadence = _cadence([comparison.later["last_period"], comparison.earlier["last_period"]])
    name = cadence.name
    for word, run in (("earlier", comparison.earlier), ("later", comparison.later)):
        print(f"{word + ':':8} {run['run_id']} ({run['created'][:19].replace('T', ' ')}; "
              f"actuals {run['first_period']} to {run['last_period']}, {run['history_rows']} rows; "
              f"recommended {model_label(run['recommended'], cadence)}; castline {run['castline_version']})")
    if comparison.swapped:
        print("(the runs were given newest first; changes are read from the earlier to the later)")
    print()
    spec = comparison.spec
    if not len(spec):
        print(f"Spec: the same resolved spec (sha256 {comparison.later['spec_hash'][:12]}…)")
    else:
        print(f"Spec: {len(spec)} key(s) differ")
        _print_table(spec.to_dict(orient="records"), ["key", "earlier", "later"], align_right=())
    print()
    data = comparison.data_summary()
    same = "the same input file bytes" if data["same_input"] else (
        f"the input changed (sha256 {comparison.earlier['input_sha256'][:12]}… → "
        f"{comparison.later['input_sha256'][:12]}…)")
    print(f"Data: {same}; rows with actuals {data['rows_with_actuals_earlier']} → "
          f"{data['rows_with_actuals_later']} ({data['rows_with_actuals_added']:+d})")
    if not comparison.months_recorded:
        print(f"  {name}s: not compared (a run was recorded before the ledger kept a fingerprint "
              f"of each {name})")
    elif len(comparison.months):
        _print_table(comparison.months.to_dict(orient="records"),
                     ["period", "change", "earlier_actual_rows", "later_actual_rows"],
                     align_right=("earlier_actual_rows", "later_actual_rows"))
    else:
        print(f"  no {name}'s rows changed")
    _print_planned(comparison.planned, top, name)
    print()
    _print_revisions(comparison.revisions, top, cadence)
    print()
    moves = comparison.coefficients
    if len(moves):
        print(f"Coefficients: the {len(moves)} largest moves (change_in_se: the change in the "
              "earlier run's standard errors)")
        _print_table(moves.to_dict(orient="records"), list(moves.columns),
                     align_right=("earlier", "later", "change", "change_in_se"), cadence=cadence)
    else:
        print("Coefficients: no coefficient moved")
    print()
    print(f"Metrics (backtest; skill = 1 − the select_by metric / that of the {model_label(BASELINE, cadence)}):")
    metrics = comparison.metrics
    _print_table(metrics.to_dict(orient="records"), list(metrics.columns), cadence=cadence)


def _write_problems(target: Path, problems) -> None:
    from pipeline.runner import write_table_file
    from pipeline.stages.check import problems_table
    write_table_file(problems_table(problems), target, option="--problems", what="problems file")
    print(f"problems written to {target}")


def _print_problems(problems) -> None:
    rows = [{"row": p.row if p.row else "-", "column": p.column or "-", "check": p.check,
             "value": p.value, "count": p.count} for p in problems]
    _print_table(rows, ["row", "column", "check", "value", "count"], align_right=("row", "count"))


def _command_check(args) -> int:
    from pipeline.runner import check, output_target, spec_inputs
    from pipeline.stages.check import CheckFailed
    spec, inputs = spec_inputs(args.spec)
    problems = output_target("--problems", args.problems, inputs=inputs, overwrite=args.overwrite)
    try:
        data = check(spec)
    except CheckFailed as failure:
        print(f"{failure.file}: {len(failure.problems)} problem(s); rows count the header as line 1")
        _print_problems(failure.problems)
        if problems:
            _write_problems(problems, failure.problems)
        print(f"castline: {len(failure.problems)} problem(s) in {failure.file}; nothing was fitted",
              file=sys.stderr)
        return EXIT_USER
    print(f"{data.raw.path}: {len(data.raw.frame)} rows pass the checks "
          f"({len(data.history)} with actuals from {data.first_period} to {data.last_period}, "
          f"{len(data.future)} to forecast, {len(data.series_names)} series)")
    print("".join(f"note: {note}\n" for note in data.notes), end="")
    if data.problems_allowed:
        print("allowed by the spec:")
        _print_problems(data.problems_allowed)
    if problems:
        _write_problems(problems, data.problems_allowed)
    return EXIT_OK


def _command_forecast(args) -> int:
    from pipeline.record.model_file import load_model
    from pipeline.runner import output_target, write_table_file
    data_path = Path(args.data_file)
    output = output_target("--output", args.output, overwrite=args.overwrite,
                           inputs={"model file": Path(args.model_file), "data file": data_path})
    stored = load_model(args.model_file)
    table = stored.forecast(stored.read(data_path), args.model, file=str(data_path))
    if output:
        write_table_file(table, output, option="--output", what="forecasts")
        print(f"forecasts written to {output}")
    else:
        _print_table(table.to_dict(orient="records"), list(table.columns))
    for note in stored.notes(table):   # the intervals: none in an older file; series or months they lack
        print(f"note: {note}")
    return EXIT_OK


def _command_report(args) -> int:
    from pipeline.present.pages import render_pages
    from pipeline.record.run_folder import write_page
    folder = Path(args.run_folder)
    for name, text in render_pages(folder).items():
        print(f"{name.split('.')[0]}: {write_page(folder, name, text)}")
    return EXIT_OK


def _command_init(args) -> int:
    from pipeline.runner import init
    from pipeline.spec import CsvOptions
    given = args.delimiter or args.decimal != "." or args.thousands or args.encoding != "utf-8"
    try:
        csv = None
        if given:
            from pipeline.stages.survey import sniff_delimiter
            delimiter = args.delimiter or sniff_delimiter(Path(args.data_file))
            csv = CsvOptions(delimiter=delimiter, decimal=args.decimal, thousands=args.thousands,
                             encoding=args.encoding)
    except ValueError as exc:
        raise UserError(f"the CSV options are inconsistent: {exc.errors()[0]['msg']}") from None
    sheet = int(args.sheet) if str(args.sheet).isdigit() else args.sheet
    path, found = init(args.data_file, args.spec_file, csv=csv, sheet=sheet)
    print(f"wrote {path}: date column '{found.date_column}' ({found.frequency}ly, "
          f"{found.cadence.count(found.periods)}), target '{found.target}', "
          f"series key {found.series or 'none'}")
    print(f"period: {found.spacing}")
    for note in found.notes:
        print(f"note: {note}")
    print(f"next: edit {path}, then 'castline check {path}'")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    """Run the castline command line and return its exit code (how it ends: pipeline.outcome)."""
    from pipeline.outcome import outcome
    handlers = {"run": _command_run, "check": _command_check, "init": _command_init,
                "report": _command_report, "forecast": _command_forecast,
                "history": _command_history, "compare": _command_compare}
    return outcome(build_parser().parse_args, handlers, argv)


if __name__ == "__main__":
    sys.exit(main())
