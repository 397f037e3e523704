"""The target transform (pipeline.features.target): Duan's smearing, log1p, and the
baselines left on the target as it is.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), a published method (Duan 1983), or a hand example worked in the comment. The
data are simulated here (tests/features/test_plan.py's make_panel); they are not
reference values themselves.
"""

from __future__ import annotations

import numpy as np
import pytest
from test_plan import fitted_plan, make_panel

from pipeline.core.columns import ROW
from pipeline.core.design import Design
from pipeline.core.errors import DataError
from pipeline.features.target import TargetTransform
from pipeline.models import MeanBaseline, make_model
from pipeline.models.ols import OLSModel
from pipeline.models.transformed import TransformedTargetModel

# ------------------------------------------------------------------ the target transform

def test_smearing_makes_the_retransformed_mean_unbiased():
    # Duan (1983), "Smearing estimate: a nonparametric retransformation method", JASA 78(383):
    # with log y = a + b·x + e, E[y | x] = exp(a + b·x) · E[exp(e)], and mean(exp(residuals))
    # estimates E[exp(e)]. Simulated with log-normal errors, sigma = 0.8, so the plain
    # exp(prediction) estimates the median, exp(-sigma²/2) - 1 ≈ -27% below the mean.
    rng = np.random.default_rng(1983)
    sigma, a, b = 0.8, 1.0, 0.5
    x_new = np.linspace(0.0, 2.0, 9)
    truth = np.exp(a + b * x_new + sigma ** 2 / 2)
    corrected, plain = [], []
    for _ in range(300):
        x = rng.uniform(0.0, 2.0, 200)
        y = np.exp(a + b * x + rng.normal(0.0, sigma, x.size))
        model = TransformedTargetModel(OLSModel(), TargetTransform("y", "log"))
        model.fit(Design(x[:, None], ["x"], np.zeros(x.size)), y)
        new = Design(x_new[:, None], ["x"], np.zeros(x_new.size))
        corrected.append(np.mean(model.predict(new) / truth - 1))
        plain.append(np.mean(np.exp(model.model.predict(new)) / truth - 1))
    corrected, plain = np.array(corrected), np.array(plain)
    standard_error = corrected.std(ddof=1) / np.sqrt(corrected.size)
    assert abs(corrected.mean()) < 3 * standard_error                  # unbiased within sampling error
    assert plain.mean() < -20 * plain.std(ddof=1) / np.sqrt(plain.size)  # biased low, far beyond it
    assert plain.mean() == pytest.approx(np.exp(-sigma ** 2 / 2) - 1, abs=0.02)


def test_log1p_retransformation_smears_one_plus_the_target():
    transform = TargetTransform("y", "log1p")
    assert transform.to_mean([np.log(3.0)], 1.5) == pytest.approx([3.0 * 1.5 - 1.0])
    assert transform.smearing_factor([0.0, 0.0]) == 1.0


def test_a_non_positive_target_under_log_is_refused_naming_column_and_row():
    frame = make_panel(months=6)
    frame.loc[frame.index[3], "sales"] = 0.0
    with pytest.raises(DataError) as stopped:
        fitted_plan({"numeric": ["price"]}, frame, target_transform="log")
    assert stopped.value.column == "sales" and stopped.value.row == int(frame[ROW].iloc[3])
    assert "0 is not above 0, so target_transform: log cannot be applied" in str(stopped.value)
    assert "log1p takes zeros" in str(stopped.value)
    assert len(str(stopped.value).splitlines()) == 1


def test_baselines_keep_the_target_as_it_is():
    frame = make_panel(months=6)
    plan = fitted_plan({"numeric": ["price"]}, frame, target_transform="log")
    assert isinstance(make_model("ols", target=plan.target_scale), TransformedTargetModel)
    assert make_model("mean_baseline", target=plan.target_scale).__class__ is MeanBaseline
    assert make_model("ols", target=fitted_plan({}, frame).target_scale).__class__ is OLSModel
