"""Products of two drivers' terms."""

from __future__ import annotations

import numpy as np
import pandas as pd


class InteractionTerms:
    """The products of two fitted drivers' first-degree columns (a category: each of its columns)."""

    def __init__(self, first, second) -> None:
        self.first = first
        self.second = second

    def fit(self, frame: pd.DataFrame, y=None) -> InteractionTerms:
        self.fitted_ = True   # both drivers are fitted already; nothing more to learn
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        left, right = self.first.main_effect(frame), self.second.main_effect(frame)
        columns = [left[:, i] * right[:, j] for i in range(left.shape[1]) for j in range(right.shape[1])]
        return np.column_stack(columns) if columns else np.empty((len(frame), 0))

    def get_feature_names_out(self) -> list[str]:
        return [f"{a} × {b}" for a in self.first.main_effect_names()
                for b in self.second.main_effect_names()]
