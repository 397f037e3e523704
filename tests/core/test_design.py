"""The rows' series as codes (pipeline/core/design.py).

The reference is pandas.factorize(values, sort=True): codes into the sorted
distinct names. A window of a larger design that already holds its codes must
give the same answer as factorising the window's own series afresh.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.core.design import Design, held_series, series_design, series_index

NAMES = np.array(["West", "North", "East", "South", "North", "West", "East", "West"], dtype=object)


def design_of(series) -> Design:
    series = np.asarray(series, dtype=object)
    return Design(np.arange(len(series), dtype=float).reshape(-1, 1), ["x"], series)


def test_series_index_equals_pandas_factorize_sorted():
    codes, names = series_index(design_of(NAMES))
    expected_codes, expected_names = pd.factorize(NAMES, sort=True)
    np.testing.assert_array_equal(codes, expected_codes)
    assert list(names) == list(expected_names) == ["East", "North", "South", "West"]
    # the codes index back into the names
    assert list(names[codes]) == list(NAMES)


@pytest.mark.parametrize("positions", [[0, 1, 5, 7], [2, 6], slice(3, 8), [1, 4]])
def test_a_window_with_shared_codes_equals_factorising_it_afresh(positions):
    whole = design_of(NAMES).with_series_codes()
    window = whole.rows(positions)
    codes, names = series_index(window)
    expected_codes, expected_names = pd.factorize(NAMES[positions], sort=True)
    np.testing.assert_array_equal(codes, expected_codes)
    assert list(names) == list(expected_names)


def test_held_series_drops_names_without_rows_and_renumbers():
    names = np.array(["a", "b", "c", "d", "e"], dtype=object)
    codes = np.array([4, 1, 4, 3])          # a and c have no row
    new_codes, held = held_series(codes, names)
    # by hand: held names b, d, e → new codes b=0, d=1, e=2
    assert list(held) == ["b", "d", "e"]
    assert new_codes.tolist() == [2, 0, 2, 1]
    assert list(held[new_codes]) == list(names[codes])


def test_held_series_keeps_codes_when_every_name_has_a_row():
    names = np.array(["a", "b"], dtype=object)
    codes = np.array([1, 0, 1])
    new_codes, held = held_series(codes, names)
    assert new_codes.tolist() == [1, 0, 1]
    assert list(held) == ["a", "b"]


def test_rows_keeps_every_part_of_the_design():
    design = Design(np.arange(12.0).reshape(6, 2), ["x1", "x2"], np.array(list("ababab"), dtype=object),
                    period=np.arange(600, 606), notes=("a note",))
    part = design.rows([1, 4])
    np.testing.assert_array_equal(part.matrix, [[2.0, 3.0], [8.0, 9.0]])
    assert part.series.tolist() == ["b", "a"]
    assert part.period.tolist() == [601, 604]
    assert part.names == ["x1", "x2"] and part.notes == ("a note",)


def test_series_design_has_no_terms_and_the_rows_series():
    frame = pd.DataFrame({"series": ["x", "y", "x"]})
    design = series_design(frame, "series")
    assert design.matrix.shape == (3, 0)
    assert design.series.tolist() == ["x", "y", "x"]
    assert design.period is None
