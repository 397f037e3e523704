"""Baselines: what a planner falls back on without a model."""

from __future__ import annotations

import numpy as np
import pandas as pd


class MeanBaseline:
    """Predicts, for each series, the mean of its target over the training window."""

    label = "mean baseline"

    def fit(self, design, y: np.ndarray) -> MeanBaseline:
        frame = pd.DataFrame({"series": design.series, "y": np.asarray(y, float)})
        self.means_ = frame.groupby("series")["y"].mean().to_dict()
        self.overall_mean_ = float(np.mean(y))
        return self

    def predict(self, design) -> np.ndarray:
        return np.array([self.means_.get(s, self.overall_mean_) for s in design.series], float)

    def coefficient_table(self) -> pd.DataFrame:
        """Return the per-series means as the baseline's coefficients."""
        return pd.DataFrame({"term": [f"mean of {s}" for s in self.means_],
                             "estimate": list(self.means_.values())})
