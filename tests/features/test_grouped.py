"""Statistics per group from integer codes (pipeline/features/grouped.py).

Reference: pandas itself, ``pd.Series(values).groupby(codes).mean()`` and ``.last()``,
compared to the bit (``group_means`` must give what the installed pandas gives, whichever
way it sums). Data are simulated with fixed seeds, chosen so that a plain sum in order
and a compensated one differ in the last bits (values of mixed magnitudes).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.features.grouped import LONGEST_LOOPED, MOST_LOOKED_UP, group_last, group_means, positions_of


def _values(rng: np.random.Generator, n: int, kind: int) -> np.ndarray:
    if kind == 0:
        return rng.normal(size=n) * 10.0 ** rng.integers(-5, 15, n)
    if kind == 1:
        return np.round(rng.normal(50, 30, n), 1)
    if kind == 2:
        return rng.choice([2.0 ** 53, 1.0, -2.0 ** 53, 3.3, 0.1], n)
    return rng.normal(size=n) + 1e8


@pytest.mark.parametrize("order", ["shuffled", "sorted"])
def test_group_means_equal_pandas_groupby_mean_to_the_bit(order):
    rng = np.random.default_rng(11)
    for trial in range(400):
        n = int(rng.integers(1, 120))
        codes = pd.factorize(rng.integers(0, int(rng.integers(1, 12)), n), sort=True)[0]
        if order == "sorted":
            codes = np.sort(codes)   # rows in group order: pandas may sum these another way
        values = _values(rng, n, trial % 4)
        expected = pd.Series(values).groupby(codes).mean().to_numpy()
        found = group_means(codes, values, int(codes.max()) + 1)
        assert np.array_equal(found, expected), (trial, found - expected)


def test_group_means_of_long_groups_and_of_infinite_values_equal_pandas():
    rng = np.random.default_rng(12)
    codes = rng.integers(0, 2, 3 * LONGEST_LOOPED)   # more rows than the loop takes
    values = _values(rng, len(codes), 0)
    assert np.array_equal(group_means(codes, values, 2),
                          pd.Series(values).groupby(codes).mean().to_numpy())
    codes = np.array([0, 1, 0, 1, 0, 2, 2])
    values = np.array([1.5, np.inf, 2.0, 3.0, 0.25, -np.inf, np.inf])
    assert np.array_equal(group_means(codes, values, 3),
                          pd.Series(values).groupby(codes).mean().to_numpy(), equal_nan=True)
    assert len(group_means(np.zeros(0, int), np.zeros(0), 0)) == 0


def test_group_last_equals_pandas_groupby_last():
    rng = np.random.default_rng(13)
    for _ in range(100):
        n = int(rng.integers(1, 60))
        codes = pd.factorize(rng.integers(0, 6, n), sort=True)[0]
        values = rng.normal(size=n)
        assert np.array_equal(group_last(codes, values, int(codes.max()) + 1),
                              pd.Series(values).groupby(codes).last().to_numpy())


@pytest.mark.parametrize("many", [False, True])
def test_positions_of_equal_pandas_get_indexer(many):
    # Reference: pandas, pd.Index(names).get_indexer(keys), absent keys −1.
    rng = np.random.default_rng(14)
    names = np.array([f"s{k}" for k in rng.permutation(50)], object)
    size = MOST_LOOKED_UP + 5 if many else 40
    keys = np.array([f"s{k}" for k in rng.integers(0, 60, size)], object)
    assert np.array_equal(positions_of(names, keys), pd.Index(names).get_indexer(keys))
    assert len(positions_of(names, np.array([], object))) == 0
