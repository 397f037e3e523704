"""Accuracy measures: pure functions of (actual, predicted).

Errors are taken as prediction − actual, so a positive bias means the
forecast ran high.
"""

from __future__ import annotations

import numpy as np


def _pair(actual, predicted) -> tuple[np.ndarray, np.ndarray]:
    actual = np.asarray(actual, dtype=float)
    predicted = np.asarray(predicted, dtype=float)
    if actual.shape != predicted.shape:
        raise ValueError(f"actual {actual.shape} and predicted {predicted.shape} differ in shape")
    if actual.size == 0:
        raise ValueError("no values to score")
    return actual, predicted


def mae(actual, predicted) -> float:
    """Return the mean absolute error."""
    actual, predicted = _pair(actual, predicted)
    return float(np.mean(np.abs(predicted - actual)))


def rmse(actual, predicted) -> float:
    """Return the root mean squared error."""
    actual, predicted = _pair(actual, predicted)
    return float(np.sqrt(np.mean((predicted - actual) ** 2)))


def mape(actual, predicted) -> tuple[float, int]:
    """Return the mean absolute percentage error (a fraction) and how many rows it left out.

    The percentage error is undefined where the actual is 0; those rows are left
    out and counted. With no usable row the MAPE is NaN.
    """
    actual, predicted = _pair(actual, predicted)
    usable = actual != 0
    skipped = int((~usable).sum())
    if not usable.any():
        return float("nan"), skipped
    ratio = np.abs((predicted[usable] - actual[usable]) / actual[usable])
    return float(np.mean(ratio)), skipped


def bias(actual, predicted) -> float:
    """Return the mean error, prediction − actual (positive: the forecast ran high)."""
    actual, predicted = _pair(actual, predicted)
    return float(np.mean(predicted - actual))


def skill(model_error: float, baseline_error: float) -> float:
    """Return 1 − model_error / baseline_error: above 0 the model beats the baseline."""
    if baseline_error == 0:
        return float("nan")
    return float(1.0 - model_error / baseline_error)
