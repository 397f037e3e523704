"""pipeline/core/double_double.py: error-free transformations and the twice-precision dot product.

The reference throughout is exact rational arithmetic (Python's ``fractions.Fraction``, every
double converted exactly), an implementation independent of the module. The error bound of
Dot2 is the one Ogita, Rump & Oishi (2005, "Accurate sum and dot product", SIAM J. Sci.
Comput. 26(6), Proposition 5.5) state, quoted from memory: |dot2 − xᵀy| ≤ u·|xᵀy| + γₙ²·|x|ᵀ|y|
with u = 2⁻⁵³ and γₙ = n·u / (1 − n·u).

The random cases are generated with a fixed seed; the ill-conditioned dot products are built
as Ogita, Rump & Oishi describe (their GenDot, section 6): half the terms of widely spread
exponents, the other half chosen to cancel the running sum, so the exact result is tiny
beside the terms.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from pipeline.core.double_double import dot2, residual2, split, two_product, two_sum

U = 2.0 ** -53


def exact(value) -> Fraction:
    return Fraction(float(value))


def exact_dot(x, y) -> Fraction:
    return sum((exact(a) * exact(b) for a, b in zip(x, y)), Fraction(0))


def gamma(n: int) -> float:
    return n * U / (1 - n * U)


def spread_pairs(rng, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Doubles of both signs with exponents from 2⁻⁶⁰ to 2⁶⁰, paired at random."""
    def draw():
        return rng.choice([-1.0, 1.0], count) * rng.uniform(1, 2, count) * 2.0 ** rng.integers(-60, 60, count)
    return draw(), draw()


# ---------------------------------------------------------------- TwoSum and TwoProduct


def test_two_sum_keeps_what_a_cancelling_sum_loses():
    s, e = two_sum(1e16, 1.0)          # 1e16 + 1 is not a double: the 1 is lost, and kept in e
    assert s == 1e16 and e == 1.0
    s, e = two_sum(1.0, 2.0 ** -60)
    assert s == 1.0 and e == 2.0 ** -60
    s, e = two_sum(0.1, -0.1)
    assert s == 0.0 and e == 0.0


def test_two_sum_is_exact_on_pairs_of_every_size():
    a, b = spread_pairs(np.random.default_rng(1), 5000)
    s, e = two_sum(a, b)
    assert np.array_equal(s, a + b)
    assert all(exact(si) + exact(ei) == exact(ai) + exact(bi) for ai, bi, si, ei in zip(a, b, s, e))


def test_split_gives_two_halves_that_add_to_the_number():
    a, _ = spread_pairs(np.random.default_rng(2), 2000)
    high, low = split(a)
    assert all(exact(h) + exact(lo) == exact(x) for x, h, lo in zip(a, high, low))
    # each half holds at most 26 significant bits (Veltkamp's split of a 53-bit double)
    mantissas = np.abs(np.frexp(high)[0]) * 2.0 ** 26
    assert np.array_equal(mantissas, np.round(mantissas))


def test_two_product_has_the_low_part_known_by_hand():
    # (1 + 2⁻³⁰)(1 − 2⁻³⁰) = 1 − 2⁻⁶⁰: the double is 1, the rest −2⁻⁶⁰ exactly
    p, e = two_product(1 + 2.0 ** -30, 1 - 2.0 ** -30)
    assert p == 1.0 and e == -(2.0 ** -60)
    # 0.1 · 10 rounds to 1; the low part is the double 0.1's own error times ten (5.55e-17)
    p, e = two_product(0.1, 10.0)
    assert p == 1.0 and exact(e) == exact(0.1) * 10 - 1


def test_two_product_is_exact_on_pairs_of_every_size():
    a, b = spread_pairs(np.random.default_rng(3), 5000)
    p, e = two_product(a, b)
    assert np.array_equal(p, a * b)
    assert all(exact(pi) + exact(ei) == exact(ai) * exact(bi) for ai, bi, pi, ei in zip(a, b, p, e))


# ---------------------------------------------------------------- Dot2


