"""pipeline/core/double_double.py: error-free transformations and the twice-precision dot product.

The reference throughout is exact rational arithmetic (Python's ``fractions.Fraction``, every
double converted exactly), an implementation independent of the module. The error bound of
Dot2 is the one Ogita, Rump & Oishi (2005, "Accurate sum and dot product", SIAM J. Sci.
Comput. 26(6), Proposition 5.5) state, quoted from memory: |dot2 − xᵀy| ≤ u·|xᵀy| + γₙ²·|x|ᵀ|y|
with u = 2⁻⁵³ and γₙ = n·u / (1 − n·u).

The powers' reference is the exact power of the double (a ``Fraction``), rounded to the
nearest double by CPython's correctly rounded integer division (``float(Fraction)``, as
Python's documentation of ``int.__truediv__`` and ``Fraction.__float__`` describes it).

The random cases are generated with a fixed seed; the ill-conditioned dot products are built
as Ogita, Rump & Oishi describe (their GenDot, section 6): half the terms of widely spread
exponents, the other half chosen to cancel the running sum, so the exact result is tiny
beside the terms.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from pipeline.core.double_double import SAFE_SPLIT, dot2, power2, residual2, split, two_product, two_sum

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


# ---------------------------------------------------------------- powers


def rounded_power(value: float, k: int) -> float:
    """The exact k-th power of the double ``value``, rounded once to the nearest double (inf
    beyond the largest)."""
    try:
        return float(exact(value) ** k)
    except OverflowError:
        return float("inf") if value > 0 or k % 2 == 0 else float("-inf")


def power_cases(rng, count: int) -> np.ndarray:
    """Doubles of both signs: spread from 2⁻⁴⁰ to 2⁴⁰, near 1 (within 1e-6 and 1e-12), near
    powers of two and ten, and whole numbers with few bits (whose powers are often exact)."""
    signs = lambda n: rng.choice([-1.0, 1.0], n)   # noqa: E731
    n = count // 5
    return np.concatenate([
        signs(n) * rng.uniform(1, 2, n) * 2.0 ** rng.integers(-40, 40, n),
        signs(n) * (1 + rng.uniform(-1e-6, 1e-6, n)),
        signs(n) * (1 + rng.uniform(-1e-12, 1e-12, n)) * 10.0 ** rng.integers(-5, 6, n),
        signs(n) * rng.uniform(0, 3, n),
        signs(n) * rng.integers(1, 2 ** 20, n).astype(float),
    ])


def ulps_off(values, truth) -> np.ndarray:
    """How many units in the last place of the truth each value is from it (0 when equal)."""
    values, truth = np.asarray(values), np.asarray(truth)
    same = values == truth
    with np.errstate(invalid="ignore"):
        off = np.abs(values - truth) / np.spacing(np.abs(truth))
    return np.where(same, 0.0, off)


def test_power2_is_the_correctly_rounded_power_where_plain_pow_may_not_be():
    values = power_cases(np.random.default_rng(7), 5000)
    powers = power2(values, 10)
    assert len(powers) == 10 and powers[0] is not None
    assert np.array_equal(powers[0], values)   # the first power is the number itself
    ours_wrong = plain_wrong = 0
    for k in range(2, 11):
        truth = np.array([rounded_power(v, k) for v in values])
        ours, plain = ulps_off(powers[k - 1], truth), ulps_off(values ** k, truth)
        assert ours.max() <= 1.0, k
        ours_wrong += int((ours > 0).sum())
        plain_wrong += int((plain > 0).sum())
    # correctly rounded in all but the rarest cases (a power within ~k·2⁻¹⁰⁴ of a midpoint),
    # and never worse, in count, than the plain power
    assert ours_wrong <= 2
    assert ours_wrong <= plain_wrong


def test_power2_rounds_a_power_plain_repeated_multiplication_gets_wrong():
    # 1 + 2⁻⁵² cubed is 1 + 3·2⁻⁵² + 3·2⁻¹⁰⁴ + 2⁻¹⁵⁶ exactly; its nearest double is 1 + 3·2⁻⁵²
    # (by hand). 1.1 to the 10th: every product rounded in turn drifts; the exact power's
    # rounding is the reference (Fraction).
    x = 1 + 2.0 ** -52
    assert power2(np.array([x]), 3)[2][0] == 1 + 3 * 2.0 ** -52
    values = np.array([1.1, -1.1, 0.7, 3.3, -0.3])
    tenth = power2(values, 10)[9]
    assert tenth.tolist() == [rounded_power(v, 10) for v in values]
    repeated = values.copy()
    for _ in range(9):
        repeated = repeated * values
    assert not np.array_equal(repeated, tenth)   # the naive product is off, which is the point


def test_power2_keeps_signs_and_zeros_as_plain_powers_do():
    values = np.array([0.0, -0.0, -2.0, -1e-200, 1e-200, 5e-324])
    for k, column in enumerate(power2(values, 7), start=1):
        expected = values ** k
        assert np.array_equal(column, expected), k
        assert np.array_equal(np.signbit(column), np.signbit(expected)), k


def test_power2_in_the_subnormal_range_is_within_one_unit_of_the_truth():
    rng = np.random.default_rng(8)
    values = rng.choice([-1.0, 1.0], 500) * rng.uniform(1, 2, 500) * 2.0 ** rng.integers(-160, -100, 500)
    for k, column in enumerate(power2(values, 10), start=1):
        truth = np.array([rounded_power(v, k) for v in values])
        assert ulps_off(column, truth).max() <= 1.0, k


def test_power2_beyond_the_safe_split_is_the_plain_power_inf_included_never_nan():
    # 1e31 to the 9th is 1e279 (split safe) and to the 10th 1e310 (inf); 1e34⁹ = 1e306 is
    # finite but beyond SAFE_SPLIT (about 7e299); 1e300 is beyond it already; 1.7e308 squares
    # to inf.
    values = np.array([1e31, -1e31, 1e34, -1e34, 1e300, -1e300, 1.7e308, 1e-320, 2.0])
    with np.errstate(over="ignore"):
        powers = power2(values, 10)
        for k, column in enumerate(powers, start=1):
            plain = values ** k
            assert not np.isnan(column).any(), k
            assert np.array_equal(np.isinf(column), np.isinf(plain)), k
            assert np.array_equal(column[np.abs(column) >= SAFE_SPLIT], plain[np.abs(column) >= SAFE_SPLIT])
    assert powers[9][0] == np.inf and powers[8][1] == rounded_power(-1e31, 9)
    assert np.isfinite(powers[8][2]) and powers[8][2] == 1e34 ** 9
    assert powers[1][4] == np.inf and powers[2][5] == -np.inf
    assert powers[9][8] == 1024.0
