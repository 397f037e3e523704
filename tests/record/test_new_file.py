"""pipeline/record/new_file.py: a file written once, never over anything already at its path.

The reference is the file system itself, read back after each attempt.
"""

from __future__ import annotations

import pytest

from pipeline.core.errors import UserError
from pipeline.record.new_file import write_new_file

REFUSAL = "already exists; castline init never overwrites a file"


def test_a_new_file_is_written_and_its_path_returned(tmp_path):
    target = tmp_path / "sales.spec.yaml"
    assert write_new_file(target, "name: sales\n", what="spec", refusal=REFUSAL) == target
    assert target.read_text(encoding="utf-8") == "name: sales\n"


def test_an_existing_file_is_refused_with_one_line_naming_it_and_left_alone(tmp_path):
    target = tmp_path / "sales.spec.yaml"
    target.write_text("mine\n", encoding="utf-8")
    with pytest.raises(UserError) as error:
        write_new_file(target, "theirs\n", what="spec", refusal=REFUSAL, hint=" (choose another name)")
    assert str(error.value) == f"{target}: {REFUSAL} (choose another name)"
    assert "\n" not in str(error.value)
    assert target.read_text(encoding="utf-8") == "mine\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sales.spec.yaml"]


def test_a_folder_at_the_path_is_refused(tmp_path):
    with pytest.raises(UserError, match="never overwrites"):
        write_new_file(tmp_path, "text", what="spec", refusal=REFUSAL)


def test_a_dangling_link_is_refused_and_nothing_is_written_through_it(tmp_path):
    aim = tmp_path / "elsewhere.yaml"
    target = tmp_path / "sales.spec.yaml"
    target.symlink_to(aim)               # exists() is False for it; opening with "x" refuses it
    with pytest.raises(UserError) as error:
        write_new_file(target, "text", what="spec", refusal=REFUSAL)
    assert str(error.value) == f"{target}: {REFUSAL}"
    assert not aim.exists()


def test_a_file_that_cannot_be_written_is_one_line_and_nothing_is_left(tmp_path):
    target = tmp_path / "no such folder" / "sales.spec.yaml"
    with pytest.raises(UserError, match="cannot write the spec") as error:
        write_new_file(target, "text", what="spec", refusal=REFUSAL)
    assert str(error.value).startswith(f"{target}: ") and "\n" not in str(error.value)
    assert list(tmp_path.iterdir()) == []
