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

from pipeline.core.double_double import (
    SAFE_SPLIT,
    Halves,
    dot2,
    power2,
    residual_block2,
    split,
    split_product,
    sum2,
    sum2_pair,
    transposed_residual2,
    two_product,
    two_sum,
)

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


def test_the_refinements_residual_is_the_exact_one_rounded_once_on_a_nearly_exact_fit():
    # A design whose fit leaves residuals some 1e-12 of the target: the plain b − A·x loses
    # most of their digits to cancellation; residual_block2 (as the refinement calls it) keeps them.
    rng = np.random.default_rng(6)
    n, p = 200, 6
    matrix = np.column_stack([np.ones(n), *(rng.uniform(0, 1e4, n) ** k for k in range(1, p))])
    coef = rng.normal(size=p)
    target = matrix @ coef + rng.normal(0, 1e-3, n)
    ours = residual_block2(matrix, coef, (target,))
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


# ---------------------------------------------------------------- Sum2 and the block kernels
#
# The bound, quoted from memory (the numbering not checked against the paper): Ogita, Rump &
# Oishi (2005), "Accurate sum and dot product", section 4, Sum2's bound (their Theorem 4.4 /
# Proposition 4.5), the same form as Dot2's Proposition 5.5 with the n terms' absolute values:
# |sum2 − s| ≤ u·|s| + γₙ²·Σ|xᵢ|. sum2 adds by a pairwise tree of TwoSums rather than the
# cascade, which meets the same bound (each level's errors are kept). The kernels below sum
# products split exactly by TwoProduct, so theirs is Dot2's bound itself, with one term more
# for each array added (the start, each of the terms).


def exact_sum(values) -> Fraction:
    return sum((exact(v) for v in values), Fraction(0))


def sum_bound(values, truth: Fraction) -> Fraction:
    """u·|s| + γₙ²·Σ|xᵢ| for the n values (Ogita, Rump & Oishi's bound, as quoted above)."""
    return U * abs(truth) + Fraction(gamma(max(len(values), 1))) ** 2 * exact_sum(np.abs(values))


def ill_conditioned_sum(rng, n: int, spread: int) -> np.ndarray:
    """A sum whose terms reach 2^spread while the exact sum is near 1: GenDot's construction
    (section 6) applied to a sum, half the terms of spread exponents, the rest each cancelling
    the exact running sum; then shuffled."""
    half = n // 2
    x = np.zeros(n)
    exponents = np.round(rng.uniform(0, spread, half)).astype(int)
    exponents[0] = spread
    x[:half] = (2 * rng.uniform(size=half) - 1) * 2.0 ** exponents
    running = exact_sum(x[:half])
    falling = np.round(np.linspace(spread, 0, n - half)).astype(int)
    for i, exponent in zip(range(half, n), falling):
        x[i] = (2 * rng.uniform() - 1) * 2.0 ** exponent - float(running)
        running += exact(x[i])
    rng.shuffle(x)
    return x


def test_sum2_gets_sums_that_cancel_catastrophically():
    # by hand: 1e16 + 1 is not a double, so the plain sum loses the 1
    assert sum2(np.array([1e16, 1.0, -1e16])) == 1.0
    assert float(np.sum([1e16, 1.0, -1e16])) == 0.0
    assert sum2(np.array([1.0, 1e16, -1e16, 1.0])) == 2.0
    assert sum2(np.array([2.0 ** 60, 1.0, -(2.0 ** 60), 2.0 ** -52])) == 1.0 + 2.0 ** -52
    # exactly 1 + 2⁻⁶⁰, whose nearest double is 1
    assert sum2(np.array([2.0 ** 60, 1.0, 2.0 ** -60, -(2.0 ** 60)])) == 1.0
    assert sum2(np.array([1e20, 3.0, -1e20, 1e-5, 1e20, -1e20, 0.5])) == 3.5 + 1e-5


