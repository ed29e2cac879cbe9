"""The interval constructions against their definitions, computed the slow way."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core import intervals


def _brute(values, k):
    return np.sort(values)[k - 1]


@pytest.mark.parametrize("level", [0.5, 0.8, 0.9, 0.95])
@pytest.mark.parametrize("adaptive", [False, True])
def test_cv_plus_equals_its_definition(level, adaptive):
    """Barber et al. (2021), eq. (10): order statistics of mu_{-k(i)}(x0) -/+ R_i."""
    rng = np.random.default_rng(1)
    n, m, K = 97, 13, 5
    fold = rng.permutation(np.arange(n) % K)
    resid = np.abs(rng.normal(size=n))
    mu = rng.normal(size=(K, m))
    sq = rng.uniform(0.5, 2, m) if adaptive else None
    st = rng.uniform(0.5, 2, n) if adaptive else None
    lower, upper = intervals.cv_plus(mu, fold, resid, level, sq, st)
    k_lo, k_hi = intervals.ranks(n, level)
    for j in range(m):
        scale = 1.0 if sq is None else sq[j]
        score = resid if st is None else resid / st
        lo_vals = mu[fold, j] - scale * score
        hi_vals = mu[fold, j] + scale * score
        # Bisection to full precision: a few ulps.
        assert_allclose(lower[j], _brute(lo_vals, k_lo), rtol=1e-12, atol=1e-12)
        assert_allclose(upper[j], _brute(hi_vals, k_hi), rtol=1e-12, atol=1e-12)


def test_jackknife_plus_equals_its_definition():
    rng = np.random.default_rng(2)
    n, m = 50, 7
    resid = np.abs(rng.normal(size=n))
    loo = rng.normal(size=(m, n))
    lower, upper = intervals.jackknife_plus(lambda rows: loo[rows], m, resid, 0.9)
    k_lo, k_hi = intervals.ranks(n, 0.9)
    for j in range(m):
        assert lower[j] == _brute(loo[j] - resid, k_lo)
        assert upper[j] == _brute(loo[j] + resid, k_hi)


@pytest.mark.parametrize(
    ("n", "level", "expect"),
    [
        # Barber et al. (2021): floor(alpha (n + 1)) and ceil((1 - alpha)(n + 1)), by hand.
        (99, 0.9, (10, 90)),
        (19, 0.9, (2, 18)),  # alpha (n + 1) = 2 exactly
        (100, 0.5, (50, 51)),
        (20, 0.8, (4, 17)),
        (1000, 0.99, (10, 991)),
    ],
)
def test_ranks_by_hand(n, level, expect):
    assert intervals.ranks(n, level) == expect


def test_ranks_and_unbounded_ends():
    assert intervals.ranks(99, 0.9) == (10, 90)
    assert intervals.ranks(8, 0.9) == (0, 9)  # too few rows: both ends unbounded at 90 %
    lower, upper = intervals.cv_plus(np.zeros((2, 3)), np.arange(8) % 2, np.ones(8), 0.9)
    assert np.isneginf(lower).all() and np.isposinf(upper).all()


@pytest.mark.parametrize("upper", [False, True])
@pytest.mark.parametrize("adaptive", [False, True])
def test_kth_of_folds_direct_and_bisection_agree_with_the_definition(upper, adaptive) -> None:
    """The k-th smallest of {mu_f(x) -/+ spread(x) s : s in fold f's scores}, by its definition
    (every candidate sorted), by the direct partition and by the bisection used for large
    blocks; an undefined residual counts as +inf (it widens both ends)."""
    from nearwise.core import intervals

    rng = np.random.default_rng(5)
    folds, m = 5, 7
    parts = [np.sort(np.abs(rng.normal(0, 1, 40 + f))) for f in range(folds)]
    parts[2][-1] = np.inf
    mu = rng.normal(0, 3, (folds, m))
    spread = rng.uniform(0.5, 2.0, m) if adaptive else np.ones(m)
    sign = 1.0 if upper else -1.0
    with np.errstate(invalid="ignore"):
        every = np.concatenate(
            [mu[f][None, :] + sign * spread[None, :] * s[:, None] for f, s in enumerate(parts)]
        )
    n = every.shape[0]
    for k in (2, 17, n // 2, n - 1):  # as cv_plus asks: past the one infinite candidate
        want = np.sort(every, axis=0)[k - 1]
        direct = intervals._kth_of_folds(mu, parts, spread, k, upper)
        old = intervals.CHUNK_CELLS
        intervals.CHUNK_CELLS = 0  # force the bisection
        try:
            bisect = intervals._kth_of_folds(mu, parts, spread, k, upper)
        finally:
            intervals.CHUNK_CELLS = old
        np.testing.assert_array_equal(direct, want)  # the same sums, exactly
        # Bisection stops at the smallest value whose count reaches k: equal up to the
        # rounding of (v - mu) / spread, a few units in the last place.
        np.testing.assert_allclose(bisect, want, rtol=1e-13, atol=1e-13)


@pytest.mark.parametrize("level", [1e-13, 5e-324, 0.999999])
def test_cv_plus_at_extreme_levels_gives_the_same_ends_by_either_route(level) -> None:
    """Levels near 0 ask for order statistics beyond the n candidates (found by fuzzing: the
    direct route failed there); both routes must agree and stay ordered."""
    from nearwise.core import intervals

    rng = np.random.default_rng(3)
    n, m, folds = 6, 4, 3
    mu = rng.normal(0, 1, (folds, m))
    fold = np.arange(n) % folds
    resid = np.abs(rng.normal(0, 1, n))
    got = intervals.cv_plus(mu, fold, resid, level)
    old = intervals.CHUNK_CELLS
    intervals.CHUNK_CELLS = 0  # the bisection route
    try:
        want = intervals.cv_plus(mu, fold, resid, level)
    finally:
        intervals.CHUNK_CELLS = old
    assert_allclose(got[0], want[0], rtol=1e-13, atol=1e-13)
    assert_allclose(got[1], want[1], rtol=1e-13, atol=1e-13)
