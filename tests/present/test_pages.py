"""pipeline/present/pages.py: the pages of a run folder rendered from its files alone.

README: "castline report RUN_FOLDER rebuilds a run's report.html and summary.md from its files,
without refitting". The reference is the pages the run itself wrote; the run is the tiny
invented one (plumbing only).
"""

from __future__ import annotations

import shutil

import pytest

from pipeline.core.errors import UserError
from pipeline.present.pages import PAGES, render_pages


def test_the_pages_are_rendered_again_exactly_as_the_run_wrote_them(tiny_runs):
    for result, _ in tiny_runs[2]:
        pages = render_pages(result.folder.path)
        assert set(pages) == set(PAGES)
        for name, text in pages.items():
            assert text == (result.folder.path / name).read_text(encoding="utf-8"), name


def test_the_pages_need_nothing_but_the_folder(tiny_runs, tmp_path):
    runs = tiny_runs[2]
    moved = tmp_path / "moved"
    shutil.copytree(runs[1][0].folder.path, moved)        # elsewhere, away from its ledger and data
    pages = render_pages(moved)
    assert pages["summary.md"] == (runs[1][0].folder.path / "summary.md").read_text(encoding="utf-8")


def test_an_incomplete_folder_is_refused(tmp_path):
    (tmp_path / "metrics.json").write_text("{}", encoding="utf-8")
    with pytest.raises(UserError, match="not a complete castline run folder"):
        render_pages(tmp_path)
