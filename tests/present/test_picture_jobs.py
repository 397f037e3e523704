"""The pages' pictures made and drawn as jobs (picture_jobs), shared with a forked copy of the
process where the machine allows: the pages must be the same to the byte as drawn in one."""

from __future__ import annotations

import pytest
from conftest import DEMO_SPEC

import pipeline
from pipeline.core import forked
from pipeline.present.pages import render_pages
from pipeline.present.picture_jobs import PictureJobs


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory):
    return pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs")).folder.path


@pytest.mark.forks
def test_the_pages_are_the_same_drawn_in_one_process_or_two(demo_folder, monkeypatch):
    together = render_pages(demo_folder)
    monkeypatch.setenv("CASTLINE_ONE_PROCESS", "1")
    alone = render_pages(demo_folder)
    assert together == alone
    assert together["report.html"] == (demo_folder / "report.html").read_text(encoding="utf-8")
    assert together["summary.md"] == (demo_folder / "summary.md").read_text(encoding="utf-8")
    assert together["report.html"].count('src="data:image/') >= 10


@pytest.mark.forks
def test_every_picture_of_the_report_and_the_summary_are_made_in_one_batch(demo_folder, monkeypatch):
    calls = []
    original = forked.map_shared

    def counted(function, items, weights=None):
        calls.append(len(items))
        return original(function, items, weights)

    monkeypatch.setattr("pipeline.present.picture_jobs.map_shared", counted)
    render_pages(demo_folder)
    assert len(calls) == 1 and calls[0] >= 11   # the report's pictures and the summary, as jobs


def test_picture_jobs_replace_their_stand_ins_as_deep_as_they_go():
    jobs = PictureJobs()
    view = {"a": jobs.later(3, sum, [1, 2]), "b": [jobs.later(1, max, 4, 9), ("x", jobs.later(2, str, 5))],
            "c": {"d": jobs.later(1, lambda: None)}, "e": 7}
    assert jobs.done(view) == {"a": 3, "b": [9, ("x", "5")], "c": {"d": None}, "e": 7}


def test_a_job_no_view_holds_is_returned_by_result():
    jobs = PictureJobs()
    aside, shown = jobs.later(1, sum, [2, 3]), jobs.later(1, min, 4, 1)
    assert jobs.done({"shown": shown}) == {"shown": 1}
    assert jobs.result(aside) == 5 and jobs.result(shown) == 1
