"""The spec loader: typed spec, resolved paths, and FILE:LINE: key.path: messages.

Every spec here is written into tmp_path; line numbers are looked up in the
text written, so each expected line is the line a reader of that file sees.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from conftest import DEMO_DATA, DEMO_SPEC, ROOT, SHIPPED_DEMO_DATA, SHIPPED_DEMO_SPEC

from pipeline import Spec, SpecError, load_spec

BASE = """\
name: demo
input:
  file: data.csv
  date_column: month
  series: [region]
target: bags_sold
drivers:
  numeric:
    - shelf_price
    - column: mean_temp_c
      degree: 2
  categorical:
    - column: region
      reference: North
validation:
  method: holdout
  last_periods: 12
models: [ols]
output:
  folder: out
"""


# ---------------------------------------------------------------- helpers
def model_kinds(spec) -> list[str]:
    """Return the spec's model names (a model entry is a name or an object with a kind)."""
    return [getattr(model, "kind", model) for model in spec.models]


def line_of(text: str, needle: str, occurrence: int = 1) -> int:
    """Return the 1-based line of the n-th line of text that contains needle."""
    seen = 0
    for number, line in enumerate(text.splitlines(), start=1):
        if needle in line:
            seen += 1
            if seen == occurrence:
                return number
    raise AssertionError(f"{needle!r} is not in the spec text")


def edit(old: str, new: str, text: str = BASE) -> str:
    assert text.count(old) == 1, f"{old!r} must occur exactly once in the base spec"
    return text.replace(old, new)


@pytest.fixture
def write(tmp_path):
    """Write spec text (and a data file beside it) and return the spec's path."""
    (tmp_path / "data.csv").write_text("month,region,bags_sold,shelf_price,mean_temp_c\n",
                                       encoding="utf-8")

    def _write(text: str, name: str = "spec.yaml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path
    return _write


def refused(path: Path) -> SpecError:
    """Return the SpecError loading the spec raises, after checking it is one line."""
    with pytest.raises(SpecError) as info:
        load_spec(path)
    error = info.value
    text = str(error)
    assert "\n" not in text and "\r" not in text, f"not one line: {text!r}"
    assert text == error.one_line()
    assert "Traceback" not in text
    return error


def assert_placed(error: SpecError, path: Path, line: int, key: str | None = None) -> None:
    """The message starts FILE:LINE: (and key.path: when a key is given)."""
    prefix = f"{path}:{line}: " + (f"{key}: " if key else "")
    assert str(error).startswith(prefix), f"{str(error)!r} does not start with {prefix!r}"
    assert error.file == str(path)
    assert error.line == line


# ---------------------------------------------------------------- specs that load

def test_demo_spec_loads_with_paths_resolved_against_its_folder():
    spec = load_spec(SHIPPED_DEMO_SPEC)
    assert isinstance(spec, Spec)
    assert spec.input.file.is_absolute() and spec.output.folder.is_absolute()
    # configs/compost_demo.yaml says ../data_samples/compost_sales.csv and ../reports
    assert spec.input.file == SHIPPED_DEMO_DATA
    assert spec.output.folder == ROOT / "reports"
    assert spec.source == SHIPPED_DEMO_SPEC
    assert spec.target == "bags_sold"
    assert model_kinds(spec)[0] == "mean_baseline" and "ols" in model_kinds(spec)
    assert spec.validation.method == "rolling_origin"
    # The simple rules are compared whatever models lists (after it, in the catalogue's order).
    assert model_kinds(spec)[-4:] == ["calendar_month_mean", "trailing_mean", "last_value",
                                      "seasonal_naive"]


def test_relative_paths_resolve_against_the_spec_folder_not_the_working_folder(tmp_path, monkeypatch):
    (tmp_path / "configs").mkdir()
    (tmp_path / "data_samples").mkdir()
    (tmp_path / "elsewhere").mkdir()
    shutil.copy(DEMO_SPEC, tmp_path / "configs" / "demo.yaml")
    shutil.copy(DEMO_DATA, tmp_path / "data_samples" / "compost_sales.csv")
    monkeypatch.chdir(tmp_path / "elsewhere")
    spec = load_spec(Path("..") / "configs" / "demo.yaml")
    assert spec.input.file.is_absolute() and spec.output.folder.is_absolute()
    assert spec.input.file == (tmp_path / "data_samples" / "compost_sales.csv").resolve()
    assert spec.output.folder == (tmp_path / "reports").resolve()
    assert not spec.output.folder.exists(), "loading a spec must not create its output folder"


def test_bare_driver_names_and_defaults(write):
    spec = load_spec(write(BASE))
    assert [(d.column, d.degree) for d in spec.drivers.numeric] == [("shelf_price", 1), ("mean_temp_c", 2)]
    assert spec.drivers.categorical[0].reference == "North"
    assert spec.intercept is True
    # holdout is time-ordered: the simple rules are compared beside the listed model
    assert model_kinds(spec) == ["mean_baseline", "ols", "calendar_month_mean", "trailing_mean",
                                 "last_value", "seasonal_naive"]
    assert spec.input.file.name == "data.csv" and spec.input.file.is_absolute()


# ---------------------------------------------------------------- unknown keys

@pytest.mark.parametrize(("old", "new", "key", "suggestion"), [
    ("  series: [region]", "  serie: [region]", "input.serie", "series"),
    ("      degree: 2", "      degre: 2", "drivers.numeric[1].degre", "degree"),
    ("      reference: North", "      referense: North", "drivers.categorical[0].referense", "reference"),
    ("  categorical:", "  categorial:", "drivers.categorial", "categorical"),
    ("models: [ols]", "modles: [ols]", "modles", "models"),
])
def test_unknown_key_names_its_line_and_the_nearest_key(write, old, new, key, suggestion):
    text = edit(old, new)
    path = write(text)
    error = refused(path)
    line = line_of(text, new.strip())
    assert str(error) == f"{path}:{line}: {key}: unknown key; did you mean '{suggestion}'?"


@pytest.mark.parametrize(("old", "new", "key", "suggestion"), [
    ("  date_column: month", "  date_colum: month", "input.date_colum", "date_column"),
    ("target: bags_sold", "targt: bags_sold", "targt", "target"),
])
def test_misspelt_required_key_is_suggested_not_reported_missing(write, old, new, key, suggestion):
    text = edit(old, new)
    path = write(text)
    error = refused(path)
    line = line_of(text, new.strip())
    assert str(error) == f"{path}:{line}: {key}: unknown key; did you mean '{suggestion}'?"


def test_unknown_key_inside_validation_is_suggested(write):
    text = edit("  last_periods: 12", "  last_period: 12")
    path = write(text)
    error = refused(path)
    assert str(error) == (f"{path}:{line_of(text, 'last_period:')}: validation.last_period: "
                          "unknown key; did you mean 'last_periods'?")


def test_unknown_key_without_a_near_match_lists_the_valid_keys(write):
    text = BASE + "zzzzz: 1\n"
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "zzzzz"), "zzzzz")
    assert "unknown key" in str(error)
    for valid in ("target", "drivers", "validation"):
        assert valid in str(error)


