"""castline history SPEC --html FILE: the history page of a spec's runs, and its file safety.

Plumbing on conftest's tiny invented runs (tiny_runs: three runs of one series in one ledger;
the third reruns the second's month with 2022-02's actual revised up by 5 and a new
description). Every expected figure is computed here with pandas from the files each run
wrote (metrics.json, forecast.csv) and the data each run read, never taken from the page's
own code. tests/runs/test_history_replay.py checks the page against the ledger on a longer
replay, and in a browser.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest
import yaml
from browser import read_page

from pipeline import cli
from pipeline.core.catalogue import model_label

SECTIONS = ["warnings", "runs", "metrics", "realised", "revisions", "changes", "cautions"]


@pytest.fixture(scope="module")
def page(tiny_runs, tmp_path_factory):
    spec, _, runs = tiny_runs
    target = tmp_path_factory.mktemp("history_page") / "history.html"
    assert cli.main(["history", str(spec), "--html", str(target)]) == 0
    return target, runs


def metrics_of(result) -> dict:
    return json.loads((result.folder.path / "metrics.json").read_text(encoding="utf-8"))


def test_the_page_has_its_sections_and_headings_in_order(page):
    path, _ = page
    parsed = read_page(path)
    assert parsed.sections == SECTIONS
    levels = [level for level, _ in parsed.headings]
    assert levels[0] == "h1" and levels.count("h1") == 1
    h2 = [text for level, text in parsed.headings if level == "h2"]
    assert h2 == ["Warnings", "The runs", "Backtest metrics across runs", "Realised accuracy against expectation",
                  "How the forecasts were revised", "What changed between runs", "Cautions"]
    # no h3 before the first h2: headings never skip a level
    assert levels.index("h2") < (levels.index("h3") if "h3" in levels else len(levels))


def test_the_page_forbids_every_request_but_inline_pictures(page):
    text = page[0].read_text(encoding="utf-8")
    assert "default-src 'none'; img-src data:" in text
    assert not re.search(r'(src|href)="(?!data:)', text)
    assert text.count("<img ") >= 4 and "<script" not in text


def test_runs_and_metrics_equal_each_runs_metrics_json(page):
    path, runs = page
    parsed = read_page(path)
    table = parsed.frame("runs-table")
    # the third run reruns the second's last month of actuals
    assert list(table["run"]) == ["2021-12", "2022-03", "2022-03 (rerun 1)"]
    assert list(table["run id"]) == [r.folder.run_id for r, _ in runs]
    mae = parsed.frame("metrics-mae").set_index("run")
    for (result, _), label in zip(runs, table["run"]):
        document = metrics_of(result)
        chosen = next(m for m in document["models"] if m["model"] == document["recommended"])
        row = table[table["run"] == label].iloc[0]
        assert row["recommended"] == model_label(document["recommended"])
        assert row["MAE"] == pytest.approx(chosen["mae"], rel=1e-12)
        for model in document["models"]:
            assert mae.loc[label, model_label(model["model"])] == pytest.approx(model["mae"], rel=1e-12)


def test_each_target_months_forecasts_and_its_revised_actual(page):
    path, runs = page
    parsed = read_page(path)
    shown = parsed.frame("revisions-table")
    labels = ["2021-12", "2022-03", "2022-03 (rerun 1)"]
    expected = []
    for (result, _), label in zip(runs, labels):
        forecast = pd.read_csv(result.folder.path / "forecast.csv", dtype={"period": str})
        own = forecast[forecast["model"] == metrics_of(result)["recommended"]]
        expected += [{"target month": p, "run": label, "forecast": f} for p, f in zip(own["period"], own["forecast"])]
    expected = pd.DataFrame(expected).sort_values("target month", kind="stable").reset_index(drop=True)
    assert list(shown["target month"]) == list(expected["target month"])
    assert list(shown["run"]) == list(expected["run"])
    assert shown["forecast"].to_numpy() == pytest.approx(expected["forecast"].to_numpy(), rel=1e-12)
    # the change: pandas' diff of each target month's forecasts, oldest run first
    change = expected.groupby("target month", sort=False)["forecast"].diff()
    assert shown["change"].to_numpy() == pytest.approx(change.to_numpy(), rel=1e-12, nan_ok=True)
    # actuals as the latest run read them: 2022-02's revised one
    latest = runs[-1][1].assign(period=lambda t: t["month"].str[:7]).set_index("period")["y"]
    for row in shown.itertuples():
        if row._1 in latest.index and row._1 <= "2022-03":
            assert row.actual == pytest.approx(latest[row._1])
            assert row.error == pytest.approx(row.forecast - latest[row._1])
        else:
            assert pd.isna(row.actual) and pd.isna(row.error)
    assert latest["2022-02"] - runs[1][1].assign(p=lambda t: t["month"].str[:7]).set_index("p")["y"]["2022-02"] \
        == pytest.approx(5)


def test_the_changes_between_runs_name_the_revised_month_and_the_spec_key(page):
    path, runs = page
    changes = read_page(path).frame("changes-table")
    assert list(changes["from"]) == ["2021-12", "2022-03"]
    assert list(changes["to"]) == ["2022-03", "2022-03 (rerun 1)"]
    assert changes["data"].iloc[0].startswith("actuals added for 2022-01 to 2022-03")
    assert changes["data"].iloc[1] == "actuals revised: 2022-02"
    assert "description" in changes["spec keys"].iloc[1] and "Revised February." in changes["spec keys"].iloc[1]
    assert changes["spec keys"].iloc[0] == "none"


def test_realised_accuracy_equals_a_pandas_scoring_of_the_first_runs_forecasts(page):
    path, runs = page
    realised = read_page(path).frame("realised-table")
    first = runs[0][0]
    forecast = pd.read_csv(first.folder.path / "forecast.csv", dtype={"period": str})
    own = forecast[forecast["model"] == metrics_of(first)["recommended"]]
    actual = runs[-1][1].assign(period=lambda t: t["month"].str[:7])[["period", "y"]]
    errors = own.merge(actual, on="period")["forecast"] - own.merge(actual, on="period")["y"]
    assert list(realised["run"]) == ["2021-12"]
    assert realised["forecasts"].iloc[0] == len(errors) == 3
    assert realised["realised MAE"].iloc[0] == pytest.approx(errors.abs().mean(), rel=1e-12)
    assert realised["realised bias"].iloc[0] == pytest.approx(errors.mean(), rel=1e-12)


def test_the_warnings_each_run_gave_come_from_its_folder(page):
    path, runs = page
    parsed = read_page(path)
    given = parsed.frame("recorded-warnings") if "recorded-warnings" in parsed.tables else pd.DataFrame(
        columns=["warning", "runs"])
    expected: dict[str, list[str]] = {}
    for (result, _), label in zip(runs, ["2021-12", "2022-03", "2022-03 (rerun 1)"]):
        folder = result.folder.path
        notes = metrics_of(result).get("notes", [])
        track = folder / "track_record.json"
        warnings = json.loads(track.read_text(encoding="utf-8"))["warnings"] if track.exists() else []
        for text in notes + warnings:
            expected.setdefault(text, []).append(label)
        # The interval warning the run printed: the stated method (the one whose backtest 95%
        # coverage came closest to 95%) held more than 5 points below nominal at 80% or 95%.
        document = metrics_of(result)
        coverage = pd.DataFrame(document["interval_coverage"]).query("model == @document['recommended']")
        at_95 = coverage[coverage["level"] == 0.95].dropna(subset=["coverage"])
        method = at_95.assign(gap=(at_95["coverage"] - 0.95).abs()).sort_values("gap").iloc[0]["method"]
        stated = coverage[coverage["method"] == method]
        if (stated["coverage"] < stated["level"] - 0.05).any():
            too_narrow = [w for w, runs_of in zip(given["warning"], given["runs"]) if w.startswith(
                f"{model_label(document['recommended'])}'s {method} intervals were too narrow in the backtest")
                and label in runs_of.split(", ")]
            assert len(too_narrow) == 1
            expected.setdefault(too_narrow[0], []).append(label)
    assert expected, "the tiny runs give warnings"
    assert len(given) == len(expected)
    for text, labels in expected.items():
        assert text in set(given["warning"]), text
        assert given.set_index("warning").loc[text, "runs"] == ", ".join(labels)


def test_a_second_page_replaces_the_first(page, tmp_path):
    path, _ = page
    target = tmp_path / "again.html"
    # An earlier page (it carries the page's marker), with a line of its own to see it replaced.
    target.write_text(path.read_text(encoding="utf-8").replace("</body>", "<p>STALE</p></body>"),
                      encoding="utf-8")
    assert cli.main(["history", "--ledger", str(read_ledger(path)), "--html", str(target)]) == 0
    assert "STALE" not in target.read_text(encoding="utf-8")
    assert read_page(target).sections == SECTIONS
    assert [p.name for p in tmp_path.iterdir()] == ["again.html"]   # no temporary file left behind


def read_ledger(page_path: Path) -> Path:
    text = page_path.read_text(encoding="utf-8")
    return Path(re.search(r"in the ledger <code>([^<]+)</code>", text).group(1))


@pytest.mark.parametrize("name, content, message", [
    ("history.txt", None, "give a file name ending in .html"),
    ("notes.html", "my own notes\n", "a file is there that castline did not write as a history page"),
    ("missing/history.html", None, "no such folder"),
])
def test_a_page_path_castline_may_not_write_is_refused_and_left_alone(tiny_runs, tmp_path, capsys,
                                                                       name, content, message):
    spec, _, _ = tiny_runs
    target = tmp_path / name
    if content is not None:
        target.write_text(content, encoding="utf-8")
    before = sorted(p.name for p in tmp_path.rglob("*"))
    assert cli.main(["history", str(spec), "--html", str(target)]) == 2
    error = capsys.readouterr().err.strip().splitlines()
    assert len(error) == 1 and message in error[0] and str(target) in error[0]
    assert sorted(p.name for p in tmp_path.rglob("*")) == before
    if content is not None:
        assert target.read_text(encoding="utf-8") == content


def test_the_spec_file_itself_is_never_replaced(tiny_runs, tmp_path, capsys):
    spec, _, _ = tiny_runs
    copy = tmp_path / "spec.html"   # a spec saved under a page's name: still not a page
    copy.write_text(Path(spec).read_text(encoding="utf-8"), encoding="utf-8")
    assert cli.main(["history", str(spec), "--html", str(copy)]) == 2
    assert yaml.safe_load(copy.read_text(encoding="utf-8"))["name"] == "tiny"
    assert "did not write as a history page" in capsys.readouterr().err


def test_a_ledger_of_several_specs_asks_which_one(tiny_runs, tmp_path, capsys):
    spec, ledger_file, _ = tiny_runs
    import sqlite3
    from contextlib import closing
    copy = tmp_path / "ledger.sqlite"
    shutil.copy(ledger_file, copy)
    with closing(sqlite3.connect(copy)) as conn, conn:
        conn.execute("UPDATE runs SET spec_name = 'other' WHERE run_id = "
                     "(SELECT run_id FROM runs ORDER BY created LIMIT 1)")
    assert cli.main(["history", "--ledger", str(copy), "--html", str(tmp_path / "h.html")]) == 2
    error = capsys.readouterr().err.strip()
    assert "holds 2 (other, tiny)" in error and "give the spec file or its name" in error
    assert not (tmp_path / "h.html").exists()
    assert cli.main(["history", "tiny", "--ledger", str(copy), "--html", str(tmp_path / "h.html")]) == 0
    assert list(read_page(tmp_path / "h.html").frame("runs-table")["run"]) == ["2022-03", "2022-03 (rerun 1)"]


def ledger_copy(ledger_file: Path, folder: Path, *statements: str) -> Path:
    """Return a copy of the tiny ledger with the given SQL applied (the runs' folders untouched)."""
    import sqlite3
    from contextlib import closing
    copy = folder / "ledger.sqlite"
    shutil.copy(ledger_file, copy)
    with closing(sqlite3.connect(copy)) as conn, conn:
        for statement in statements:
            conn.execute(statement)
    return copy


def test_a_first_run_alone_has_nothing_to_compare_yet(tiny_runs, tmp_path):
    _, ledger_file, runs = tiny_runs
    first = runs[0][0].folder.run_id
    copy = ledger_copy(ledger_file, tmp_path, f"DELETE FROM runs WHERE run_id != '{first}'")
    target = tmp_path / "first.html"
    assert cli.main(["history", "tiny", "--ledger", str(copy), "--html", str(target)]) == 0
    parsed = read_page(target)
    text = target.read_text(encoding="utf-8")
    assert parsed.sections == SECTIONS
    assert list(parsed.frame("runs-table")["run id"]) == [first]
    assert "One run only: nothing to compare yet." in text
    assert "has an actual in a later run's data yet" in text
    assert "changes-table" not in parsed.tables and "realised-table" not in parsed.tables
    # its own forecasts are still shown, without actuals
    assert parsed.frame("revisions-table")["actual"].isna().all()


def test_a_run_whose_folder_is_gone_is_named_and_its_own_warnings_left_out(tiny_runs, tmp_path):
    _, ledger_file, runs = tiny_runs
    second = runs[1][0].folder.run_id
    copy = ledger_copy(ledger_file, tmp_path,
                       f"UPDATE runs SET folder = '{tmp_path / 'moved-away'}' WHERE run_id = '{second}'")
    target = tmp_path / "gone.html"
    assert cli.main(["history", "tiny", "--ledger", str(copy), "--html", str(target)]) == 0
    text = target.read_text(encoding="utf-8")
    assert "The folders of 1 run(s) could not be read, so their own warnings are not shown: 2022-03." in text
    given = read_page(target).frame("recorded-warnings")
    assert not any("2022-03" in runs_of.split(", ") for runs_of in given["runs"])
    assert read_page(target).frame("runs-table")["run id"].tolist()[1] == second   # the run still counts


def test_a_folder_castline_may_not_write_in_is_one_line_and_nothing_made(tiny_runs, tmp_path, capsys,
                                                                          monkeypatch):
    # The OS refuses the hidden file beside the page (as a read-only folder does; the tests run
    # as root, whom permissions do not stop, so the refusal is made at the call itself).
    import tempfile

    def refused(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(tempfile, "mkstemp", refused)
    spec, _, _ = tiny_runs
    assert cli.main(["history", str(spec), "--html", str(tmp_path / "h.html")]) == 2
    error = capsys.readouterr().err.strip().splitlines()
    assert len(error) == 1 and "cannot write the history page: Permission denied" in error[0]
    assert list(tmp_path.iterdir()) == []


@pytest.mark.forks
def test_the_page_is_the_same_drawn_in_one_process_or_two(page, tiny_runs, tmp_path, monkeypatch):
    # The pictures are jobs shared with a forked copy where the machine allows (picture_jobs).
    spec, _, _ = tiny_runs
    path, _ = page
    monkeypatch.setenv("CASTLINE_ONE_PROCESS", "1")
    alone = tmp_path / "alone.html"
    assert cli.main(["history", str(spec), "--html", str(alone)]) == 0
    def without_time(text: str) -> str:   # the page says when it was made, to the minute
        return re.sub(r"\d{4}-\d{2}-\d{2} \d{2}:\d{2} UTC", "TIME", text)

    assert without_time(alone.read_text(encoding="utf-8")) == without_time(path.read_text(encoding="utf-8"))
    assert alone.read_text(encoding="utf-8").count('src="data:image/') >= 3
