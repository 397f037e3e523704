"""Property-based fuzzing of the spec loader and the check stage through ``castline check``.

Whatever the spec file or the data file holds, ``pipeline.cli.main(["check", path])`` must
end in success (0) or a user mistake (2: on stderr one ``castline: `` line per problem of
the spec, or one for the data), never an internal error (1) or a traceback. Three kinds of
input are generated: random YAML-ish text, the demo spec with keys deleted and values
replaced by random scalars, lists and mappings, and the small clean file of the
broken-input corpus with cells replaced and rows duplicated or dropped. The files are
invented; no figure here is a reference value.
"""

from __future__ import annotations

import copy
import csv
import io
import tempfile
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

import yaml
from conftest import DEMO_DATA, DEMO_SPEC, TEST_DATA
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline import cli

BROKEN = TEST_DATA / "broken_inputs"
SETTINGS = settings(max_examples=60, deadline=None, database=None,
                    suppress_health_check=[HealthCheck.too_slow])


def check_exit(spec_text: str | bytes, folder: Path, data: tuple[str, bytes] | None = None) -> tuple[int, str]:
    """Write the spec (and data) into folder, run castline check on it, return (exit code, stderr)."""
    spec = folder / "spec.yaml"
    spec.write_bytes(spec_text if isinstance(spec_text, bytes) else spec_text.encode("utf-8"))
    if data:
        (folder / data[0]).write_bytes(data[1])
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = cli.main(["check", str(spec)])
    return code, err.getvalue()


def assert_handled(code: int, err: str) -> None:
    assert "Traceback" not in err, err
    assert code in (0, 2), err
    if code == 2:
        lines = err.splitlines()
        assert err.endswith("\n") and lines and all(line.startswith("castline: ") for line in lines), err
        if len(lines) > 1:   # only a spec's problems come several at once, one line each
            assert all("spec.yaml:" in line for line in lines), err


# ------------------------------------------------------------ random YAML-ish text

YAML_BITS = st.sampled_from([
    "name: x\n", "input:\n", "  file: data.csv\n", "  date_column: month\n", "target: y\n",
    "validation: {method: holdout, last_periods: 2}\n", "output: {folder: out}\n", "models: [ols",
    "- ", ": ", "\t", "  ", "\n", "[", "]", "{", "}", "&a ", "*a ", "!!python/object:os.system ",
    "!!binary ", "? ", "|\n", ">\n", "'", '"', "#", "%YAML 1.1\n", "---\n", "...\n", "~", "null",
    "1e308", ".inf", "-.nan", "2020-01-01", "0x1F", "yes", "<<: *a\n", "\\", "\u00e9", "\x00", "\ufeff",
])


@SETTINGS
@given(st.lists(YAML_BITS | st.text(max_size=8), max_size=30))
def test_random_yaml_ish_text_is_a_spec_or_a_user_mistake(parts):
    with tempfile.TemporaryDirectory() as folder:
        (Path(folder) / "data.csv").write_bytes((BROKEN / "clean.csv").read_bytes())
        assert_handled(*check_exit("".join(parts), Path(folder)))


@SETTINGS
@given(st.binary(max_size=200))
def test_random_bytes_are_a_user_mistake(blob):
    with tempfile.TemporaryDirectory() as folder:
        assert_handled(*check_exit(blob, Path(folder)))


# ------------------------------------------------------------ the demo spec, mutated

def demo_spec() -> dict:
    spec = yaml.safe_load(DEMO_SPEC.read_text(encoding="utf-8"))
    spec["input"]["file"] = str(DEMO_DATA)
    spec["output"] = {"folder": "reports"}
    return spec


def key_paths(node, path=()) -> list[tuple]:
    """Return the path of every value in a nested mapping/list, the root excluded."""
    found = []
    if isinstance(node, dict):
        items = node.items()
    elif isinstance(node, list):
        items = enumerate(node)
    else:
        return found
    for key, value in items:
        found.append(path + (key,))
        found += key_paths(value, path + (key,))
    return found


SCALARS = (st.none() | st.booleans() | st.integers(-10**6, 10**6) | st.floats()
           | st.text(max_size=12) | st.sampled_from(["ols", "holdout", "month", "region", "../x", "", "-1"]))
VALUES = st.recursive(SCALARS, lambda inner: st.lists(inner, max_size=3)
                      | st.dictionaries(st.text(max_size=6), inner, max_size=3), max_leaves=6)


@SETTINGS
@given(st.data())
def test_the_demo_spec_mutated_is_a_spec_or_a_user_mistake(data):
    spec = demo_spec()
    for _ in range(data.draw(st.integers(1, 4), label="mutations")):
        paths = key_paths(spec)
        if not paths:
            break
        path = data.draw(st.sampled_from(paths), label="path")
        parent = spec
        for part in path[:-1]:
            parent = parent[part]
        if data.draw(st.booleans(), label="delete"):
            del parent[path[-1]]
        else:
            parent[path[-1]] = data.draw(VALUES, label="value")
    with tempfile.TemporaryDirectory() as folder:
        text = yaml.safe_dump(copy.deepcopy(spec), sort_keys=False, allow_unicode=True)
        assert_handled(*check_exit(text, Path(folder)))


# ------------------------------------------------------------ the clean data file, mutated

CLEAN_ROWS = list(csv.reader((BROKEN / "clean.csv").read_text(encoding="utf-8").splitlines()))
CLEAN_SPEC = {
    "name": "fuzzed-data",
    "input": {"file": "data.csv", "date_column": "month", "series": ["region"]},
    "target": "sales", "drivers": {"numeric": ["price"], "categorical": ["channel"]},
    "validation": {"method": "holdout", "last_periods": 2}, "output": {"folder": "reports"},
}
CELLS = (st.just("") | st.text(max_size=10) | st.floats().map(repr) | st.integers().map(str)
         | st.sampled_from(["inf", "-inf", "nan", "1e308", "-1e308", "NA", "2020-13-01", "2020-02-30",
                            "North", "South", "shop", "web", "=1+1", '"', ",", "\n", "\ufeff"]))


@SETTINGS
@given(st.data())
def test_the_clean_file_mutated_passes_or_is_a_user_mistake(data):
    header, rows = CLEAN_ROWS[0], [list(r) for r in CLEAN_ROWS[1:]]
    for _ in range(data.draw(st.integers(1, 6), label="mutations")):
        if not rows:
            break
        action = data.draw(st.sampled_from(["cell", "cell", "cell", "duplicate", "drop"]), label="action")
        at = data.draw(st.integers(0, len(rows) - 1), label="row")
        if action == "cell":
            column = data.draw(st.integers(0, len(header) - 1), label="column")
            rows[at][column] = data.draw(CELLS, label="cell")
        elif action == "duplicate":
            rows.insert(data.draw(st.integers(0, len(rows)), label="to"), list(rows[at]))
        else:
            del rows[at]
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows([header, *rows])
    with tempfile.TemporaryDirectory() as folder:
        code, err = check_exit(yaml.safe_dump(CLEAN_SPEC), Path(folder),
                               ("data.csv", out.getvalue().encode("utf-8")))
        assert_handled(code, err)