# ---------------------------------------------------------------- wrong values

@pytest.mark.parametrize(("old", "new", "key", "shown"), [
    ("      degree: 2", "      degree: two", "drivers.numeric[1].degree", "'two'"),
    ("models: [ols]", "intercept: maybe\nmodels: [ols]", "intercept", "'maybe'"),
    ("      degree: 2", "      degree: 11", "drivers.numeric[1].degree", "10"),
])
def test_wrong_type_or_range_names_line_key_and_value(write, old, new, key, shown):
    text = edit(old, new)
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, new.splitlines()[0].strip()), key)
    assert shown in error.message


def test_wrong_type_of_last_periods_names_the_file_and_the_value(write):
    path = write(edit("last_periods: 12", "last_periods: x"))
    error = refused(path)
    assert str(error).startswith(f"{path}:")
    assert "last_periods" in str(error) and "(got 'x')" in str(error)


@pytest.mark.parametrize("value", ["x", "0"])
def test_wrong_last_periods_points_at_its_own_line_and_key(write, value):
    text = edit("last_periods: 12", f"last_periods: {value}")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "last_periods:"), "validation.last_periods")


def test_boolean_is_not_a_number_of_months(write):
    text = edit("last_periods: 12", "last_periods: true")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "last_periods:"), "validation.last_periods")
    assert "(got True)" in error.message


def test_missing_required_key_is_named(write):
    text = edit("target: bags_sold\n", "")
    path = write(text)
    error = refused(path)
    # A top-level key that is absent has no line of its own: the document's first line stands in.
    assert_placed(error, path, 1, "target")
    assert "required" in error.message and "missing" in error.message


def test_missing_nested_key_points_at_its_section(write):
    text = edit("  date_column: month\n", "")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "input:"), "input.date_column")
    assert "required" in error.message


