"""A ledger changed by hand or damaged stops history, compare and run in one line, and stays as it is.

Each case edits a copy of a real ledger (two runs of the tiny invented spec, made once for the
module) with SQLite, as a user with a database tool might, then runs the commands through
``pipeline.cli.main`` in this process. Plumbing only: no figure here is a reference value.
"""

from __future__ import annotations

import shutil
import sqlite3
from contextlib import closing
from pathlib import Path

import pytest
from conftest import tiny_data, write_tiny_spec

from pipeline import cli


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """A folder with the tiny spec, its data and runs/ holding two runs and their ledger."""
    base = tmp_path_factory.mktemp("recorded")
    data = tiny_data(("north", "south"))
    for cut in ("2021-12", "2022-03"):   # the second run scores the first's forecasts (realised rows)
        spec = write_tiny_spec(base, data, actuals_to=cut, models=["ols", "ridge"])
        assert cli.main(["run", str(spec)]) == 0
    return base


def sql(*statements):
    def edit(path: Path) -> None:
        with closing(sqlite3.connect(path)) as conn:
            for statement in statements:
                conn.execute(statement)
            conn.commit()
    return edit


def rebuilt(table: str, change, *after: str):
    """Recreate a table from its CREATE statement as `change` rewrites it, keeping its rows, then
    run the `after` statements (what the rewritten table now lets in)."""
    def edit(path: Path) -> None:
        with closing(sqlite3.connect(path)) as conn:
            create = conn.execute("SELECT sql FROM sqlite_master WHERE name = ?", (table,)).fetchone()[0]
            conn.execute(f"ALTER TABLE {table} RENAME TO old_{table}")
            conn.execute(change(create))
            new = [row[1] for row in conn.execute(f"PRAGMA table_info({table})")]
            old = [row[1] for row in conn.execute(f"PRAGMA table_info(old_{table})")]
            kept = ", ".join(c for c in new if c in old)
            conn.execute(f"INSERT INTO {table} ({kept}) SELECT {kept} FROM old_{table}")
            conn.execute(f"DROP TABLE old_{table}")
            for statement in after:
                conn.execute(statement)
            conn.commit()
    return edit


def foreign(version: int):
    """Another program's SQLite file that happens to have a schema_version table of its own."""
    def edit(path: Path) -> None:
        path.unlink()
        with closing(sqlite3.connect(path)) as conn:
            conn.executescript(f"CREATE TABLE schema_version (version INTEGER); "
                               f"INSERT INTO schema_version VALUES ({version}); "
                               "CREATE TABLE invoices (number INTEGER, total REAL);")
    return edit


def _loose(create: str) -> str:
    return create.replace("NOT NULL", "").replace("PRIMARY KEY", "UNIQUE")


