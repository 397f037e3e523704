"""Least squares refined on the augmented system, its residuals in twice the working precision.

The least-squares solution ``x`` and residual ``r = b − A·x`` together solve the augmented
system (Björck 1967)::

    [ I   A ] [ r ]   [ b ]
    [ Aᵀ  0 ] [ x ] = [ 0 ]

Starting from the QR solution, each step computes that system's two residuals,
``f = b − r − A·x`` and ``g = −Aᵀ·r``, in twice the working precision (``core.double_double``:
Dot2 of Ogita, Rump & Oishi 2005), solves for the corrections with the same QR factor in
double, and adds them. The factorisation stays in double; only the residuals are computed
more accurately, which is what lets the corrections recover the digits the factorisation
lost. The steps stop when a correction no longer shrinks (or after ``MOST_STEPS``).

Columns are scaled to about unit length first, by powers of two so that the scaling is exact,
and the condition number that matters is the scaled design's.

Nothing in a run calls this yet: it is the solver the ill-conditioned fits are to use, and is
checked on its own against the NIST StRD certified values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from pipeline.core.double_double import dot2
from pipeline.core.scale import row_unit_scales

MOST_STEPS = 10


@dataclass(frozen=True)
class RefinedFit:
    coef: np.ndarray        # on the columns' own scale
    residuals: np.ndarray
    steps: int              # corrections applied
    last_change: float      # the size of the last correction, relative to the coefficients


def _corrections(q: np.ndarray, r: np.ndarray, f: np.ndarray, g: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Solve [I A; Aᵀ 0][dr; dx] = [f; g] with A = QR: Rᵀh = g, R·dx = Qᵀf − h, dr = f − A·dx
    (A·dx as Q·R·dx)."""
    h = scipy.linalg.solve_triangular(r, g, trans="T", check_finite=False)
    dx = scipy.linalg.solve_triangular(r, q.T @ f - h, check_finite=False)
    return f - q @ (r @ dx), dx


def refined_least_squares(matrix, target) -> RefinedFit:
    """Return the least-squares fit of ``target`` on ``matrix`` (full column rank), refined on
    the augmented system with its residuals in twice the working precision."""
    a = np.asarray(matrix, float)
    b = np.asarray(target, float)
    # Each column scaled to about unit length by a power of two, so the scaled design is the
    # design exactly (a scale of any other number would round every element, and change the
    # problem by more than the refinement recovers).
    norms = row_unit_scales(np.sqrt(np.einsum("ij,ij->j", a, a))[:, None])   # one per column
    scaled = a / norms
    q, r = np.linalg.qr(scaled)
    x = scipy.linalg.solve_triangular(r, q.T @ b, check_finite=False)
    residual = b - scaled @ x
    columns = scaled.T
    previous, steps, change = np.inf, 0, np.inf
    for _ in range(MOST_STEPS):
        # f = b − r − A·x and g = −Aᵀ·r, each in twice the working precision
        f = dot2(np.column_stack([b, residual, scaled]), np.concatenate([[1.0, -1.0], -x]))
        g = -dot2(columns, residual)
        dr, dx = _corrections(q, r, f, g)
        size = float(np.max(np.abs(dx)) / max(np.max(np.abs(x)), np.finfo(float).tiny))
        if size >= previous / 2 and steps > 0:   # no longer shrinking: the digits are in
            break
        x, residual = x + dx, residual + dr
        previous, change, steps = size, size, steps + 1
        if size == 0.0:
            break
    return RefinedFit(coef=x / norms, residuals=residual, steps=steps, last_change=change)
