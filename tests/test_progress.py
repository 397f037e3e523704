"""Progress bars: shown on a terminal, never in a log or a pipe."""

from __future__ import annotations

import io

from pipeline.core import progress
from pipeline.models.per_series import CHUNK_SERIES


class FakeTerminal(io.StringIO):
    """A text stream that says it is a terminal, as a console's standard error does."""

    def isatty(self) -> bool:
        return True


def test_a_stream_that_is_not_a_terminal_gets_nothing():
    stream = io.StringIO()
    with progress.showing(stream) as bar:
        assert isinstance(bar, progress.Quiet)
        progress.current().start("origins", 3)
        progress.current().advance("origins")
    assert stream.getvalue() == ""


def test_a_terminal_gets_bars_with_counts_for_origins_and_series():
    stream = FakeTerminal()
    with progress.showing(stream):
        bar = progress.current()
        assert isinstance(bar, progress.TerminalBar)
        bar.start("origins", 12)
        bar.start("series fitted", 2 * CHUNK_SERIES)
        for _ in range(12):
            bar.advance("origins")
        bar.advance("series fitted", CHUNK_SERIES)
    text = stream.getvalue()
    assert "origins" in text and "series fitted" in text
    assert "12/12" in text
    # Outside the block, stages report to nothing again.
    assert isinstance(progress.current(), progress.Quiet)
