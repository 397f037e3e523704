"""Accuracy measures: pure functions of (actual, predicted).

One sign for "error", here and everywhere in castline: error = prediction − actual,
so a positive bias means the forecasts ran high (the track record's realised errors,
the significance test's losses and every table follow it). What is added to a
prediction to reach the actual, actual − prediction, is called a residual instead
(the fit's residuals, and the backtest residuals the empirical intervals are read from).
"""

from __future__ import annotations

import numpy as np

from pipeline.core.scale import unit_scale


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
    error = predicted - actual
    size = unit_scale(error)   # squared at about 1: errors of 1e-300 do not square to 0
    return float(size * np.sqrt(np.mean((error / size) ** 2)))


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


def smape(actual, predicted) -> tuple[float, int]:
    """Return the symmetric MAPE as a fraction, and how many rows it left out.

    mean(2·|prediction − actual| / (|actual| + |prediction|)), the form with
    absolute values in the denominator (Hyndman & Koehler 2006, section 2.3,
    discuss it); rows where both are 0 are undefined and left out. Ranges 0 to 2.
    """
    actual, predicted = _pair(actual, predicted)
    denominator = np.abs(actual) + np.abs(predicted)
    usable = denominator != 0
    if not usable.any():
        return float("nan"), int((~usable).sum())
    ratio = 2 * np.abs(predicted[usable] - actual[usable]) / denominator[usable]
    return float(np.mean(ratio)), int((~usable).sum())


def wape(actual, predicted) -> float:
    """Return the weighted absolute percentage error, Σ|prediction − actual| / Σ|actual|."""
    actual, predicted = _pair(actual, predicted)
    total = float(np.sum(np.abs(actual)))
    return float(np.sum(np.abs(predicted - actual)) / total) if total else float("nan")


def mase(actual, predicted, scale) -> float:
    """Return the mean absolute scaled error: mean(|prediction − actual| / scale).

    ``scale`` is, per row, the in-sample MAE of the seasonal naive forecast on
    that row's training window (Hyndman & Koehler 2006); rows whose scale is 0
    or missing are left out.
    """
    actual, predicted = _pair(actual, predicted)
    scale = np.broadcast_to(np.asarray(scale, dtype=float), actual.shape)
    usable = np.isfinite(scale) & (scale > 0)
    if not usable.any():
        return float("nan")
    return float(np.mean(np.abs(predicted[usable] - actual[usable]) / scale[usable]))


def r2_out_of_sample(actual, predicted) -> float:
    """Return 1 − Σ(actual − prediction)² / Σ(actual − mean(actual))² over the scored rows."""
    actual, predicted = _pair(actual, predicted)
    size = unit_scale(actual)   # a ratio: taken at the actuals' unit scale
    actual, predicted = actual / size, predicted / size
    total = float(np.sum((actual - actual.mean()) ** 2))
    if total == 0:
        return float("nan")
    return float(1.0 - np.sum((actual - predicted) ** 2) / total)


# One signature for every metric, (actual, predicted, scale) -> float, as the catalogue
# (pipeline.core.catalogue.METRICS) calls them.

def mae_score(actual, predicted, scale=None) -> float:
    return mae(actual, predicted)


def rmse_score(actual, predicted, scale=None) -> float:
    return rmse(actual, predicted)


def mape_score(actual, predicted, scale=None) -> float:
    return mape(actual, predicted)[0]


def smape_score(actual, predicted, scale=None) -> float:
    return smape(actual, predicted)[0]


def wape_score(actual, predicted, scale=None) -> float:
    return wape(actual, predicted)


def mase_score(actual, predicted, scale=None) -> float:
    return mase(actual, predicted, scale) if scale is not None else float("nan")


def r2_score(actual, predicted, scale=None) -> float:
    return r2_out_of_sample(actual, predicted) if len(actual) > 1 else float("nan")


def bias_score(actual, predicted, scale=None) -> float:
    return bias(actual, predicted)
