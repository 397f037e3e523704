"""The libraries' warnings kept out of a command's output (pipeline.core.library_warnings)."""

from __future__ import annotations

import io
import warnings

import pytest

from pipeline.core.library_warnings import caught_warnings, warning_lines


def _warn_twice() -> None:
    for _ in range(2):
        warnings.warn("a library's remark", UserWarning, stacklevel=1)


def test_warnings_are_collected_not_printed_and_shown_once_each_on_request():
    stream = io.StringIO()
    with caught_warnings(shown=False, stream=stream) as caught:
        _warn_twice()
    assert stream.getvalue() == "" and caught
    with caught_warnings(shown=True, stream=stream):
        _warn_twice()
        assert stream.getvalue() == ""       # printed on leaving, after the command's output
    lines = stream.getvalue().splitlines()
    assert len(lines) == 1 and lines[0].startswith("library warning (")
    assert "UserWarning: a library's remark (test_library_warnings.py:" in lines[0]


def test_a_warning_turned_into_an_error_is_still_raised():
    with warnings.catch_warnings():
        warnings.simplefilter("error", UserWarning)
        with pytest.raises(UserWarning), caught_warnings():
            _warn_twice()


def test_a_warning_from_an_installed_package_is_named_by_it():
    record = warnings.WarningMessage("x\n y", FutureWarning, "/venv/lib/site-packages/pandas/core/frame.py", 7)
    assert warning_lines([record, record]) == ["library warning (pandas): FutureWarning: x y (frame.py:7)"]
