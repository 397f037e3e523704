"""Models behind one small interface: ``fit(design, y)`` returns self, ``predict(design)``.

A new model is a class with that interface registered in ``MODELS`` under the
name the spec uses for it.
"""

from __future__ import annotations

from .baselines import MeanBaseline
from .ols import OLSModel, least_squares

MODELS = {
    "mean_baseline": MeanBaseline,
    "ols": OLSModel,
}


def make_model(kind: str, *, intercept: bool = True):
    """Return a new, unfitted model of the named kind."""
    if kind == "ols":
        return OLSModel(fit_intercept=intercept)
    return MODELS[kind]()


__all__ = ["MODELS", "MeanBaseline", "OLSModel", "least_squares", "make_model"]
