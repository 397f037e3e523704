"""Pictures drawn together: the history page's made at once and drawn when the block ends
(inline.drawn_together), the report's made and drawn as jobs (picture_jobs), both shared with
a forked copy of the process where the machine allows. The bytes must be those of each
picture drawn on its own, in the style in force when it was made."""

from __future__ import annotations

import matplotlib
import matplotlib.figure
import pytest
from conftest import DEMO_SPEC
from matplotlib.backends.backend_agg import FigureCanvasAgg

import pipeline
from pipeline.core import forked
from pipeline.present import plots
from pipeline.present.inline import drawn_together, inline_picture
from pipeline.present.pages import render_pages
from pipeline.present.picture_jobs import PictureJobs


def _figure(title: str):
    figure = matplotlib.figure.Figure(figsize=(4, 3))
    FigureCanvasAgg(figure)
    axis = figure.subplots()
    axis.plot([1, 2, 3, 4], [3, 1, 4, 1], marker="o")
    axis.set_title(title)
    return figure


def test_a_picture_drawn_later_keeps_the_style_it_was_made_in():
    with matplotlib.rc_context(plots.STYLE):
        alone = inline_picture(_figure("styled"), "alt", "svg")
    plain = inline_picture(_figure("styled"), "alt", "png")   # (an SVG's ids are random unstyled)
    assert inline_picture(_figure("styled"), "alt", "svg").uri != alone.uri   # the style shows
    with drawn_together():
        with matplotlib.rc_context(plots.STYLE):
            later = inline_picture(_figure("styled"), "alt", "svg")
        unstyled = inline_picture(_figure("styled"), "alt", "png")
        assert later.uri == "" and later.alt == "alt"   # not drawn yet
    assert later.uri == alone.uri
    assert unstyled.uri == plain.uri


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory):
    return pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs")).folder.path


def test_the_pages_are_the_same_drawn_in_one_process_or_two(demo_folder, monkeypatch):
    together = render_pages(demo_folder)
    monkeypatch.setenv("CASTLINE_ONE_PROCESS", "1")
    alone = render_pages(demo_folder)
    assert together == alone
    assert together["report.html"] == (demo_folder / "report.html").read_text(encoding="utf-8")
    assert together["report.html"].count('src="data:image/') >= 10


def test_every_picture_of_the_report_is_drawn_in_one_batch(demo_folder, monkeypatch):
    calls = []
    original = forked.map_shared

    def counted(function, items, weights=None):
        calls.append(len(items))
        return original(function, items, weights)

    monkeypatch.setattr("pipeline.present.picture_jobs.map_shared", counted)
    render_pages(demo_folder)
    assert len(calls) == 1 and calls[0] >= 10   # the report's pictures, as jobs


def test_picture_jobs_replace_their_stand_ins_as_deep_as_they_go():
    jobs = PictureJobs()
    view = {"a": jobs.later(3, sum, [1, 2]), "b": [jobs.later(1, max, 4, 9), ("x", jobs.later(2, str, 5))],
            "c": {"d": jobs.later(1, lambda: None)}, "e": 7}
    assert jobs.done(view) == {"a": 3, "b": [9, ("x", "5")], "c": {"d": None}, "e": 7}
