"""The command line against a corpus of bad specs and data (tests/data/bad_specs/cases.yaml).

Each case is run through ``pipeline.cli.main`` in this process: a mistake must give exit
code 2 and exactly one stderr line starting ``castline: `` that points at the place to
fix (spec: FILE:LINE: key; data: FILE:ROW and column, or the problems table's row and
column); inputs castline must cope with (unsorted months, a constant or a collinear
driver, values near the float limit) must not crash. The data files are invented
(tests/data/bad_specs/make_data.py, and the files of tests/data/broken_inputs); no
figure here is a reference value.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import pandas as pd
import pytest
import yaml
from conftest import TEST_DATA

from pipeline import cli

HERE = TEST_DATA / "bad_specs"
BROKEN = TEST_DATA / "broken_inputs"
MANIFEST = yaml.safe_load((HERE / "cases.yaml").read_text(encoding="utf-8"))
BROKEN_BASE = yaml.safe_load((BROKEN / "cases.yaml").read_text(encoding="utf-8"))["base_spec"]
CASES = MANIFEST["cases"]


def test_the_corpus_is_large_enough_and_its_ids_unique():
    ids = [case["id"] for case in CASES]
    assert len(ids) >= 40 and len(set(ids)) == len(ids)
    for case in CASES:
        data = case.get("data")
        if data:
            assert ((BROKEN if case.get("corpus") == "broken_inputs" else HERE) / data).is_file()


def prepare(case: dict, tmp: Path) -> tuple[list[str], Path, Path]:
    """Write the case's spec into tmp; return the command line, the spec and the data file."""
    broken = case.get("corpus") == "broken_inputs"
    data = (BROKEN if broken else HERE) / case.get("data", "base.csv")
    fill = {"data": str(data), "here": str(HERE), "tmp": str(tmp)}
    spec = tmp / "spec.yaml"
    if "raw" in case:
        spec.write_bytes(case["raw"].encode("latin-1"))
    elif broken:
        text = dict(BROKEN_BASE, input=dict(BROKEN_BASE["input"], file=str(data)),
                    output={"folder": str(tmp / "reports")})
        spec.write_text(yaml.safe_dump(text, sort_keys=False), encoding="utf-8")
    else:
        text = case.get("spec", MANIFEST["base_spec"])
        for old, new in case.get("replace", []):
            assert old in text, f"{case['id']}: {old!r} is not in the base spec"
            text = text.replace(old, new)
        for marker, piece, times in case.get("repeat", []):
            assert marker in text, f"{case['id']}: {marker!r} is not in the spec"
            text = text.replace(marker, piece * times)
        for key, value in fill.items():
            text = text.replace("{" + key + "}", value)
        spec.write_text(text, encoding="utf-8")
    fill["spec"] = str(spec)
    args = [re.sub(r"\{(\w+)\}", lambda m: fill[m.group(1)], a) for a in case.get("args", ["check", "{spec}"])]
    return args, spec, data


def problem_rows(stdout: str) -> list[tuple[str, str]]:
    """Return the (row, column) pairs of the problems table check prints."""
    pairs = []
    for line in stdout.splitlines():
        parts = line.split()
        if len(parts) >= 2 and (parts[0].isdigit() or parts[0] == "-"):
            pairs.append((parts[0], parts[1]))
    return pairs


@pytest.mark.parametrize("case", CASES, ids=[c["id"] for c in CASES])
def test_a_bad_input_gets_its_exit_code_and_one_line_pointing_at_the_place(case, tmp_path, capsys):
    args, spec, data = prepare(case, tmp_path)
    expect = case["expect"]
    try:
        code = cli.main(args)
    except SystemExit as stop:     # argparse's own mistakes leave through exit()
        code = stop.code
    out, err = capsys.readouterr()
    assert "Traceback" not in err and "internal error" not in err, err
    allowed = expect["exit"] if isinstance(expect["exit"], list) else [expect["exit"]]
    assert code in allowed, f"exit {code}; stderr: {err}"
    if code == 2:
        assert err.startswith("castline: ") and err.count("\n") == 1, err
        assert expect.get("message", "") in err, err
        assert expect.get("stdout", "") in out, out
        where = expect.get("where", {})
        if where.get("file") == "spec":
            place = f"{spec}:{where['line']}: " if "line" in where else f"{spec}:"
            assert place in err, err
            if "key" in where:
                assert f": {where['key']}: " in err, err
        elif where.get("file") == "given":
            assert any(a in err for a in args[1:]), err
        elif where.get("file") == "data":
            assert str(data) in err, err
            row, column = where.get("row"), where.get("column")
            if row is not None or column is not None:
                shown = problem_rows(out)
                in_err = ((row is None or f"{data}:{row}" in err)
                          and (column is None or f"column '{column}'" in err))
                in_table = any((row is None or r == str(row)) and (column is None or c == column)
                               for r, c in shown)
                assert in_err or in_table, (out, err)
        return
    assert expect.get("message", "") in out, out
    if args[0] == "run":
        folders = [p for p in (tmp_path / "reports").iterdir() if p.is_dir() and p.name.startswith("run-")]
        assert len(folders) == 1
        forecast = pd.read_csv(folders[0] / "forecast.csv")
        assert all(math.isfinite(v) for v in forecast["forecast"]), "a forecast that is not finite"
        summary = (folders[0] / "summary.md").read_text(encoding="utf-8")
        warnings = "\n".join(line for line in out.splitlines() if line.startswith("warning:"))
        for word in expect.get("names", []):
            assert word in warnings, out
            assert word in summary
