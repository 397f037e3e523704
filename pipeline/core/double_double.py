"""Sums and dot products in twice the working precision, from doubles alone.

The building blocks of a least-squares refinement whose residuals are computed more
accurately than the factorisation (the augmented system's iterative refinement). They use
only IEEE double arithmetic with round-to-nearest, never numpy's ``longdouble`` (which is
plain double on some platforms):

- ``two_sum`` (Knuth's TwoSum): ``a + b = s + e`` exactly, ``s = fl(a + b)``;
- ``two_product`` (Dekker's TwoProduct, with Veltkamp's split): ``a · b = p + e`` exactly,
  ``p = fl(a · b)``, for ``|a|, |b|`` below about 1e300 (the split's factor must not
  overflow) and products whose low part does not underflow;
- ``dot2`` (Ogita, Rump & Oishi 2005, "Accurate sum and dot product", Algorithm 5.3): a dot
  product as accurate as if computed in twice the precision and then rounded once:
  ``|dot2 − x·y| ≤ u·|x·y| + γ²·|x|·|y|`` with ``u = 2⁻⁵³`` and ``γ = n·u / (1 − n·u)``;
- ``sum2``: a sum along an axis as accurate as in twice the precision, by a pairwise tree
  of TwoSums whose errors are added at the end (the same bound as Dot2's, with n terms);
- ``transposed_residual2``: ``C − Aᵀ·B`` for a long ``A`` (many rows), each entry a sum over
  the rows by ``sum2``, so the loop is over the few columns, never the rows;
- ``residual_block2``: ``T − A·X`` for a long ``A`` and a few right-hand sides, the sum over
  A's columns carried as a pair (sum, error);
- ``power2``: a number's powers 1..k, each carried as an unevaluated sum of two doubles and
  rounded once, so the power is the correctly rounded one in all but the rarest cases.

Every function works on numpy arrays element-wise (``dot2`` along the last axis), so a
residual over a million rows is a loop over the columns, not the rows.
"""

from __future__ import annotations

import numpy as np

SPLITTER = 134217729.0   # 2**27 + 1: splits a double into two halves of 26 significant bits
# Below this size ``SPLITTER · a`` (about 2**27 · a) and the product's partial products stay
# finite, so the split, and with it ``two_product``, is exact; above it they may overflow to
# inf, and inf − inf would make a NaN.
SAFE_SPLIT = 2.0 ** 995


def two_sum(a, b) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(s, e)`` with ``s = fl(a + b)`` and ``a + b = s + e`` exactly (any order of size)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    s = a + b
    virtual = s - a
    return s, (a - (s - virtual)) + (b - virtual)


def split(a) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(high, low)`` with ``a = high + low`` exactly, each of at most 26 significant bits."""
    a = np.asarray(a, float)
    c = SPLITTER * a
    high = c - (c - a)
    return high, a - high


def fast_two_sum(a, b) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(s, e)`` with ``s = fl(a + b)`` and ``a + b = s + e`` exactly, for ``|a| ≥ |b|``
    (or ``a`` zero): Dekker's FastTwoSum, which renormalises a pair of doubles."""
    s = a + b
    return s, b - (s - a)


def two_product(a, b) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(p, e)`` with ``p = fl(a · b)`` and ``a · b = p + e`` exactly."""
    return split_product(Halves.of(a), np.asarray(b, float))


class Halves:
    """An array with its two halves (``split``), made once for a matrix multiplied many times."""

    def __init__(self, values) -> None:
        self.values = np.asarray(values, float)
        self.high, self.low = split(self.values)

    @classmethod
    def of(cls, values) -> Halves:
        return values if isinstance(values, Halves) else cls(values)

    def column(self, j: int) -> Halves:
        part = Halves.__new__(Halves)
        part.values, part.high, part.low = (v[:, j:j + 1] for v in (self.values, self.high, self.low))
        return part


def split_product(a: Halves, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``two_product`` with ``a`` split already."""
    p = a.values * b
    b_high, b_low = split(b)
    return p, a.low * b_low - (((p - a.high * b_high) - a.low * b_high) - a.high * b_low)


def dot2(x, y) -> np.ndarray:
    """Return the dot products of ``x`` and ``y`` along their last axis, as accurate as if
    computed in twice the working precision and rounded once (Ogita, Rump & Oishi's Dot2)."""
    x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
    if x.shape[-1] == 0:
        return np.zeros(x.shape[:-1])
    total, error = two_product(x[..., 0], y[..., 0])
    for k in range(1, x.shape[-1]):
        product, low = two_product(x[..., k], y[..., k])
        total, carried = two_sum(total, product)
        error = error + (carried + low)
    return total + error


