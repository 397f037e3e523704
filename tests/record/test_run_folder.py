"""pipeline/record/run_folder.py: run ids, and pages written whole into a run folder.

References: the id's form is the README's ("run-<UTC time>-<random>", folders sort by time
and never collide); Python's own sorting and datetime arithmetic; the file system read back.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime, timedelta

import pytest

from pipeline.core.errors import UserError
from pipeline.record.run_folder import new_run_id, write_page

ID = re.compile(r"run-(\d{8}T\d{12})Z-([0-9a-f]{6})")


def test_a_run_id_is_the_utc_time_to_the_microsecond_and_a_random_tail():
    moment = datetime(2026, 3, 4, 5, 6, 7, 890, tzinfo=UTC)
    found = ID.fullmatch(new_run_id(moment))
    assert found and found.group(1) == "20260304T050607000890"


def test_run_ids_sort_by_time():
    start = datetime(2025, 12, 31, 23, 59, 59, 999_990, tzinfo=UTC)
    # steps across a microsecond, a second, a year's end, and a decade
    moments = [start + timedelta(microseconds=s) for s in (0, 1, 9, 10, 11, 1_000_000)] + \
              [start + timedelta(days=3650)]
    ids = [new_run_id(m) for m in moments]
    assert sorted(ids) == ids


def test_run_ids_never_collide_over_many_calls():
    ids = [new_run_id() for _ in range(5000)]
    assert len(set(ids)) == len(ids)
    times = [ID.fullmatch(i).group(1) for i in ids]
    assert times == sorted(times)                 # made one after another: in time order


def test_a_page_is_written_whole_and_replaces_the_old_one(tmp_path):
    (tmp_path / "summary.md").write_text("old summary\n", encoding="utf-8")
    path = write_page(tmp_path, "summary.md", "# new summary\nwith ünïcode\n")
    assert path == tmp_path / "summary.md"
    assert path.read_text(encoding="utf-8") == "# new summary\nwith ünïcode\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["summary.md"]   # no partial file left


UNWRITABLE = "half a page, then a character UTF-8 cannot hold: \ud800"   # a lone surrogate


def test_a_failed_write_leaves_the_old_page_as_it_was(tmp_path):
    (tmp_path / "report.html").write_text("<p>old</p>", encoding="utf-8")
    with pytest.raises(UnicodeEncodeError):
        write_page(tmp_path, "report.html", UNWRITABLE)
    assert (tmp_path / "report.html").read_text(encoding="utf-8") == "<p>old</p>"


def test_a_failed_write_leaves_no_partial_file(tmp_path):
    (tmp_path / "report.html").write_text("<p>old</p>", encoding="utf-8")
    with pytest.raises(UnicodeEncodeError):
        write_page(tmp_path, "report.html", UNWRITABLE)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html"]


def test_a_page_that_cannot_be_written_is_one_line_naming_it(tmp_path):
    # A folder standing where the page goes (or no permission, or a full disk) is the user's
    # to mend: one line naming the page, the folder otherwise left as it was.
    (tmp_path / "report.html").mkdir()
    with pytest.raises(UserError) as refused:
        write_page(tmp_path, "report.html", "<p>new</p>")
    assert str(refused.value).startswith(f"{tmp_path / 'report.html'}: cannot write the page")
    assert len(str(refused.value).splitlines()) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html"]