def test_sum2_pair_keeps_what_the_tree_lost_beside_it():
    # the tree adds (1e16, 1) → 1e16 with 1 lost, (−1e16, 0) → −1e16, then 0: by hand
    total, errors = sum2_pair(np.array([1e16, 1.0, -1e16]))
    assert (float(total), float(errors)) == (0.0, 1.0)
    total, errors = sum2_pair(np.zeros((2, 0)))
    assert total.tolist() == [0.0, 0.0] and errors.tolist() == [0.0, 0.0]


@pytest.mark.parametrize("spread", [20, 60, 100])
def test_sum2_keeps_to_its_bound_where_the_plain_sum_does_not(spread):
    rng = np.random.default_rng(100 + spread)
    worst_plain = 0.0
    for n in (3, 30, 101, 256):
        for _ in range(5):
            x = ill_conditioned_sum(rng, n, spread)
            truth = exact_sum(x)
            assert abs(exact(sum2(x)) - truth) <= sum_bound(x, truth), n
            total, errors = sum2_pair(x)   # before the errors are added: the exact sum still in the pair
            assert abs(exact(total) + exact(errors) - truth) <= sum_bound(x, truth), n
            worst_plain = max(worst_plain, float(abs(exact(np.sum(x)) - truth)) / max(abs(float(truth)), 1e-300))
    if spread >= 60:   # the plain sum has lost every digit, which is what the test is for
        assert worst_plain > 1e-3


@pytest.mark.parametrize("n", [0, 1, 2, 3, 4, 5, 7, 8, 9, 31, 32, 33, 1000, 1001])
def test_sum2_of_odd_and_even_lengths_meets_the_exact_sum(n):
    rng = np.random.default_rng(n)
    x = ill_conditioned_sum(rng, n, 50) if n >= 2 else rng.normal(size=n) * 1e10
    truth = exact_sum(x)
    found = sum2(x)
    assert np.shape(found) == ()
    assert abs(exact(found) - truth) <= sum_bound(x, truth)
    if n == 0:
        assert found == 0.0
    if n == 1:
        assert found == x[0]   # one term: the sum is the term, nothing rounded


def test_sum2_along_either_axis_of_a_matrix_meets_each_exact_sum():
    rng = np.random.default_rng(9)
    columns = np.column_stack([ill_conditioned_sum(rng, 41, 70) for _ in range(6)])   # 41 x 6
    down = sum2(columns, axis=0)
    across = sum2(columns.T, axis=-1)
    default = sum2(columns.T)
    assert down.shape == across.shape == default.shape == (6,)
    for j in range(6):
        truth = exact_sum(columns[:, j])
        for found in (down, across, default):
            assert abs(exact(found[j]) - truth) <= sum_bound(columns[:, j], truth), j
    plain = columns.sum(axis=0)
    assert max(abs(float(exact(plain[j]) - exact_sum(columns[:, j]))) for j in range(6)) > 1e-3


# ---------------------------------------------------------------- Halves and split_product


def test_halves_of_a_matrix_add_to_it_and_a_column_keeps_its_shape():
    a, _ = spread_pairs(np.random.default_rng(10), 600)
    halves = Halves(a.reshape(200, 3))
    assert np.array_equal(halves.high + halves.low, halves.values)   # exact: see the next check
    assert all(exact(h) + exact(lo) == exact(v)
               for h, lo, v in zip(halves.high.ravel(), halves.low.ravel(), halves.values.ravel()))
    column = halves.column(1)
    assert column.values.shape == column.high.shape == column.low.shape == (200, 1)
    assert column.values[:, 0].tolist() == a.reshape(200, 3)[:, 1].tolist()
    assert Halves.of(halves) is halves


