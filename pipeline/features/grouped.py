"""Statistics per group of rows, from integer group codes, equal to pandas' groupby to the bit.

The feature plan and the baselines learn a few numbers per series (or per series and
calendar month) in every training window of the backtest. Built through a DataFrame and
``groupby``, each costs far more than the arithmetic on small windows; these functions do
the same arithmetic on arrays, in the same order, so the outputs do not change by a bit
(a plain ``np.bincount`` sum can differ from pandas' in the last bit).

pandas sums a group's rows with Kahan's compensation, in the rows' order; pandas 3.1 and
later instead sum with ``np.add.reduceat`` when the rows come in the order of their
groups (the codes never decrease). ``group_means`` does whichever the installed pandas
does (``_sorted_rows_reduced``, found once by asking pandas), the compensated sum row by
row in plain Python floats; with more than ``LONGEST_LOOPED`` rows it hands the work to
pandas itself.
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pandas as pd

# Beyond this many rows, adding them one by one in Python costs more than pandas' groupby.
LONGEST_LOOPED = 2000


@cache
def _sorted_rows_reduced() -> bool:
    """Return whether the installed pandas sums groups whose rows come in group order with
    ``np.add.reduceat`` rather than with Kahan's compensation: the two give different sums
    of 0.5, 0.5 and 2⁵² (2⁵² and 2⁵² + 1)."""
    values = np.array([0.5, 0.5, 2.0 ** 52])
    found = pd.Series(values).groupby(np.zeros(3, np.intp)).mean().iloc[0]
    return bool(found == np.add.reduceat(values, [0])[0] / 3)


def _compensated_sums(codes: np.ndarray, values: np.ndarray, groups: int) -> np.ndarray:
    """Return each group's sum in the rows' order with Kahan's compensation, step for step
    as pandas' ``group_mean`` adds (a compensation that turns NaN, at an infinite value,
    starts again at 0). Plain Python floats: on a few thousand rows, faster than any setup."""
    total = [0.0] * groups
    carry = [0.0] * groups
    for group, value in zip(codes.tolist(), values.tolist()):
        before = total[group]
        y = value - carry[group]
        t = before + y
        lost = (t - before) - y
        carry[group] = 0.0 if lost != lost else lost
        total[group] = t
    return np.array(total, float)


def group_means(codes: np.ndarray, values: np.ndarray, groups: int) -> np.ndarray:
    """Return the mean of ``values`` per group (``codes``: 0 to groups − 1, each at least
    once) as ``pd.Series(values).groupby(codes).mean()`` gives it, to the bit. ``values``
    hold no NaN."""
    codes = np.asarray(codes, np.intp)
    values = np.asarray(values, float)
    counts = np.bincount(codes, minlength=groups)
    if not len(codes):
        return np.zeros(0)
    if (np.diff(codes) >= 0).all() and _sorted_rows_reduced():
        total = np.add.reduceat(values, np.cumsum(counts) - counts)
    elif len(codes) > LONGEST_LOOPED:
        return pd.Series(values).groupby(codes, sort=True).mean().to_numpy(float)
    else:
        total = _compensated_sums(codes, values, groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total / counts.astype(float)


def group_last(codes: np.ndarray, values: np.ndarray, groups: int) -> np.ndarray:
    """Return each group's last value in the rows' order (``codes``: 0 to groups − 1, each at
    least once), as ``groupby(codes).last()`` gives it for values without NaN."""
    codes = np.asarray(codes, np.intp)
    order = np.argsort(codes, kind="stable")
    ends = np.cumsum(np.bincount(codes, minlength=groups)) - 1
    return np.asarray(values, float)[order[ends]]


# Up to this many keys, a dict finds them faster than a pandas index, which hashes its
# names again on every new index (a few hundred microseconds even for a handful).
MOST_LOOKED_UP = 10_000


def positions_of(names, keys) -> np.ndarray:
    """Return each key's position among ``names`` (unique), −1 where it is not one of them,
    as ``pd.Index(names).get_indexer(keys)`` gives it."""
    keys = np.asarray(keys, dtype=object)
    if len(keys) > MOST_LOOKED_UP:
        return pd.Index(np.asarray(names, dtype=object), dtype=object).get_indexer(keys)
    where = {name: at for at, name in enumerate(np.asarray(names, dtype=object).tolist())}
    return np.array([where.get(key, -1) for key in keys.tolist()], np.intp)
