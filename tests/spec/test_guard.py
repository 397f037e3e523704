"""The bounds on a spec's YAML (pipeline/spec/guard.py): size, depth, values counted through
aliases, long numbers and dates off the calendar, each refused before a node is composed.

The specs are invented; the limits are the module's own constants, so each boundary is
tested on both sides of it.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from conftest import TEST_DATA

from pipeline import SpecError, load_spec
from pipeline.spec.guard import MOST_BYTES, MOST_DEPTH, MOST_DIGITS, MOST_VALUES, check_shape

DATA = TEST_DATA / "bad_specs" / "base.csv"


def spec_text(folder: Path, extra: str = "", numeric: str = "[x1, x2]") -> str:
    return (f"name: guarded\ninput: {{file: '{DATA}', date_column: month}}\ntarget: y\n"
            f"drivers:\n  numeric: {numeric}\nvalidation: {{method: holdout, last_periods: 6}}\n"
            f"output: {{folder: '{folder / 'reports'}'}}\n{extra}")


def write(folder: Path, text: str) -> Path:
    path = folder / "spec.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def refused(text: str) -> SpecError:
    with pytest.raises(SpecError) as caught:
        check_shape(text, Path("spec.yaml"))
    return caught.value


def test_an_anchor_used_a_few_times_is_still_a_spec(tmp_path):
    text = spec_text(tmp_path, numeric="&drivers [x1, x2]") + "columns_of_note: *drivers\n"
    check_shape(text, tmp_path / "spec.yaml")   # the walk lets it through
    with pytest.raises(SpecError, match="columns_of_note: unknown key"):   # the schema judges the key
        load_spec(write(tmp_path, text))


def test_values_are_counted_through_aliases_exactly_at_the_limit():
    # The top mapping, its two keys and list b count 4; the anchored list of n scalars stands
    # for n + 1 values, once where it is written and again at each of its k aliases.
    n = 999
    k = (MOST_VALUES - 4) // (n + 1) - 1
    assert 4 + (n + 1) * (k + 1) <= MOST_VALUES < 4 + (n + 1) * (k + 2)
    anchored = "a: &a [" + ", ".join(["1"] * n) + "]\n"
    check_shape(anchored + "b: [" + ", ".join(["*a"] * k) + "]\n", Path("spec.yaml"))
    error = refused(anchored + "b: [" + ", ".join(["*a"] * (k + 1)) + "]\n")
    assert error.line == 2 and error.key == f"b[{k}]" and f"{MOST_VALUES:,} values" in error.message


def test_ten_levels_of_aliases_are_refused_at_the_level_that_passes_the_limit():
    text = "l0: &l0 [1, 1, 1, 1, 1, 1, 1, 1, 1, 1]\n" + "".join(
        f"l{i}: &l{i} [" + ", ".join([f"*l{i - 1}"] * 10) + "]\n" for i in range(1, 10))
    error = refused(text)
    assert error.line == 5 and error.key.startswith("l4[")


def test_merge_keys_count_what_they_merge():
    text = "b0: &b0 {k0: 1, k1: 1, k2: 1, k3: 1, k4: 1, k5: 1, k6: 1, k7: 1, k8: 1, k9: 1}\n" + "".join(
        f"b{i}: &b{i} {{<<: [" + ", ".join([f"*b{i - 1}"] * 10) + "]}\n" for i in range(1, 10))
    error = refused(text)
    assert error.line == 5 and error.key.startswith("b4.<<[")


@pytest.mark.parametrize("text, key", [("a: &a [1, *a]\n", "a[1]"), ("a: &a {k: {j: *a}}\n", "a.k.j"),
                                       ("a: &a {<<: *a}\n", "a.<<")])
def test_an_alias_inside_its_own_anchor_is_refused(text, key):
    # Composed, such a value holds itself: every walk over it (the line map) would never end.
    error = refused("x: 1\n" + text)
    assert error.line == 2 and error.key == key and "inside its own anchor" in error.message


@pytest.mark.parametrize("opening, closing", [("[", "]"), ("{a: ", "}")])
def test_flow_nesting_at_the_limit_passes_and_one_deeper_is_refused(opening, closing):
    def nested(levels: int) -> str:   # the top mapping is the first level
        return "k: " + opening * (levels - 1) + "x" + closing * (levels - 1) + "\n"
    check_shape(nested(MOST_DEPTH), Path("spec.yaml"))
    error = refused(nested(MOST_DEPTH + 1))
    assert error.line == 1 and "nested more than" in error.message


def test_a_flow_list_of_100000_levels_is_refused_without_recursion(tmp_path):
    text = spec_text(tmp_path, numeric="[" * 100_000 + "x1" + "]" * 100_000)
    with pytest.raises(SpecError, match="nested more than 32 levels") as caught:
        load_spec(write(tmp_path, text))
    assert caught.value.line == 5 and caught.value.key.startswith("drivers.numeric[0][0]")


def test_a_block_mapping_of_1000_levels_is_refused_at_the_first_line_too_deep(tmp_path):
    block = "".join(" " * i + f"k{i}:\n" for i in range(1000)) + " " * 1000 + "end: 1\n"
    with pytest.raises(SpecError, match="nested more than") as caught:
        load_spec(write(tmp_path, spec_text(tmp_path) + block))
    # The spec's 8 lines come first; k0 on line 9 opens the second level, k31 the 33rd.
    assert caught.value.line == 9 + MOST_DEPTH - 1


def test_an_alias_that_carries_nesting_is_counted_at_its_depth():
    anchored = "a: &a " + "[" * 20 + "x" + "]" * 20 + "\n"
    check_shape(anchored + "b: " + "[" * 10 + "*a" + "]" * 10 + "\n", Path("spec.yaml"))   # 31 levels
    error = refused(anchored + "b: " + "[" * 12 + "*a" + "]" * 12 + "\n")                  # 33 levels
    assert error.line == 2


def test_a_spec_over_the_size_limit_is_refused_before_it_is_parsed(tmp_path):
    text = spec_text(tmp_path, extra="description: ")
    path = write(tmp_path, text + "x" * (MOST_BYTES - len(text.encode()) + 1))
    with pytest.raises(SpecError, match="more than 1,000,000 bytes"):
        load_spec(path)


def test_a_spec_at_the_size_limit_is_read(tmp_path):
    text = spec_text(tmp_path, extra="description: ")
    path = write(tmp_path, text + "x" * (MOST_BYTES - len(text.encode())))
    assert len(load_spec(path).description) > MOST_BYTES - 1000


def test_a_number_is_refused_past_its_length_but_a_quoted_one_is_text():
    check_shape("a: " + "9" * MOST_DIGITS + "\n", Path("spec.yaml"))
    error = refused("a: {b: [" + "9" * (MOST_DIGITS + 1) + "]}\n")
    assert error.key == "a.b[0]" and f"{MOST_DIGITS + 1} digits" in error.message
    check_shape("a: '" + "9" * 5000 + "'\n", Path("spec.yaml"))


@pytest.mark.parametrize("written", ["2025-02-30", "2025-04-31", "2025-13-01", "2023-02-29",
                                     "2025-01-00", "2025-06-31 10:00:00"])
def test_a_date_off_the_calendar_is_refused_at_its_key(written):
    error = refused(f"x: 1\ncalendar:\n  closures: [2024-02-29, {written}]\n")
    assert error.line == 3 and error.key == "calendar.closures[1]" and "not a date" in error.message


def test_a_key_is_judged_like_a_value():
    # The YAML reader builds keys as it builds values: a date key off the calendar would crash it.
    error = refused("x: 1\nclosures:\n  2025-02-30: closed\n")
    assert error.line == 3 and error.key == "closures" and "not a date" in error.message


def test_the_walk_leaves_malformed_yaml_to_the_reader(tmp_path):
    check_shape("a: [1, 2\n", Path("spec.yaml"))   # no error of its own
    with pytest.raises(SpecError, match="a bracket or brace is not closed"):
        load_spec(write(tmp_path, spec_text(tmp_path, numeric="[x1, x2")))


@pytest.mark.skipif(not Path("/dev/zero").exists(), reason="a device without end is needed")
def test_a_file_without_end_is_read_only_up_to_the_limit():
    with pytest.raises(SpecError, match="more than 1,000,000 bytes"):
        load_spec("/dev/zero")