def test_split_product_is_exact_on_pairs_of_every_size_and_broadcasts_a_column_by_a_row():
    rng = np.random.default_rng(11)
    a, b = spread_pairs(rng, 3000)
    p, e = split_product(Halves(a), b)
    assert np.array_equal(p, a * b)
    assert all(exact(pi) + exact(ei) == exact(ai) * exact(bi) for ai, bi, pi, ei in zip(a, b, p, e))
    # a column (rows × 1) times a row (1 × k): every product exact, as residual_block2 uses it
    matrix, row = a.reshape(1000, 3), b[:4].reshape(1, 4)
    p, e = split_product(Halves(matrix).column(2), row)
    assert p.shape == e.shape == (1000, 4)
    assert all(exact(p[i, k]) + exact(e[i, k]) == exact(matrix[i, 2]) * exact(row[0, k])
               for i in range(1000) for k in range(4))


def assert_within_where_plain_is_not(found, plain, truth, bound) -> None:
    """Every entry of ``found`` is within ``bound(i, m)`` of the exact ``truth``, and at least
    one entry of the plain numpy computation is not."""
    plain_missed = False
    for i in range(found.shape[0]):
        for m in range(found.shape[1]):
            limit = bound(i, m)
            assert abs(exact(found[i, m]) - truth[i][m]) <= limit, (i, m)
            plain_missed |= abs(exact(plain[i, m]) - truth[i][m]) > limit
    assert plain_missed


# ---------------------------------------------------------------- transposed_residual2


def long_design(rng, rows: int, columns: int) -> np.ndarray:
    """Columns of widely spread magnitudes (2⁻²⁰ to 2²⁰ within each column), of both signs."""
    return rng.normal(size=(rows, columns)) * 2.0 ** rng.integers(-20, 20, size=(rows, columns))


def exact_transposed_residual(start, a, b) -> list[list[Fraction]]:
    """start − aᵀb entry by entry in rationals (start None: zero); b as rows × k."""
    p, k = a.shape[1], b.shape[1]
    columns = [[exact(v) for v in a[:, j]] for j in range(p)]
    rights = [[exact(v) for v in b[:, m]] for m in range(k)]
    begin = [[Fraction(0) if start is None else exact(start[j, m]) for m in range(k)] for j in range(p)]
    return [[begin[j][m] - sum(x * y for x, y in zip(columns[j], rights[m])) for m in range(k)]
            for j in range(p)]


def transposed_bound(start, a, b, truth: Fraction, j: int, m: int) -> Fraction:
    """Dot2's bound for the n rows' products and the start: u·|s| + γₙ₊₁²·(|start| + Σ|a·b|)."""
    size = exact_dot(np.abs(a[:, j]), np.abs(b[:, m])) + (0 if start is None else abs(exact(start[j, m])))
    return U * abs(truth) + Fraction(gamma(len(a) + 1)) ** 2 * size


@pytest.mark.parametrize("right", ["vector", "matrix"])
def test_transposed_residual2_of_a_long_design_meets_the_exact_residual(right):
    """start = aᵀb as numpy computes it, so start − aᵀb is its rounding error alone (the
    augmented system's residual g near convergence): the plain subtraction has no digit of it."""
    rng = np.random.default_rng(12)
    a = long_design(rng, 5001, 4)
    b = rng.normal(size=5001) if right == "vector" else rng.normal(size=(5001, 3))
    start = a.T @ b
    found = transposed_residual2(start, a, b)
    assert found.shape == start.shape
    as_matrix = (lambda v: v[:, None]) if right == "vector" else (lambda v: v)
    b2, start2, found2 = as_matrix(b), as_matrix(start), as_matrix(found)
    truth = exact_transposed_residual(start2, a, b2)
    plain = as_matrix(start - a.T @ b)
    assert_within_where_plain_is_not(found2, plain, truth,
                                     lambda j, m: transposed_bound(start2, a, b2, truth[j][m], j, m))


