"""pipeline/record/ledger/store.py: the spec's hash, each month's fingerprint, values in and out.

References: hashlib.sha256 over canonical JSON written out by hand (keys sorted, no spaces,
UTF-8); row counts per month counted with pandas from the data file; the tiny data is invented
(plumbing only).
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
from contextlib import closing

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import tiny_data, write_tiny_spec

from pipeline.core.errors import UserError
from pipeline.record.ledger.fingerprints import period_fingerprints
from pipeline.record.ledger.store import json_records, plain, reading, spec_hash
from pipeline.runner import check


def test_spec_hash_is_sha256_of_the_canonical_json():
    spec = {"name": "café", "models": ["ols", {"kind": "ridge"}], "alpha": 0.5, "b": None}
    # canonical JSON written by hand: keys sorted at every level, no spaces, UTF-8 as is
    canonical = '{"alpha":0.5,"b":null,"models":["ols",{"kind":"ridge"}],"name":"café"}'
    assert spec_hash(spec) == hashlib.sha256(canonical.encode("utf-8")).hexdigest()


def test_spec_hash_does_not_depend_on_key_order_but_on_every_value():
    one = {"a": 1, "b": {"c": 2, "d": 3}}
    reordered = {"b": {"d": 3, "c": 2}, "a": 1}
    assert spec_hash(one) == spec_hash(reordered)
    assert spec_hash(one) != spec_hash({"a": 1, "b": {"c": 2, "d": 4}})


def test_the_ledgers_spec_hash_is_that_of_the_run_folders_spec(tiny_runs):
    _, ledger_file, runs = tiny_runs
    result = runs[0][0]
    resolved = yaml.safe_load((result.folder.path / "spec.yaml").read_text(encoding="utf-8"))
    text = json.dumps(resolved, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    with closing(sqlite3.connect(ledger_file)) as conn:
        stored = conn.execute("SELECT spec_hash FROM runs WHERE run_id = ?",
                              (result.folder.run_id,)).fetchone()[0]
    assert stored == hashlib.sha256(text.encode("utf-8")).hexdigest()


@pytest.fixture
def two_series(tmp_path):
    return tiny_data(regions=("North", "South"))


def fingerprints(folder, data, **keys) -> pd.DataFrame:
    return period_fingerprints(check(write_tiny_spec(folder, data, actuals_to="2021-12", **keys)))


def test_one_fingerprint_per_month_with_its_rows_counted(tmp_path, two_series):
    table = fingerprints(tmp_path, two_series)
    written = pd.read_csv(tmp_path / "data.csv")
    # pandas on the data file: rows with and without the target per month
    month = written["month"].str[:7]
    counted = written.assign(period=month, actual=written["y"].notna()).groupby("period")["actual"]
    assert list(table["period"]) == sorted(month.unique())
    assert list(table["actual_rows"]) == list(counted.sum())
    assert list(table["planned_rows"]) == list(counted.size() - counted.sum())
    assert table["sha256"].str.fullmatch("[0-9a-f]{64}").all() and table["sha256"].is_unique


def test_a_changed_value_changes_only_its_months_fingerprint(tmp_path, two_series):
    before = fingerprints(tmp_path / "a", two_series).set_index("period")["sha256"]
    changed = two_series.copy()
    changed.loc[(changed["month"] == "2021-06-01") & (changed["region"] == "South"), "x"] += 1
    after = fingerprints(tmp_path / "b", changed).set_index("period")["sha256"]
    assert list(before.index[before != after]) == ["2021-06"]


def test_row_order_and_rows_elsewhere_leave_a_months_fingerprint_alone(tmp_path, two_series):
    before = fingerprints(tmp_path / "a", two_series).set_index("period")["sha256"]
    shuffled = two_series.sample(frac=1, random_state=3)
    assert fingerprints(tmp_path / "b", shuffled).set_index("period")["sha256"].equals(before)
    # the first two months left out: every other month keeps its fingerprint
    fewer = fingerprints(tmp_path / "c", two_series[two_series["month"] >= "2020-03-01"])
    kept = fewer.set_index("period")["sha256"]
    assert len(kept) == len(before) - 2 and kept.equals(before.loc[kept.index])


def test_json_records_gives_plain_json_values():
    frame = pd.DataFrame({"n": np.array([3, 4], dtype=np.int64), "mae": [1.5, np.nan],
                          "month": [pd.Period("2024-01", "M"), pd.Period("2024-02", "M")],
                          "flag": [True, False], "name": ["a", None]})
    records = json_records(frame)
    assert records == [{"n": 3, "mae": 1.5, "month": "2024-01", "flag": True, "name": "a"},
                       {"n": 4, "mae": None, "month": "2024-02", "flag": False, "name": None}]
    assert type(records[0]["n"]) is int
    assert json.loads(json.dumps(records, allow_nan=False)) == records   # strict JSON: no NaN


def test_plain_turns_missing_and_infinite_values_into_null():
    assert [plain(v) for v in (pd.NA, pd.NaT, None, float("inf"), np.float64(-np.inf))] == [None] * 5
    assert plain(np.bool_(True)) is True and plain(pd.Timestamp("2024-01-02")) == "2024-01-02 00:00:00"


def test_reading_a_missing_or_foreign_file_is_one_line_naming_it(tmp_path):
    with pytest.raises(UserError, match="no run ledger here yet") as missing:
        with reading(tmp_path / "ledger.sqlite"):
            pass
    text = tmp_path / "notes.sqlite"
    text.write_text("not a database\n", encoding="utf-8")
    with pytest.raises(UserError, match="not an SQLite database") as foreign:
        with reading(text):
            pass
    for error in (missing, foreign):
        assert "\n" not in str(error.value) and str(tmp_path) in str(error.value)
    assert text.read_text(encoding="utf-8") == "not a database\n"     # left as it is
