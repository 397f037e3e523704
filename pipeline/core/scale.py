"""The size of a set of numbers, as an exact power of two, to compute at about 1.

A statistic that does not depend on the unit of its numbers (a residual test, a ratio of
errors, a test statistic) is computed on the numbers divided by their unit scale: the
division is exact, and their squares neither underflow (a target of 1e-300) nor overflow
(one of 1e150), so such a target gives the same values as one of about 1.
"""

from __future__ import annotations

import numpy as np


def unit_scale(values) -> float:
    """Return the power of two nearest above the largest finite size among ``values`` (1 when
    there is none, or all are zero)."""
    values = np.asarray(values, float)
    finite = np.abs(values[np.isfinite(values)])
    largest = float(finite.max()) if finite.size else 0.0
    if largest == 0.0:
        return 1.0
    return float(np.ldexp(1.0, int(np.frexp(largest)[1])))


def row_unit_scales(values) -> np.ndarray:
    """Return ``unit_scale`` of each row of a 2-D array."""
    values = np.abs(np.atleast_2d(np.asarray(values, float)))
    largest = np.where(np.isfinite(values), values, 0.0).max(axis=1, initial=0.0)
    return np.where(largest > 0, np.ldexp(1.0, np.frexp(largest)[1]), 1.0)
