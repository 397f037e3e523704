"""`castline history` after eight runs: the compact view, --all, and the picture by last month.

Plumbing on conftest's tiny invented spec (never a reference value). Eight runs into one
ledger, their actuals ending 2021-06, -07, -08, -08 (a rerun), -09, -10, -11, -11 (a rerun).
What the commands print and draw is checked against the ledger's rows read here with sqlite3,
not through castline's own reading.
"""

from __future__ import annotations

import io
import sqlite3
from contextlib import closing

import numpy as np
import pandas as pd
import pytest
from conftest import tiny_data, write_tiny_spec

import pipeline
from pipeline import cli
from pipeline.core.catalogue import MODEL_KINDS, PER_SERIES, PER_SERIES_KINDS, model_label
from pipeline.core.formatting import DASH_NOTE, MISSING
from pipeline.present.history_plot import RERUN_SPREAD, history_figure
from pipeline.record import ledger
from pipeline.review import history

CUTS = ["2021-06", "2021-07", "2021-08", "2021-08", "2021-09", "2021-10", "2021-11", "2021-11"]
SHOWN = 6   # the runs plain `history` shows (review.history.RECENT_RUNS)


@pytest.fixture(scope="module")
def eight_runs(tmp_path_factory):
    base = tmp_path_factory.mktemp("eight_runs")
    data = tiny_data()
    for cut in CUTS:
        spec = write_tiny_spec(base, data, actuals_to=cut)
        pipeline.run(spec)
    return spec, base / "runs" / "ledger.sqlite"


def ledger_rows(path, sql: str) -> pd.DataFrame:
    with closing(sqlite3.connect(path)) as conn:
        return pd.read_sql_query(sql, conn)


def runs_in_ledger(path) -> pd.DataFrame:
    return ledger_rows(path, "SELECT run_id, last_period, recommended FROM runs ORDER BY created, run_id")


def printed(capsys, *args: str) -> dict[str, list[str]]:
    """Run `castline history ARGS` and return its printed sections (split at blank lines), by
    their first word, each as its lines after the title and the column header (and before the
    line that says what a dash means, which a table with one has under it and no other has)."""
    capsys.readouterr()
    assert cli.main(["history", *args]) == 0
    sections = {}
    for block in capsys.readouterr().out.strip().split("\n\n"):
        lines = block.splitlines()
        rows = lines[2:]
        noted = bool(rows) and rows[-1] == DASH_NOTE
        rows = rows[:-1] if noted else rows
        assert noted == any(MISSING in row.split() for row in rows), block
        sections[lines[0].split()[0]] = rows
    return sections


def cells(lines: list[str], run_ids) -> list[tuple[str, str]]:
    """Return (run id, model) of each table row: the run id it names, and the model whose
    catalogue label (the console names models as the answer does) follows it, after any month."""
    names = [*(kind.name for kind in MODEL_KINDS), *(name + PER_SERIES for name in PER_SERIES_KINDS)]
    by_label = sorted(((model_label(name), name) for name in names), key=lambda pair: -len(pair[0]))
    rows = []
    for line in lines:
        words = line.split()
        at = next(i for i, w in enumerate(words) if w in set(run_ids))
        rest = [w for w in words[at + 1:] if not (len(w) == 7 and w[4] == "-")]
        text = " ".join(rest) + " "
        model = next(name for label, name in by_label if text.startswith(label + " "))
        rows.append((words[at], model))
    return rows


def test_the_ledger_holds_the_eight_runs(eight_runs):
    runs = runs_in_ledger(eight_runs[1])
    assert list(runs["last_period"]) == CUTS
    assert SHOWN == history.RECENT_RUNS


def test_plain_history_lists_the_last_six_runs_with_their_recommended_model(eight_runs, capsys):
    spec, path = eight_runs
    runs = runs_in_ledger(path)
    sections = printed(capsys, str(spec))
    shown = cells(sections["The"], runs["run_id"])
    assert shown == list(zip(runs["run_id"].iloc[-SHOWN:], runs["recommended"].iloc[-SHOWN:]))
    # The forecasts turned out: one row per shown run whose recommended model has a realised score.
    scored = ledger_rows(path, "SELECT DISTINCT r.forecast_run_id, u.recommended FROM realised r JOIN runs u "
                               "ON r.forecast_run_id = u.run_id AND r.model = u.recommended")
    expected = [(r, m) for r, m in zip(runs["run_id"].iloc[-SHOWN:], runs["recommended"].iloc[-SHOWN:])
                if r in set(scored["forecast_run_id"])]
    assert expected and cells(sections["How"], runs["run_id"]) == expected


