"""pipeline/record/ledger/fingerprints.py: each month's fingerprint in the canonical form the
module documents, made column by column.

References: the canonical JSON text written out by hand below and hashed with hashlib.sha256;
Python's own ``repr`` of floats and ``json.dumps`` of each cell (the form's definition) for
columns of every dtype castline reads; the values are invented (plumbing only).
"""

from __future__ import annotations

import hashlib
import json
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.record.ledger.fingerprints import cell_tokens, period_fingerprints


def _data(history: pd.DataFrame, future: pd.DataFrame | None = None) -> SimpleNamespace:
    return SimpleNamespace(history=history, future=future if future is not None else history.iloc[:0])


def test_a_months_fingerprint_is_the_sha256_of_its_canonical_json_written_by_hand():
    history = pd.DataFrame({
        PERIOD: pd.PeriodIndex(["2024-01", "2024-01", "2024-02"], freq="M"),
        SERIES: ["South", "North", "North"], ROW: [2, 3, 4],
        "units": [12.0, np.nan, 1e-05], "price": np.array([3, 4, 5], dtype=np.int64),
        "region": pd.array(["South", "North", 'Nö"rth'], dtype="str"),
        "week_start": pd.to_datetime(["2024-01-01", None, "2024-02-05 06:30"], format="ISO8601"),
        "promo": [True, False, True]})
    table = period_fingerprints(_data(history))
    # Columns sorted by name; rows by series within the month; numbers as repr of a float;
    # a date as ISO text; missing as null; JSON as json.dumps writes it (", ", ASCII escapes).
    january = ('[["price", "promo", "region", "units", "week_start"], '
               '[["4.0", "False", "North", null, null], ["3.0", "True", "South", "12.0", "2024-01-01T00:00:00"]]]')
    february = ('[["price", "promo", "region", "units", "week_start"], '
                '[["5.0", "True", "N\\u00f6\\"rth", "1e-05", "2024-02-05T06:30:00"]]]')
    assert table["sha256"].tolist() == [hashlib.sha256(text.encode("utf-8")).hexdigest()
                                        for text in (january, february)]
    assert table[["period", "actual_rows", "planned_rows"]].values.tolist() == [["2024-01", 2, 0], ["2024-02", 1, 0]]


def _by_definition(value) -> str:
    """The canonical cell as the module's docstring defines it, cell by cell."""
    if value is None or value is pd.NA or value is pd.NaT or (isinstance(value, float) and np.isnan(value)):
        return "null"
    if isinstance(value, bool | np.bool_):
        return json.dumps(str(value))
    if isinstance(value, int | float | np.number):
        return json.dumps(repr(float(value)))
    if isinstance(value, pd.Timestamp):
        return json.dumps(value.isoformat())
    return json.dumps(str(value))


def test_cells_made_column_by_column_are_the_definitions_cell_by_cell_for_every_dtype():
    # Design: 400 rows per column; floats over 40 decades with NaN, -0.0 and infinities, 64-bit
    # integers beyond 2**53, float32, booleans, nullable integers and floats, text with quotes,
    # backslashes, line breaks and non-ASCII letters, categories, dates with NaT and times,
    # and a column of mixed Python objects.
    rng = np.random.default_rng(20261203)
    n = 400
    floats = rng.normal(size=n) * 10.0 ** rng.integers(-20, 20, n)
    floats[:5] = [np.nan, -0.0, np.inf, -np.inf, 2.0 ** 60]
    columns = {
        "float": floats, "int": rng.integers(-(2 ** 62), 2 ** 62, n), "float32": floats.astype(np.float32),
        "bool": rng.integers(0, 2, n).astype(bool),
        "Int64": pd.array(np.where(rng.random(n) < 0.2, None, rng.integers(-9, 9, n)), dtype="Int64"),
        "Float64": pd.array(np.where(rng.random(n) < 0.2, None, rng.normal(size=n)), dtype="Float64"),
        "str": pd.array(rng.choice(["plain", 'say "hi"', "back\\slash", "line\nbreak", "Zürich", None], n),
                        dtype="str"),
        "category": pd.Categorical(rng.choice(["east", "west"], n)),
        "datetime": pd.Series(pd.to_datetime("2020-01-01") + pd.to_timedelta(rng.integers(0, 10 ** 9, n), unit="ms"))
        .where(rng.random(n) > 0.1),
        "object": pd.Series(list(rng.choice(np.array([1, 2.5, "z", None, True], dtype=object), n)), dtype=object),
    }
    for name, values in columns.items():
        column = pd.Series(values)
        expected = [_by_definition(value) for value in column.tolist()]
        assert list(cell_tokens(column)) == expected, name


@pytest.mark.forks
def test_a_run_records_the_fingerprints_its_copy_made_ahead(tmp_path):
    # A whole run as a user runs it (its own process, which makes the fingerprints in a forked
    # copy while it fits); the reference: period_fingerprints of the same data, checked here.
    import os
    import sqlite3
    import subprocess
    import sys

    from conftest import ROOT, SHIPPED_DEMO_SPEC

    from pipeline.runner import _read_and_check
    from pipeline.spec.loader import load_spec
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
    env.pop("CASTLINE_ONE_PROCESS", None)
    done = subprocess.run([sys.executable, "-m", "pipeline", "run", str(SHIPPED_DEMO_SPEC),
                           "--output-folder", str(tmp_path)], env=env, capture_output=True, text=True,
                          timeout=600)
    assert done.returncode == 0, done.stderr
    with sqlite3.connect(tmp_path / "ledger.sqlite") as ledger:
        recorded = pd.read_sql("SELECT period, actual_rows, planned_rows, sha256 FROM periods", ledger)
    expected = period_fingerprints(_read_and_check(load_spec(SHIPPED_DEMO_SPEC)))
    assert len(expected) > 90
    pd.testing.assert_frame_equal(recorded, expected, check_dtype=False)
