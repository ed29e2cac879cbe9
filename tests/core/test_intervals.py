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