@pytest.mark.parametrize(("text_edit", "line_needle", "key"), [
    (("models: [ols]", "models: [ols, crystal_ball]"), "models:", "models[1]"),
    (("models: [ols]", "models:\n  - ols\n  - crystal_ball"), "- crystal_ball", "models[1]"),
])
def test_unknown_model_name(write, text_edit, line_needle, key):
    text = edit(*text_edit)
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, line_needle))
    assert error.key is not None and error.key.startswith(key)
    assert "'crystal_ball'" in error.message and "'ols'" in error.message


def test_model_listed_twice(write):
    text = edit("models: [ols]", "models: [ols, ols]")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "models:"), "models")
    assert "twice" in error.message


def test_unknown_validation_method(write):
    text = edit("method: holdout", "method: tea_leaves")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "method:"), "validation.method")
    assert "'tea_leaves'" in error.message and "holdout" in error.message


def test_validation_without_method(write):
    text = edit("  method: holdout\n", "")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "validation:"), "validation")
    assert "method" in error.message


# ---------------------------------------------------------------- files that are not a spec mapping

def test_unclosed_bracket(write):
    text = edit("series: [region]", "series: [region")
    path = write(text)
    error = refused(path)
    # PyYAML notices the missing ']' where the next key starts, the line after the bracket.
    opened = line_of(text, "series: [region")
    assert error.line in (opened, opened + 1)
    assert str(error).startswith(f"{path}:{error.line}: ")
    assert "]" in error.message


def test_unclosed_bracket_on_the_last_line_points_inside_the_file(write):
    text = edit("output:\n  folder: out\n", "output: {folder: out\n")
    path = write(text)
    error = refused(path)
    assert error.line is not None and 1 <= error.line <= len(text.splitlines())


def test_tab_indented_spec(write):
    text = edit("  date_column: month", "\tdate_column: month")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "\tdate_column"))


@pytest.mark.parametrize("text", ["", "\n\n", "# only a comment\n"])
def test_empty_spec(write, text):
    path = write(text)
    error = refused(path)
    assert_placed(error, path, 1)
    assert "empty" in error.message


@pytest.mark.parametrize("text", ["- name: demo\n- target: x\n", "just words\n"])
def test_spec_that_is_not_a_mapping(write, text):
    path = write(text)
    error = refused(path)
    assert_placed(error, path, 1)
    assert "mapping" in error.message


def test_top_level_key_given_twice_points_at_the_second(write):
    text = BASE + "target: other\n"
    path = write(text)
    error = refused(path)
    assert str(error) == f"{path}:{line_of(text, 'target:', 2)}: target: this key is given twice"


def test_nested_key_given_twice_points_at_the_second(write):
    text = edit("  date_column: month\n", "  date_column: month\n  date_column: day\n")
    path = write(text)
    error = refused(path)
    assert str(error) == (f"{path}:{line_of(text, 'date_column:', 2)}: input.date_column: "
                          "this key is given twice")


def test_yaml_tag_that_builds_a_python_object_is_refused_and_not_run(write, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    marker = tmp_path / "marker"
    text = BASE + f"description: !!python/object/apply:os.system ['touch {marker}']\n"
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "!!python"))
    assert "not allowed" in error.message
    assert not marker.exists(), "the tag was executed"


def test_non_string_key_points_at_its_line(write):
    text = BASE + "1: x\n"
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "1: x"))
    assert "[1]" not in str(error)


# ---------------------------------------------------------------- the files the spec names

def test_spec_path_that_does_not_exist(tmp_path):
    path = tmp_path / "nope.yaml"
    error = refused(path)
    assert str(error) == f"{path}: no such spec file"
    assert error.file == str(path) and error.line is None


def test_spec_path_that_is_a_folder(tmp_path):
    error = refused(tmp_path)
    assert str(error).startswith(f"{tmp_path}: ")
    assert "folder" in error.message


def test_spec_that_is_not_utf8(tmp_path):
    path = tmp_path / "latin1.yaml"
    path.write_bytes(edit("name: demo", "name: d\xe9mo").encode("latin-1"))
    error = refused(path)
    assert str(error).startswith(f"{path}: ")
    assert "UTF-8" in error.message


def test_data_file_that_does_not_exist(write, tmp_path):
    text = edit("file: data.csv", "file: missing.csv")
    path = write(text)
    error = refused(path)
    assert str(error) == (f"{path}:{line_of(text, 'file:')}: input.file: no such data file: "
                          f"{(tmp_path / 'missing.csv').resolve()}")


def test_data_file_that_is_a_folder(write, tmp_path):
    (tmp_path / "datadir").mkdir()
    text = edit("file: data.csv", "file: datadir")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "file:"), "input.file")
    assert "folder" in error.message and str((tmp_path / "datadir").resolve()) in error.message