def test_plain_history_ends_with_one_line_saying_how_to_see_more(eight_runs, capsys):
    spec, _ = eight_runs
    capsys.readouterr()
    assert cli.main(["history", str(spec)]) == 0
    last = capsys.readouterr().out.strip().splitlines()[-1]
    assert last.startswith(f"Shown: {SHOWN} of {len(CUTS)} run(s)") and "--all" in last


def test_all_lists_every_runs_rows(eight_runs, capsys):
    spec, path = eight_runs
    runs = runs_in_ledger(path)
    sections = printed(capsys, str(spec), "--all")
    metrics = ledger_rows(path, "SELECT run_id, model FROM model_metrics")
    shown = cells(sections["Backtest"], runs["run_id"])
    assert sorted(shown) == sorted(zip(metrics["run_id"], metrics["model"]))
    assert set(run for run, _ in shown) == set(runs["run_id"])
    # per earlier run, model and months ahead, each once however often it was rescored
    realised = ledger_rows(path, "SELECT DISTINCT forecast_run_id, model, horizon FROM realised")
    assert len(sections["How"]) == len(realised)
    assert sorted(set(cells(sections["How"], runs["run_id"]))) == \
        sorted(set(zip(realised["forecast_run_id"], realised["model"])))


def test_model_shows_that_model_in_the_compact_view(eight_runs, capsys):
    spec, path = eight_runs
    runs = runs_in_ledger(path)
    sections = printed(capsys, str(spec), "--model", "mean_baseline", "--show", "metrics")
    assert cells(sections["The"], runs["run_id"]) == [(r, "mean_baseline") for r in runs["run_id"].iloc[-SHOWN:]]


def test_csv_and_json_still_hold_every_run(eight_runs, capsys):
    spec, path = eight_runs
    capsys.readouterr()
    assert cli.main(["history", str(spec), "--format", "csv"]) == 0
    table = pd.read_csv(io.StringIO(capsys.readouterr().out))
    assert len(table) == len(ledger_rows(path, "SELECT * FROM model_metrics"))


def test_the_plot_puts_each_run_at_the_last_month_of_its_data(eight_runs):
    _, path = eight_runs
    runs = runs_in_ledger(path)
    months = [pd.Period(p, "M").ordinal for p in runs["last_period"]]     # read with sqlite3
    with ledger.reading(path) as conn:
        table = history.metrics_history(conn, "tiny")
    figure, alt = history_figure(table, "mae", "tiny")
    lines = [line for line in figure.axes[0].lines if not line.get_label().startswith("_")]
    assert {line.get_label() for line in lines} == {model_label(m) for m in table["model"]}   # the catalogue's words
    first_on_month = ~runs["last_period"].duplicated().to_numpy()
    for line in lines:
        x = np.asarray(line.get_xdata(), float)
        assert len(x) == len(runs) and len(set(x)) == len(runs)        # reruns stay apart
        assert list(np.floor(x)) == sorted(months)                      # at their last months
        assert sorted(x[np.isin(x, months)]) == sorted(np.asarray(months)[first_on_month])
        assert np.all(x - np.floor(x) <= RERUN_SPREAD)
    reruns = [line for line in figure.axes[0].lines if line.get_label() == "_rerun"]
    assert len(reruns) == len(lines)
    for line in reruns:                                                 # open markers, one a rerun
        assert len(line.get_xdata()) == int((~first_on_month).sum())
        assert line.get_markerfacecolor() == "white"
    assert "2 run(s) were reruns" in alt and "last month of actuals" in alt
    assert "reruns" in figure.axes[0].get_xlabel()
    figure.canvas.draw()
    low, high = figure.axes[0].get_xlim()
    labels = [t.get_text() for t in figure.axes[0].get_xticklabels() if low <= t.get_position()[0] <= high]
    assert labels == sorted(set(runs["last_period"]))     # one tick a month, named as the ledger does


def test_the_plot_file_carries_its_text_alternative(eight_runs, tmp_path, capsys):
    spec, _ = eight_runs
    picture = tmp_path / "mae.svg"
    capsys.readouterr()
    assert cli.main(["history", str(spec), "--plot", str(picture), "--show", "metrics"]) == 0
    assert "last month of actuals" in capsys.readouterr().out
    assert "2 run(s) were reruns on a month already run" in picture.read_text(encoding="utf-8")