def sum2(values, axis: int = -1) -> np.ndarray:
    """Return the sums of ``values`` along ``axis``, as accurate as if added in twice the working
    precision and rounded once: pairs are added by TwoSum level by level (log₂ n levels, each
    one vectorised), and every level's rounding errors are added to the result at the end."""
    total, errors = sum2_pair(values, axis)
    return total + errors


def sum2_pair(values, axis: int = -1) -> tuple[np.ndarray, np.ndarray]:
    """Return ``sum2``'s sums before their rounding errors are added: (sums, errors)."""
    x = np.moveaxis(np.asarray(values, float), axis, -1)
    if x.shape[-1] == 0:
        return np.zeros(x.shape[:-1]), np.zeros(x.shape[:-1])
    errors = np.zeros(x.shape[:-1])
    while x.shape[-1] > 1:
        if x.shape[-1] % 2:
            x = np.concatenate([x, np.zeros((*x.shape[:-1], 1))], axis=-1)
        x, error = two_sum(x[..., 0::2], x[..., 1::2])
        errors = errors + error.sum(axis=-1)
    return x[..., 0], errors


def transposed_residual2(start, a, b) -> np.ndarray:
    """Return ``start − aᵀ·b`` (a: rows × p, b: rows × k, or rows; start: p × k, or p, or None
    for zero) with each entry as accurate as in twice the working precision: the products split
    exactly, then summed with ``start`` over the rows by ``sum2``, one column of ``b`` at a time."""
    a = Halves.of(a)
    b = np.asarray(b, float)
    vector = b.ndim == 1
    b = b[:, None] if vector else b
    columns = a.values.shape[1]
    start = np.zeros((columns, b.shape[1])) if start is None else np.asarray(start, float).reshape(
        columns, b.shape[1])
    out = np.empty((columns, b.shape[1]))
    for k in range(b.shape[1]):
        product, low = split_product(a, -b[:, k:k + 1])
        total, errors = sum2_pair(product, axis=0)
        total, carried = two_sum(start[:, k], total)
        out[:, k] = total + (carried + errors + low.sum(axis=0))
    return out[:, 0] if vector else out


def residual_block2(a, x, terms=()) -> np.ndarray:
    """Return ``t₁ + t₂ + … − a·x`` for the arrays ``terms`` = (t₁, t₂, …) (each rows × k, or
    rows), ``a`` rows × p and ``x`` p × k (or p), each entry as accurate as in twice the working
    precision (the sum over a's columns carried as a TwoSum pair, a column at a time)."""
    a = Halves.of(a)
    x = np.asarray(x, float)
    vector = x.ndim == 1
    x = x[:, None] if vector else x
    total = np.zeros((a.values.shape[0], x.shape[1]))
    error = np.zeros_like(total)
    for term in terms:
        term = np.asarray(term, float)
        total, carried = two_sum(total, term[:, None] if term.ndim == 1 else term)
        error = error + carried
    for j in range(a.values.shape[1]):
        product, low = split_product(a.column(j), -x[j:j + 1, :])
        total, carried = two_sum(total, product)
        error = error + (carried + low)
    out = total + error
    return out[:, 0] if vector else out


def power2(values, degree: int) -> list[np.ndarray]:
    """Return ``[x, x², …, x^degree]`` of the doubles ``values``, each power formed in twice the
    working precision and rounded once.

    The running power is a pair ``(high, low)`` of doubles; the next is ``(high + low) · x``,
    taken as ``two_product(high, x)`` plus ``low · x`` and renormalised by ``fast_two_sum``. The
    pair's relative error after k steps is a few times k · 2⁻¹⁰⁶, so its rounding to one double
    (``high`` itself, once renormalised) is the correctly rounded power unless the exact power
    lies that close to a midpoint between two doubles: it is then at most one unit in the last
    place off, as it is in the subnormal range, where the low parts lose bits. The first power
    is ``values`` itself, unchanged.

    Where the split is not safe (the number or a power beyond ``SAFE_SPLIT``, about 7e299),
    the power is plain ``x ** k``, as large or inf as that makes it, never NaN; the caller
    decides whether it wants a term that large.
    """
    x = np.asarray(values, float)
    powers = [x]
    high, low = x, np.zeros_like(x)
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        safe = np.abs(x) < SAFE_SPLIT
        for k in range(2, degree + 1):
            product, error = two_product(high, x)
            total, low = fast_two_sum(product, error + low * x)
            # a zero power keeps the sign the product of doubles gives it (−0 for an odd
            # power of −0 or of a negative number too small to show)
            high = np.where(total == 0, product, total)
            safe &= np.abs(product) < SAFE_SPLIT
            powers.append(high if safe.all() else np.where(safe, high, x ** k))
    return powers