def test_transposed_residual2_without_a_start_is_minus_the_exact_product():
    rng = np.random.default_rng(13)
    a = long_design(rng, 5001, 4)
    b = rng.normal(size=(5001, 2))
    found = transposed_residual2(None, Halves(a), b)   # a split beforehand, as the refinement does
    assert found.shape == (4, 2)
    truth = exact_transposed_residual(None, a, b)
    for j in range(4):
        for m in range(2):
            assert abs(exact(found[j, m]) - truth[j][m]) <= transposed_bound(None, a, b, truth[j][m], j, m)
    vector = transposed_residual2(None, a, b[:, 0])
    assert vector.shape == (4,)
    assert all(abs(exact(vector[j]) - truth[j][0]) <= transposed_bound(None, a, b, truth[j][0], j, 0)
               for j in range(4))


# ---------------------------------------------------------------- residual_block2


def exact_block_residual(a, x, terms) -> list[list[Fraction]]:
    """Σ terms − a·x entry by entry in rationals; x as p × k, each term as rows × k."""
    rows, k = a.shape[0], x.shape[1]
    coef = [[exact(x[j, m]) for m in range(k)] for j in range(a.shape[1])]
    out = []
    for i in range(rows):
        row = [exact(v) for v in a[i]]
        out.append([sum((exact(t[i, m]) for t in terms), Fraction(0))
                    - sum(r * c[m] for r, c in zip(row, coef)) for m in range(k)])
    return out


def block_bound(a, x, terms, truth: Fraction, i: int, m: int) -> Fraction:
    """Dot2's bound for the p products and the terms of one entry: u·|s| + γₙ²·Σ|·|, n = p + terms."""
    size = (sum((abs(exact(t[i, m])) for t in terms), Fraction(0))
            + exact_dot(np.abs(a[i]), np.abs(x[:, m])))
    return U * abs(truth) + Fraction(gamma(a.shape[1] + len(terms))) ** 2 * size


@pytest.mark.parametrize("right", ["vector", "matrix"])
def test_residual_block2_meets_the_exact_residual_of_a_residual(right):
    """b − r − a·x with r = b − a·x as numpy computes it: what is left is r's rounding error
    alone (the augmented system's residual f near convergence)."""
    rng = np.random.default_rng(14)
    a = long_design(rng, 2001, 4)
    x = rng.normal(size=4) if right == "vector" else rng.normal(size=(4, 3))
    b = a @ x + rng.normal(size=(a @ x).shape)
    r = b - a @ x
    found = residual_block2(a, x, (b, -r))
    assert found.shape == b.shape
    as_matrix = (lambda v: v[:, None]) if right == "vector" else (lambda v: v)
    x2, terms, found2 = as_matrix(x), (as_matrix(b), as_matrix(-r)), as_matrix(found)
    truth = exact_block_residual(a, x2, terms)
    plain = as_matrix(b - r - a @ x)
    assert_within_where_plain_is_not(found2, plain, truth,
                                     lambda i, m: block_bound(a, x2, terms, truth[i][m], i, m))


def test_residual_block2_takes_a_vector_term_beside_a_matrix_and_no_terms_at_all():
    rng = np.random.default_rng(15)
    a = long_design(rng, 300, 3)
    x = rng.normal(size=(3, 2))
    b = rng.normal(size=300) * 1e6   # one column of rows, against both right-hand sides
    found = residual_block2(a, x, (b,))
    assert found.shape == (300, 2)
    terms = (np.column_stack([b, b]),)
    truth = exact_block_residual(a, x, terms)
    assert all(abs(exact(found[i, m]) - truth[i][m]) <= block_bound(a, x, terms, truth[i][m], i, m)
               for i in range(300) for m in range(2))
    alone = residual_block2(a, x)
    truth = exact_block_residual(a, x, ())
    assert all(abs(exact(alone[i, m]) - truth[i][m]) <= block_bound(a, x, (), truth[i][m], i, m)
               for i in range(300) for m in range(2))
