"""pipeline/models/refined.py: least squares refined on the augmented system.

References:
- NIST/ITL Statistical Reference Datasets (StRD), Linear Least Squares Regression: the eight
  visible datasets and their certified coefficients and residual SD in tests/data/nist_strd
  (a copy of ../shared/reference/nist_strd; see its README.md). The bar is eleven correct
  digits on every coefficient (log relative error, LRE ≥ 11) and nine on the residual SD.
- numpy.linalg.lstsq (LAPACK's SVD-based solver), an independent implementation, on a
  well-conditioned design, where refinement must not move the answer beyond rounding.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from models.test_ols import NIST_CERTIFIED, NIST_DATASETS, NIST_DIR, ZERO_ABS_TOL, _lre

from pipeline.models.refined import refined_least_squares


def nist_design(name: str) -> tuple[np.ndarray, np.ndarray]:
    """The dataset's design as certified: the six drivers for longley, else x's powers up to
    the certified degree, with an intercept column where the model has one."""
    certified = NIST_CERTIFIED[name]
    frame = pd.read_csv(NIST_DIR / f"{name}.csv")
    if certified["degree"] is None:
        design = frame[[column for column in frame.columns if column != "y"]].to_numpy(float)
    else:
        x = frame["x"].to_numpy(float)
        design = np.column_stack([x ** power for power in range(1, certified["degree"] + 1)])
    if certified["intercept"]:
        design = np.column_stack([np.ones(len(design)), design])
    return design, frame["y"].to_numpy(float)


@pytest.mark.parametrize("name", NIST_DATASETS)
def test_eleven_digits_on_every_nist_strd_linear_dataset(name):
    design, target = nist_design(name)
    fit = refined_least_squares(design, target)
    certified = NIST_CERTIFIED[name]
    for computed, cert in zip(fit.coef, certified["coef"], strict=True):
        if float(cert) == 0:
            assert abs(computed) < ZERO_ABS_TOL
        else:
            assert _lre(computed, cert) >= 11, (name, computed, cert)
    n, p = design.shape
    resid_sd = math.sqrt(float(np.sum(fit.residuals ** 2)) / (n - p))
    assert _lre(resid_sd, certified["rsd"]) >= 9 or abs(resid_sd - float(certified["rsd"])) < ZERO_ABS_TOL
    assert 1 <= fit.steps


def test_the_hardest_datasets_gain_digits_over_a_plain_qr_solve():
    """wampler3 and longley, where a QR solve in double stops near eleven digits."""
    for name in ("wampler3", "longley"):
        design, target = nist_design(name)
        q, r = np.linalg.qr(design)
        plain = np.linalg.solve(r, q.T @ target)
        certified = NIST_CERTIFIED[name]["coef"]
        refined = refined_least_squares(design, target).coef
        assert min(_lre(c, s) for c, s in zip(refined, certified)) > \
            min(_lre(c, s) for c, s in zip(plain, certified)) + 1, name


def test_a_well_conditioned_design_gets_lstsqs_answer():
    """Simulation: 500 rows, an intercept and five standard normal drivers, y = Xβ + N(0, 1)."""
    rng = np.random.default_rng(23)
    design = np.column_stack([np.ones(500), rng.normal(size=(500, 5))])
    target = design @ np.array([3.0, -1.0, 0.5, 2.0, 0.0, 1.5]) + rng.normal(size=500)
    fit = refined_least_squares(design, target)
    reference, *_ = np.linalg.lstsq(design, target, rcond=None)
    np.testing.assert_allclose(fit.coef, reference, rtol=1e-13, atol=1e-14)
    np.testing.assert_allclose(fit.residuals, target - design @ reference, rtol=1e-11, atol=1e-12)