def test_dot2_gets_sums_that_cancel_catastrophically():
    ones = np.ones(3)
    assert dot2(np.array([1e16, 1.0, -1e16]), ones) == 1.0      # the plain sum gives 0
    assert float(np.dot([1e16, 1.0, -1e16], ones)) == 0.0
    # exactly 1 + 2⁻⁶⁰, whose nearest double is 1 (2⁻⁶⁰ is below half of 1's last bit, 2⁻⁵³)
    assert dot2(np.array([2.0 ** 60, 1.0, -(2.0 ** 60), 2.0 ** -60]), np.ones(4)) == 1.0
    assert dot2(np.array([2.0 ** 60, 1.0, -(2.0 ** 60), 2.0 ** -52]), np.ones(4)) == 1.0 + 2.0 ** -52
    x = np.array([1e20, 3.0, -1e20, 1e-5, 1e20, -1e20])
    assert dot2(x, np.ones(6)) == 3.0 + 1e-5


def ill_conditioned(rng, n: int, spread: int) -> tuple[np.ndarray, np.ndarray]:
    """A dot product whose terms reach 2^spread while the exact result is near 1 (GenDot)."""
    half = n // 2
    x, y = np.zeros(n), np.zeros(n)
    exponents = np.round(rng.uniform(0, spread, half)).astype(int)
    exponents[0], exponents[-1] = spread // 2 + 1, 0
    x[:half] = (2 * rng.uniform(size=half) - 1) * 2.0 ** exponents
    y[:half] = (2 * rng.uniform(size=half) - 1) * 2.0 ** exponents
    falling = np.round(np.linspace(spread, 0, n - half)).astype(int)
    for i, exponent in zip(range(half, n), falling):
        x[i] = (2 * rng.uniform() - 1) * 2.0 ** exponent
        y[i] = ((2 * rng.uniform() - 1) * 2.0 ** exponent - float(exact_dot(x[:i], y[:i]))) / x[i]
    return x, y


@pytest.mark.parametrize("spread", [20, 60, 100])
def test_dot2_keeps_to_its_bound_where_the_plain_dot_product_does_not(spread):
    rng = np.random.default_rng(spread)
    worst_plain = 0.0
    for _ in range(20):
        x, y = ill_conditioned(rng, 30, spread)
        truth = exact_dot(x, y)
        bound = U * abs(truth) + Fraction(gamma(len(x))) ** 2 * exact_dot(np.abs(x), np.abs(y))
        assert abs(exact(dot2(x, y)) - truth) <= bound
        worst_plain = max(worst_plain, float(abs(exact(np.dot(x, y)) - truth) / max(abs(truth), 1e-300)))
    if spread >= 60:   # the plain product has lost every digit, which is what the test is for
        assert worst_plain > 1e-3


def test_dot2_along_the_last_axis_is_each_rows_dot2():
    rng = np.random.default_rng(5)
    rows = np.stack([ill_conditioned(rng, 12, 50)[0] for _ in range(8)])
    weights = rng.normal(size=12)
    together = dot2(rows, weights)
    assert np.array_equal(together, [dot2(row, weights) for row in rows])
    assert dot2(np.zeros((3, 0)), np.zeros(0)).tolist() == [0.0, 0.0, 0.0]


# ---------------------------------------------------------------- residuals


def test_residual2_is_the_exact_residual_rounded_once_on_a_nearly_exact_fit():
    # A design whose fit leaves residuals some 1e-12 of the target: the plain b − A·x loses
    # most of their digits to cancellation; residual2 keeps them.
    rng = np.random.default_rng(6)
    n, p = 200, 6
    matrix = np.column_stack([np.ones(n), *(rng.uniform(0, 1e4, n) ** k for k in range(1, p))])
    coef = rng.normal(size=p)
    target = matrix @ coef + rng.normal(0, 1e-3, n)
    ours = residual2(matrix, coef, target)
    plain = target - matrix @ coef
    truth = [exact(b) - exact_dot(row, coef) for row, b in zip(matrix, target)]
    sizes = [exact_dot(np.abs(row), np.abs(coef)) + abs(exact(b)) for row, b in zip(matrix, target)]
    for value, t, size in zip(ours, truth, sizes):
        assert abs(exact(value) - t) <= U * abs(t) + Fraction(gamma(p + 1)) ** 2 * size
    relative = max(abs(float(exact(v) - t)) / abs(float(t)) for v, t in zip(plain, truth))
    assert relative > 1e-8   # the plain residual has lost digits the check above keeps
