"""Interactions (pipeline.features.interactions): products of first-degree columns.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), or a hand example worked in the comment. The
data are simulated here (tests/features/test_plan.py's make_panel); they are not
reference values themselves.
"""

from __future__ import annotations

import numpy as np
from test_plan import fitted_plan, make_panel


def test_interactions_multiply_first_degree_columns():
    frame = make_panel(months=6)
    plan = fitted_plan({"numeric": [{"column": "price", "degree": 2}, "temp"],
                        "categorical": [{"column": "region", "reference": "East"}],
                        "interactions": [["price", "region"], ["price", "temp"]]}, frame)
    table = plan.feature_table(frame)
    west = (frame["region"] == "West").to_numpy(float)
    np.testing.assert_allclose(table["price × region: West"], frame["price"] * west)
    np.testing.assert_allclose(table["price × temp"], frame["price"] * frame["temp"])
