"""Features: turn driver columns into the numeric design a linear model fits.

One module per kind of term (target, numeric, categorical, interactions,
series, calendar, lags), each a scikit-learn-style transformer that learns in
``fit`` from one training window only; ``plan`` puts them together in the
spec's order.
"""

from pipeline.features.lags import with_predictions
from pipeline.features.plan import FeaturePlan, plan_features
from pipeline.features.target import TargetTransform

__all__ = ["FeaturePlan", "TargetTransform", "plan_features", "with_predictions"]
