"""Key paths and the line each key is written on (pipeline/spec/keys.py).

The expected lines are read off the YAML texts below by hand (line 1 is the
first line of the text), and cross-checked against the start marks PyYAML's
yaml.compose gives each key node.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from pipeline.spec.keys import DuplicateKey, SpecOrigin, format_key_path, line_for, line_map

TEXT = """\
name: demo
input:
  file: data.csv
  series: [region, product]
models:
  - ols
  - kind: ridge
    penalties:
      - 0.1
      - 1.0
"""
#  1 name            2 input            3 input.file     4 input.series (items on line 4 too)
#  5 models          6 models[0]        7 models[1] and models[1].kind
#  8 models[1].penalties                9, 10 its two items


def lines_of(text: str) -> dict:
    return line_map(yaml.compose(text, Loader=yaml.SafeLoader))


def test_every_key_path_has_its_line():
    assert lines_of(TEXT) == {
        (): 1, ("name",): 1, ("input",): 2, ("input", "file"): 3, ("input", "series"): 4,
        ("input", "series", 0): 4, ("input", "series", 1): 4,
        ("models",): 5, ("models", 0): 6, ("models", 1): 7, ("models", 1, "kind"): 7,
        ("models", 1, "penalties"): 8, ("models", 1, "penalties", 0): 9, ("models", 1, "penalties", 1): 10,
    }


def test_key_lines_are_the_key_nodes_start_marks():
    root = yaml.compose(TEXT, Loader=yaml.SafeLoader)
    lines = line_map(root)
    for key_node, value_node in root.value:
        assert lines[(key_node.value,)] == key_node.start_mark.line + 1
        if isinstance(value_node, yaml.MappingNode):
            for inner_key, _ in value_node.value:
                assert lines[(key_node.value, inner_key.value)] == inner_key.start_mark.line + 1


def test_a_key_given_twice_is_placed_at_the_second():
    text = "name: a\ninput:\n  file: x\n  file: y\n"
    with pytest.raises(DuplicateKey) as info:
        lines_of(text)
    assert (info.value.path, info.value.line) == (("input", "file"), 4)
    assert info.value.message == "this key is given twice"


def test_a_key_that_is_a_number_is_refused_at_its_line():
    with pytest.raises(DuplicateKey) as info:
        lines_of("name: a\ncolumns:\n  12: {type: number}\n")
    assert (info.value.path, info.value.line) == (("columns", "12"), 3)
    assert "must be a name" in info.value.message


@pytest.mark.parametrize(("path", "text"), [
    ((), ""),
    (("name",), "name"),
    (("validation", "last_periods"), "validation.last_periods"),
    (("models", 2), "models[2]"),
    (("scenarios", 0, "changes", 1, "column"), "scenarios[0].changes[1].column"),
    (("columns", "unit price"), "columns.unit price"),
])
def test_format_key_path(path, text):
    assert format_key_path(path) == text


def test_a_key_not_written_is_placed_at_its_nearest_written_ancestor():
    lines = lines_of(TEXT)
    assert line_for(lines, ("models", 1, "l1_share")) == 7     # defaulted: at models[1]
    assert line_for(lines, ("validation", "method")) == 1      # no validation at all: the document
    origin = SpecOrigin.read(Path("spec.yaml"), lines, ["ols", "ridge"])
    assert origin.line(("input", "series", 1)) == 4
    assert origin.line(("input", "gaps")) == 2
