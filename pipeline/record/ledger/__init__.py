"""The run ledger: every run's identity, metrics and forecasts in one SQLite file.

One file, by default ``ledger.sqlite`` in the folder the run folders are written to
(``output.ledger`` moves it). Tables, one row per:

- ``runs``: run (id, time, spec name, sha256 of the resolved spec and the spec itself,
  input sha256, castline version, months covered, recommended model, where its folder is);
- ``model_metrics``, ``origin_metrics``, ``horizon_metrics``: model, and model and origin or
  months ahead, of a run's backtest;
- ``forecasts``: forecast a run made (period, series, months ahead, model, value, the
  analytic and empirical 80% and 95% bounds, and which of the two the summary stated);
- ``coefficients``: term of each final fit;
- ``periods``: month of a run's input, with a sha256 of that month's rows, so that two runs
  can tell which months were added or revised between them;
- ``realised``: earlier forecast whose month has an actual in a later run's data, scored
  by that later run (recorded when first scored and again whenever the actual is revised);
- ``schema_version``: the schema's version (``SCHEMA_VERSION``). An older ledger is
  upgraded in place by the ``MIGRATIONS`` when a run records into it (one transaction);
  reading an older ledger upgrades a copy in memory and leaves the file as it is.

Safety. Every run is recorded in one transaction; the file is in WAL mode with a busy
timeout, so runs started together queue for the write lock and each lands whole. A file
that is not a ledger, is damaged, or was written by a newer castline stops the run with
one line (exit 2) and is never written to; so does a ledger changed by hand (``checks``: its
version table, tables and columns, and the kind of value in each column, as it is opened and
as its rows are read).

The run folder and the ledger row. The ledger commit is the moment a run is made:

1. the run folder writer writes every file of the run into its hidden
   ``.incomplete-<run id>`` folder;
2. one transaction records the run, marked ``placing``, with both folder paths;
3. the hidden folder is renamed into place, and the row is marked ``placed``.

A run folder is never visible without its ledger row: the rename comes after the
commit. A ledger row counts (in history, compare and the track record) once it is
``placed`` or its run folder exists, so a row is never visible without its folder either.
A run stopped before step 2 leaves no row (SQLite discards the open transaction) and no
visible folder. A run stopped between steps 2 and 3 left a complete folder and a committed
row: the next run into the same output folder finishes it (renames the folder into place),
so the run appears whole, later. The paths in a row are not trusted: only that output
folder's own hidden folder is ever moved, and only beside itself (``write._refusal``). If the rename itself fails, the row is deleted again.

Modules: ``store`` (opening the file, values in and out), ``migrations`` (the schema),
``checks`` (what a file changed by hand holds),
``write`` (recording a run), ``read`` (the runs that count). What is read back for the
user (track record, history, compare) is in ``pipeline.review``.
"""

from pipeline.record.ledger.migrations import MIGRATIONS, SCHEMA_VERSION, migrate
from pipeline.record.ledger.read import visible_runs
from pipeline.record.ledger.store import (
    INTERVAL_COLUMNS,
    LEDGER_FILE,
    RUN_TABLES,
    json_records,
    ledger_path,
    reading,
)
from pipeline.record.ledger.write import record_and_place

__all__ = ["INTERVAL_COLUMNS", "LEDGER_FILE", "MIGRATIONS", "RUN_TABLES", "SCHEMA_VERSION", "json_records",
           "ledger_path", "migrate", "reading", "record_and_place", "visible_runs"]