# name -> (edit, what the line says besides the file, the commands tried: those that read what
# was damaged; `run` fits its models before it reads the ledger, so a handful of cases cover it)
ALL, ALL_AND_RUN = ("history", "compare"), ("history", "compare", "run")
CASES = {
    # The three examples.
    "text in a metric": (sql("UPDATE model_metrics SET mae = 'about five' WHERE model = 'ols'"),
                         "table model_metrics, row run_id", ALL_AND_RUN),
    "schema_version with two rows": (sql("INSERT INTO schema_version VALUES (2)"),
                                     "table schema_version: has more than one row", ALL_AND_RUN),
    "a foreign file with schema_version 2": (foreign(2), "none of the other tables of a castline run ledger", ALL_AND_RUN),
    # The version table.
    "foreign file with schema_version 1": (foreign(1), "none of the other tables", ALL),
    "version as text": (sql("UPDATE schema_version SET version = 'two'"), "'two' is not a whole number", ALL),
    "version as a fraction": (sql("UPDATE schema_version SET version = 1.5"), "1.5 is not a whole number", ALL),
    "version 0": (sql("UPDATE schema_version SET version = 0"), "version 0 is not a version", ALL_AND_RUN),
    "version below 0": (sql("UPDATE schema_version SET version = -3"), "version -3 is not a version", ALL),
    "no version row": (sql("DELETE FROM schema_version"), "table schema_version: is empty", ALL),
    "version NULL": (rebuilt("schema_version", _loose, "UPDATE schema_version SET version = NULL"),
                     "None is not a whole number", ALL),
    "version table with another column": (rebuilt("schema_version", lambda s: s.replace(
        "NOT NULL", "NOT NULL, note TEXT")), "has the columns version, note", ALL_AND_RUN),
    "version column renamed": (sql("ALTER TABLE schema_version RENAME COLUMN version TO v"),
                               "has the columns v where", ALL),
    "version 1 on tables of version 2": (sql("UPDATE schema_version SET version = 1"),
                                         "table forecasts: has a column interval_method", ALL),
    # Tables and columns.
    "no forecasts table": (sql("DROP TABLE forecasts"), "table forecasts: is missing", ALL_AND_RUN),
    "no runs table": (sql("DROP TABLE runs"), "table runs: is missing", ALL),
    "no realised table": (sql("DROP TABLE realised"), "table realised: is missing", ALL),
    "runs without recommended": (sql("ALTER TABLE runs DROP COLUMN recommended"),
                                 "table runs: has no column recommended", ALL_AND_RUN),
    "runs without created": (rebuilt("runs", lambda s: s.replace("created TEXT NOT NULL,", "")),
                             "table runs: has no column created", ALL),
    "a column added to a metric table": (sql("ALTER TABLE model_metrics ADD COLUMN note TEXT"),
                                         "table model_metrics: has a column note", ALL),
    # Values.
    "NULL model in a metric row": (rebuilt("model_metrics", _loose,
                                           "UPDATE model_metrics SET model = NULL WHERE rowid = 1"),
                                   "column model: is empty", ALL),
    "NULL created": (rebuilt("runs", _loose, "UPDATE runs SET created = NULL"), "column created: is empty", ALL),
    "text in a forecast": (sql("UPDATE forecasts SET forecast = 'high' WHERE rowid = 3"),
                           "column forecast: holds 'high' where castline writes a number", ("compare", "run")),
    "a fraction as months ahead": (sql("UPDATE forecasts SET horizon = 1.5 WHERE rowid = 2"),
                                   "column horizon: holds 1.5 where castline writes a whole number",
                                   ("compare",)),
    "text in a realised actual": (sql("UPDATE realised SET actual = 'n/a' WHERE rowid = 1"),
                                  "table realised, row", ("history", "run")),
    "text as months ahead of a metric": (sql("UPDATE horizon_metrics SET horizon = 'first' WHERE rowid = 1"),
                                         "table horizon_metrics, row", ALL),
    "text in a coefficient": (sql("UPDATE coefficients SET estimate = 'x' WHERE rowid = 1"),
                              "table coefficients, row", ("compare",)),
    "text in a month's row count": (sql("UPDATE periods SET actual_rows = 'many' WHERE rowid = 1"),
                                    "table periods, row", ALL_AND_RUN),
    "bytes as a spec name": (sql("UPDATE runs SET spec_name = x'00ff'"), "column spec_name: holds b", ALL),
    "a spec that is not JSON": (sql("UPDATE runs SET spec_json = '{not json'"), "column spec_json", ALL),
    "a spec that is a list": (sql("UPDATE runs SET spec_json = '[1, 2]'"), "column spec_json", ALL),
    "text in beats_baseline": (sql("UPDATE runs SET beats_baseline = 'yes'"), "column beats_baseline", ALL),
    "text in an origin metric": (sql("UPDATE origin_metrics SET rmse = 'big' WHERE rowid = 1"),
                                 "table origin_metrics, row", ALL),
    "text in inside_80": (sql("UPDATE realised SET inside_80 = 'yes' WHERE rowid = 1"), "column inside_80",
                          ("history", "run")),
}


def _copy(recorded: Path, tmp_path: Path) -> tuple[Path, Path]:
    copy = tmp_path / "copy"
    shutil.copytree(recorded, copy)
    return copy / "spec.yaml", copy / "runs" / "ledger.sqlite"


def _one_line(capsys, book: Path) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert err.startswith(f"castline: {book}: ") and err.count("\n") == 1, err
    return err


@pytest.mark.parametrize("case", CASES)
def test_a_damaged_ledger_stops_history_compare_and_run_in_one_line(recorded, tmp_path, capsys, case):
    edit, says, reads = CASES[case]
    spec, book = _copy(recorded, tmp_path)
    runs = sorted(p.name for p in book.parent.glob("run-*"))
    edit(book)
    before = book.read_bytes()
    commands = [["history", str(spec)], ["history", "--ledger", str(book), "--all"],
                ["compare", runs[0], runs[1], "--ledger", str(book)]]
    commands.append(["run", str(spec)])
    capsys.readouterr()
    for args in [a for a in commands if a[0] in reads]:
        code = cli.main(args)
        err = _one_line(capsys, book)
        assert code == 2, (args, err)
        assert says in err, (args, err)
        assert book.read_bytes() == before, args
    assert sorted(p.name for p in book.parent.iterdir()) == sorted([*runs, "ledger.sqlite"]), \
        "no run folder placed or left hidden, and no file beside the ledger"


def test_the_damage_a_command_reads_is_what_it_names(recorded, tmp_path, capsys):
    # compare reads the two runs' coefficients, history none: the same damage stops one, not the other.
    spec, book = _copy(recorded, tmp_path)
    runs = sorted(p.name for p in book.parent.glob("run-*"))
    sql("UPDATE coefficients SET estimate = 'x' WHERE rowid = 1")(book)
    capsys.readouterr()
    assert cli.main(["compare", runs[0], runs[1], "--ledger", str(book)]) == 2
    assert "table coefficients, row run_id" in _one_line(capsys, book)
    assert cli.main(["history", str(spec)]) == 0


def test_an_untouched_ledger_passes_every_check(recorded, tmp_path, capsys):
    spec, book = _copy(recorded, tmp_path)
    runs = sorted(p.name for p in book.parent.glob("run-*"))
    capsys.readouterr()
    assert cli.main(["history", str(spec), "--all"]) == 0
    assert cli.main(["compare", runs[0], runs[1], "--ledger", str(book)]) == 0
    assert capsys.readouterr().err == ""
