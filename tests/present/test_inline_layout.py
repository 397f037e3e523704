"""How a picture is laid out and drawn (inline.lay_out): room for what each axes draws outside
itself, measured from the tick labels' text, and ticks fixed where the locator puts them.

References: matplotlib itself, its own tight bounding box of each axes (``Axes.get_tightbbox``,
what its ``tight_layout`` reserves room for) and its own locators, on the figures the report
draws for the demo (plumbing only: the demo's numbers are no reference).
"""

from __future__ import annotations

import matplotlib
import matplotlib.dates as mdates
import numpy as np
import pandas as pd
import pytest
from conftest import DEMO_SPEC, kept_figures

import pipeline
from pipeline.present import inline, plots
from pipeline.present.report import render_report


@pytest.fixture(scope="module")
def demo_figures(tmp_path_factory):
    """Every figure the demo's report draws, as it was drawn (laid out, ticks fixed)."""
    folder = pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("layout")).folder.path
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("CASTLINE_ONE_PROCESS", "1")
        figures = kept_figures(patch)
        render_report(folder)
    return figures


def _drawn_texts(figure) -> list:
    """Return every text the figure draws: the labels of the ticks drawn, and the other texts."""
    figure.draw_without_rendering()
    ticks = {id(text) for axes in figure.axes for axis in axes._axis_map.values()
             for tick in axis.majorTicks + axis.minorTicks for text in (tick.label1, tick.label2)}
    drawn = [tick.label1 for axes in figure.axes if axes.axison for axis in axes._axis_map.values()
             if axis.get_visible() for tick in axis._update_ticks() if tick.label1.get_visible()]
    others = [text for text in figure.findobj(matplotlib.text.Text) if id(text) not in ticks and text.get_visible()]
    return [text for text in drawn + others if text.get_text()]


def test_every_text_of_the_demo_report_s_pictures_lies_inside_its_figure(demo_figures):
    assert len(demo_figures) >= 10
    for figure in demo_figures:
        renderer = figure.canvas.get_renderer()
        width, height = figure.bbox.width, figure.bbox.height
        for text in _drawn_texts(figure):
            x0, y0, x1, y1 = text.get_window_extent(renderer).extents
            assert -0.5 <= x0 and x1 <= width + 0.5 and -0.5 <= y0 and y1 <= height + 0.5, text.get_text()


def test_no_axis_label_overlaps_its_tick_labels(demo_figures):
    for figure in demo_figures:
        renderer = figure.canvas.get_renderer()
        figure.draw_without_rendering()
        for axes in figure.axes:
            for axis in axes._axis_map.values() if axes.axison else ():
                if not axis.label.get_text():
                    continue
                label = axis.label.get_window_extent(renderer)
                for tick in axis._update_ticks():
                    assert not label.overlaps(tick.label1.get_window_extent(renderer)), axis.label.get_text()


def test_the_room_each_axes_gets_is_matplotlib_s_own_tight_box_of_it(demo_figures):
    laid_out = [figure for figure in demo_figures if inline._simple_grid(figure)]
    assert len(laid_out) >= 10
    for figure in laid_out:
        renderer = inline._measuring(figure.dpi)[1]
        for axes in figure.axes:
            matplotlibs = axes.get_tightbbox(figure.canvas.get_renderer(), for_layout_only=True).extents
            np.testing.assert_allclose(inline._axes_box(axes, renderer, figure.dpi), matplotlibs, atol=0.5)


def test_the_ticks_drawn_are_those_the_locator_gives_at_the_axes_final_size():
    with matplotlib.rc_context(plots.STYLE):
        figure, axis = plots._subplots(figsize=(4, 2.3))
        months = pd.period_range("2021-01", periods=30, freq="M").to_timestamp()
        axis.plot(months, np.linspace(1500, 3700, 30))
        axis.set_title("a title")
        plots.date_axis(axis)
        inline.lay_out(figure)
        fixed = {name: list(getattr(axis, f"{name}axis").get_majorticklocs()) for name in "xy"}
        labels = [t.get_text() for t in axis.get_xticklabels()]
        # matplotlib's own locators at the size the layout gave the axes, the ticks in view
        locator = mdates.AutoDateLocator(minticks=3, maxticks=7)
        locator.intervald[mdates.MONTHLY] = [1, 2, 3, 4, 6, 12]
        locator.set_axis(axis.xaxis)
        scalar = matplotlib.ticker.AutoLocator()
        scalar.set_axis(axis.yaxis)
        for name, own in (("x", locator), ("y", scalar)):
            low, high = getattr(axis, f"get_{name}lim")()
            expected = [v for v in own() if low - 1e-9 * (high - low) <= v <= high + 1e-9 * (high - low)]
            np.testing.assert_allclose(fixed[name], expected)
    assert labels == [t for t in mdates.ConciseDateFormatter(locator).format_ticks(fixed["x"])]
    assert figure.get_layout_engine() is None


def test_a_legend_wider_than_its_axes_is_laid_out_once_and_the_layout_ends():
    with matplotlib.rc_context(plots.STYLE):
        figure, axis = plots._subplots(figsize=(4, 2))
        for k in range(6):
            axis.plot([0, 1], [k, k + 1], label=f"a rather long model name {k}")
        axis.legend(ncol=6, loc="lower left", bbox_to_anchor=(0, 1.0), fontsize=7)
        inline.lay_out(figure)
    params = figure.subplotpars
    assert 0 < params.left < params.right < 1 and 0 < params.bottom < params.top < 1