def test_output_folder_that_is_a_file(write, tmp_path):
    text = edit("folder: out", "folder: data.csv")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "folder:"), "output.folder")
    assert "not a folder" in error.message


# ---------------------------------------------------------------- a column given two roles

@pytest.mark.parametrize(("added", "role"), [
    ("bags_sold", "the target"),
    ("shelf_price", "a driver"),
    ("month", "the date column"),
])
def test_numeric_driver_that_already_has_a_role(write, added, role):
    text = edit("    - shelf_price\n", f"    - shelf_price\n    - {added}\n")
    path = write(text)
    error = refused(path)
    line = line_of(text, f"- {added}", 2 if added == "shelf_price" else 1)
    assert str(error) == f"{path}:{line}: drivers.numeric[1].column: column '{added}' is already {role}"


def test_categorical_driver_that_is_the_target(write):
    text = edit("    - column: region\n", "    - column: bags_sold\n")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "- column: bags_sold"), "drivers.categorical[0].column")
    assert "the target" in error.message


def test_series_column_that_is_the_target(write):
    text = edit("series: [region]", "series: [bags_sold]")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "series:"), "input.series[0]")
    assert "the target" in error.message


def test_series_column_may_also_be_a_categorical_driver(write):
    spec = load_spec(write(BASE))
    assert spec.input.series == ["region"]
    assert [d.column for d in spec.drivers.categorical] == ["region"]


def test_no_intercept_and_no_drivers(write):
    text = edit("drivers:\n  numeric:\n    - shelf_price\n    - column: mean_temp_c\n      degree: 2\n"
                "  categorical:\n    - column: region\n      reference: North\n",
                "intercept: false\n")
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "intercept:"), "intercept")


# ---------------------------------------------------------------- where the spec came from

def test_origin_is_carried_by_copies_but_never_dumped(write):
    path = write(BASE)
    spec = load_spec(path)
    assert spec.source == path
    assert spec.origin.written_models == ("ols",)
    assert "origin" not in spec.model_dump() and "origin" not in spec.model_dump(mode="json")
    assert '"origin"' not in spec.model_dump_json()
    copied = spec.model_copy(update={"target": "other"})
    assert copied.source == path
    error = copied.error(("validation", "last_periods"), "too many")
    assert str(error) == f"{path}:{line_of(BASE, 'last_periods:')}: validation.last_periods: too many"


def test_a_spec_made_in_code_has_no_origin_and_errors_are_unplaced():
    spec = Spec.model_validate({"name": "x", "input": {"file": "d.csv", "date_column": "month"},
                                "target": "y", "validation": {"method": "holdout", "last_periods": 2},
                                "output": {"folder": "out"}})
    assert spec.origin is None and spec.source is None
    assert str(spec.error(("target",), "wrong")) == "target: wrong"


@pytest.mark.parametrize("value", ["null", "{path: elsewhere.yaml}", "here"])
def test_origin_cannot_be_written_in_the_spec_file(write, value):
    text = BASE + f"origin: {value}\n"
    path = write(text)
    error = refused(path)
    assert_placed(error, path, line_of(text, "origin:"), "origin")
    assert error.message.startswith("unknown key") and "'origin'" not in error.message


# ---------------------------------------------------------------- every problem at once

def every_problem(path: Path) -> list[str]:
    """Return the line of each problem loading the spec reports, after checking the first is str()."""
    error = refused(path)
    lines = error.lines()
    assert lines[0] == str(error) and len(error.problems) == len(lines)
    return lines


def test_independent_problems_are_all_reported_in_file_order(write):
    text = edit("name: demo\n", "name: de/mo\n")
    text = edit("  date_column: month\n", "  date_column: month\n  gaps: sometimes\n", text)
    text = edit("      degree: 2\n", "      degree: 11\n", text)
    text = edit("  last_periods: 12\n", "  last_periods: 0\n", text)
    path = write(text)
    lines = every_problem(path)
    assert [line.split(": ", 2)[:2] for line in lines] == [
        [f"{path}:{line_of(text, 'name:')}", "name"],
        [f"{path}:{line_of(text, 'gaps:')}", "input.gaps"],
        [f"{path}:{line_of(text, 'degree:')}", "drivers.numeric[1].degree"],
        [f"{path}:{line_of(text, 'last_periods:')}", "validation.last_periods"],
    ]
    assert "a name, not a path" in lines[0] and "(got 'sometimes')" in lines[1]


