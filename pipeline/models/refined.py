"""Least squares refined on the augmented system, its residuals in twice the working precision.

The least-squares solution ``x`` and residual ``r = b − A·x`` together solve the augmented
system (Björck 1967)::

    [ I   A ] [ r ]   [ b ]
    [ Aᵀ  0 ] [ x ] = [ c ]

with ``c = 0``. Starting from the QR solution, each step computes that system's two
residuals, ``f = b − r − A·x`` and ``g = c − Aᵀ·r``, in twice the working precision
(``core.double_double``: TwoSum, TwoProduct, and sums as accurate as Ogita, Rump & Oishi's
Dot2), solves for the corrections with the same QR factor in double, and adds them. The
factorisation stays in double; only the residuals are computed more accurately, which is
what lets the corrections recover the digits the factorisation lost. The steps stop when a
correction no longer shrinks by half (or after ``MOST_STEPS``).

The same refinement with ``b = 0`` and ``c = −eⱼ`` gives the j-th column of (AᵀA)⁻¹
(``x = (AᵀA)⁻¹(Aᵀb − c)``), so the covariance behind the standard errors can be refined as
the coefficients are: ``covariance=True``.

Columns are scaled to about unit length first, by powers of two so that the scaling is exact,
and the condition number that matters is the scaled design's.

The size of the last correction, beside each coefficient, estimates how many of its digits
are right (``digits``): a correction that no longer shrinks is rounding, and what it would
still change is what is not known. That is the solve's own accuracy, for the data as stored
in doubles: a decimal that a double cannot hold exactly (0.1) is already a slightly different
problem, whose solution can differ from the decimal problem's by the condition number times
the double's precision.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from pipeline.core.double_double import Halves, residual_block2, transposed_residual2
from pipeline.core.scale import row_unit_scales

MOST_STEPS = 10
MOST_DIGITS = 15.0   # the most digits an estimate claims (a double holds 15.95; NIST StRD's cap)


@dataclass(frozen=True)
class RefinedFit:
    coef: np.ndarray        # on the columns' own scale
    residuals: np.ndarray
    steps: int              # corrections applied
    last_change: float      # the size of the last correction, relative to the coefficients
    digits: float           # the estimated correct significant digits of the least accurate coefficient
    covariance: np.ndarray | None = None   # (AᵀA)⁻¹ on the columns' own scale, refined
    covariance_steps: int = 0


def _corrections(q: np.ndarray, r: np.ndarray, f: np.ndarray, g: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Solve [I A; Aᵀ 0][dr; dx] = [f; g] with A = QR: Rᵀh = g, R·dx = Qᵀf − h, dr = f − A·dx
    (A·dx as Q·R·dx)."""
    h = scipy.linalg.solve_triangular(r, g, trans="T", check_finite=False)
    dx = scipy.linalg.solve_triangular(r, q.T @ f - h, check_finite=False)
    return f - q @ (r @ dx), dx


def _relative(change: np.ndarray, x: np.ndarray) -> float:
    """Return the largest correction beside its right-hand side's largest value (per column)."""
    largest = np.maximum(np.abs(x).max(axis=0), np.finfo(float).tiny)
    return float((np.abs(change).max(axis=0) / largest).max())


def _refine(a, q, r, b, c, x, residual) -> tuple[np.ndarray, np.ndarray, int, float, np.ndarray]:
    """Refine ``x`` and ``residual`` (p × k and rows × k) on [I A; Aᵀ 0][r; x] = [b; c]; return
    them, the steps applied, the last applied correction's relative size, and the last
    correction computed (applied or not: the estimate of what is still wrong)."""
    previous, steps, change = np.inf, 0, np.inf
    dx = np.zeros_like(x)
    for _ in range(MOST_STEPS):
        f = residual_block2(a, x, (b, -residual))     # b − r − A·x
        g = transposed_residual2(c, a, residual)        # c − Aᵀ·r
        dr, dx = _corrections(q, r, f, g)
        size = _relative(dx, x)
        if steps > 0 and size >= previous / 2:   # no longer shrinking: the digits are in
            break
        if size >= 1.0:   # as large as the solution: the factor cannot resolve it; keep QR's
            break
        x, residual = x + dx, residual + dr
        previous, change, steps = size, size, steps + 1
        if size == 0.0:
            dx = np.zeros_like(x)
            break
    return x, residual, steps, change, dx


def estimated_digits(coef: np.ndarray, error: np.ndarray) -> float:
    """Return the fewest correct significant digits among the coefficients, each estimated as
    −log₁₀(|error| / |coefficient|), at most a double's own (a coefficient of exactly zero
    is left out)."""
    coef, error = np.abs(np.ravel(coef)), np.abs(np.ravel(error))
    present = coef > 0
    if not present.any():
        return MOST_DIGITS
    with np.errstate(divide="ignore"):
        digits = -np.log10(np.maximum(error[present] / coef[present], 2.0 ** -53))
    return float(min(digits.min(), MOST_DIGITS))


def refined_least_squares(matrix, target, *, covariance: bool = False) -> RefinedFit:
    """Return the least-squares fit of ``target`` on ``matrix`` (full column rank), refined on
    the augmented system with its residuals in twice the working precision; with
    ``covariance``, (AᵀA)⁻¹ too, each column refined the same way."""
    a = np.asarray(matrix, float)
    b = np.asarray(target, float)
    # Each column scaled to about unit length by a power of two, so the scaled design is the
    # design exactly (a scale of any other number would round every element, and change the
    # problem by more than the refinement recovers).
    norms = row_unit_scales(np.sqrt(np.einsum("ij,ij->j", a, a))[:, None])   # one per column
    scaled = a / norms
    q, r = np.linalg.qr(scaled)
    x = scipy.linalg.solve_triangular(r, q.T @ b, check_finite=False)
    halves = Halves(scaled)   # split once, multiplied at every step
    x, residual, steps, change, last = _refine(halves, q, r, b[:, None], None, x[:, None],
                                               (b - scaled @ x)[:, None])
    digits = estimated_digits(x, last)
    inverse, inverse_steps = None, 0
    if covariance:
        p = a.shape[1]
        r_inverse = scipy.linalg.solve_triangular(r, np.eye(p), check_finite=False)
        start = r_inverse @ r_inverse.T                         # (AᵀA)⁻¹ from R, in double
        inverse, _, inverse_steps, _, _ = _refine(halves, q, r, np.zeros((len(a), p)), -np.eye(p),
                                                  start, -(scaled @ start))
        inverse = (inverse + inverse.T) / 2 / np.outer(norms, norms)
    return RefinedFit(coef=x[:, 0] / norms, residuals=residual[:, 0], steps=steps,
                      last_change=change, digits=digits, covariance=inverse,
                      covariance_steps=inverse_steps)