def test_an_unknown_key_comes_before_the_missing_key_it_caused(write):
    # targt (unknown) makes target missing; the missing key has no line of its own (line 1),
    # yet is reported after the unknown key; the later bad value keeps its place in file order.
    text = edit("target: bags_sold\n", "targt: bags_sold\n")
    text = edit("  last_periods: 12\n", "  last_periods: 0\n", text)
    path = write(text)
    lines = every_problem(path)
    assert lines == [
        f"{path}:{line_of(text, 'targt:')}: targt: unknown key; did you mean 'target'?",
        f"{path}:1: target: this key is required but missing",
        f"{path}:{line_of(text, 'last_periods:')}: validation.last_periods: "
        "must be greater than or equal to 1",
    ]


def test_a_missing_key_without_an_unknown_one_beside_it_keeps_its_place(write):
    text = edit("  date_column: month\n", "").replace("target: bags_sold\n", "targt: bags_sold\n")
    path = write(text)
    lines = every_problem(path)
    assert [line.split(": ", 2)[1] for line in lines] == ["input.date_column", "targt", "target"]


def test_a_value_of_no_member_of_a_union_is_one_problem(write):
    text = edit("  date_column: month\n", "  date_column: month\n  sheet: [1]\n")
    path = write(text)
    lines = every_problem(path)
    assert len(lines) == 1 and ": input.sheet: " in lines[0], lines


def test_rule_problems_are_collected_across_models_scenarios_and_column_rules(write):
    text = edit("  method: holdout\n  last_periods: 12\n", "  method: kfold\n")
    text = edit("models: [ols]\n", "models: [last_value, ols, drift]\nselect_by: mase\n", text)
    text += ("columns:\n  bags_sold:\n    type: number\n    min: 5\n    max: 1\n"
             "scenarios:\n  - name: cheaper\n    changes:\n      - {column: bags_sold, add: 1}\n")
    path = write(text)
    lines = every_problem(path)
    assert lines == [
        f"{path}:{line_of(text, 'models:')}: models[0]: 'last_value' needs months in time order; "
        "validation method 'kfold' has none",
        f"{path}:{line_of(text, 'models:')}: models[2]: 'drift' needs months in time order; "
        "validation method 'kfold' has none",
        f"{path}:{line_of(text, 'select_by:')}: select_by: MASE needs months in time order; choose "
        "another metric for validation method 'kfold'",
        f"{path}:{line_of(text, 'min: 5')}: columns.bags_sold.min: min 5 is above max 1",
        f"{path}:{line_of(text, 'column: bags_sold, add')}: scenarios[0].changes[0].column: "
        "'bags_sold' is not a driver, so changing it changes no forecast",
    ]


def test_each_driver_with_a_taken_role_is_reported(write):
    text = edit("    - shelf_price\n", "    - shelf_price\n    - bags_sold\n    - month\n")
    path = write(text)
    lines = every_problem(path)
    assert lines == [
        f"{path}:{line_of(text, '- bags_sold')}: drivers.numeric[1].column: column 'bags_sold' is "
        "already the target",
        f"{path}:{line_of(text, '- month')}: drivers.numeric[2].column: column 'month' is already "
        "the date column",
    ]


def test_one_problem_per_item_where_later_ones_follow_from_the_first(write):
    # An ordinal driver without order: its group_below is not judged as well.
    text = edit("      reference: North\n", "      encoding: ordinal\n      group_below: 3\n")
    text = edit("      degree: 2\n", "      degree: 2\n  interactions: [[shelf_price, nope], "
                "[shelf_price, shelf_price]]\n", text)
    path = write(text)
    lines = every_problem(path)
    assert [line.split(": ", 2)[1] for line in lines] == [
        "drivers.interactions[0][1]", "drivers.interactions[1]", "drivers.categorical[0].encoding"]


def test_a_missing_data_file_is_reported_with_the_rule_problems(write, tmp_path):
    text = edit("file: data.csv", "file: absent.csv")
    text = edit("models: [ols]\n", "models: [ols]\nintercept: false\n", text)
    text = text.replace("drivers:\n  numeric:\n    - shelf_price\n    - column: mean_temp_c\n"
                        "      degree: 2\n  categorical:\n    - column: region\n"
                        "      reference: North\n", "")
    path = write(text)
    lines = every_problem(path)
    assert lines == [
        f"{path}:{line_of(text, 'file:')}: input.file: no such data file: {tmp_path / 'absent.csv'}",
        f"{path}:{line_of(text, 'intercept:')}: intercept: a model without an intercept needs at "
        "least one driver",
    ]


def test_several_problems_pickle_with_all_of_them(write):
    import pickle
    text = edit("target: bags_sold\n", "targt: bags_sold\n")
    error = refused(write(text))
    again = pickle.loads(pickle.dumps(error))
    assert isinstance(again, SpecError) and again.lines() == error.lines() and str(again) == str(error)
