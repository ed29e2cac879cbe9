"""kNN's default grid of k: it grows with the rows, spaced on a log scale.

The k that balances the noise of a k-average (sigma^2 / k) against its bias grows with the
rows n. When the bias of an average over the k nearest of n rows in p dimensions is of order
(k/n)^(2/p) (a twice-differentiable surface, at rows away from the edge of the data), the
balance is at k of order n^(4/(4+p)); for a Lipschitz surface the same argument gives
n^(2/(2+p)) (Gyorfi, Kohler, Krzyzak & Walk 2002, *A Distribution-Free Theory of
Nonparametric Regression*, Thm 6.2). The default grid therefore runs up to

    K = max(MIN_TOP, ceil(m ** (4 / (4 + p)))),  at most m - 1,

m being the rows of the smallest training fold and p the features. On smooth surfaces with
noise (sine, Gaussian bump, quadratic, plane; noise sd 0.1 to 0.3 of a unit amplitude) the k of
least held-out error was measured at 0.1 to 0.6 K for 1 to 3 features (0.95 K for the bump in
4), up to 250,000 rows; tests/core/test_knn_grid.py checks it stays below 0.75 K at the row
limit. The one-standard-error rule chooses a simpler k than that, up to about 3 times larger
on 100,000 rows, and can reach K there (`tuning_at_edge`).

The grid holds at most GRID_SIZE values: every integer up to K when K <= GRID_SIZE, otherwise
GRID_SIZE values spaced evenly on a log scale from 1 to K, rounded, repeats dropped (each
about 100 * (K^(1/49) - 1) % above the last at the top: 18 % at K = 3,420). Neighboring k
that close give nearly the same error, and the grid's memory (one out-of-fold prediction per
row and candidate) stays that of the 50 candidates of the first releases.
"""

from __future__ import annotations

import math

import numpy as np

#: The grid's top is never below this (the whole grid 1..50 of the first releases).
MIN_TOP = 50
#: The most values in the default grid.
GRID_SIZE = 50

DOC = (
    "k from 1 to K = max(50, ceil(m^(4/(4+p)))), at most m - 1, with m the rows of the "
    "smallest training fold and p the features (the rate at which the best k grows with the "
    "rows on smooth surfaces); every integer when K <= 50, otherwise 50 values spaced evenly "
    "on a log scale, rounded (repeats dropped)"
)


def top(min_train: int, p: int) -> int:
    """K, the largest k of the default grid, for training folds of ``min_train`` rows and
    ``p`` features (at least 1)."""
    rate = math.ceil(min_train ** (4.0 / (4.0 + max(p, 1))))
    return max(1, min(max(MIN_TOP, rate), min_train - 1))


def values(min_train: int, p: int) -> list[int]:
    """The default grid, ascending."""
    k_top = top(min_train, p)
    if k_top <= GRID_SIZE:
        return list(range(1, k_top + 1))
    grid = np.unique(np.rint(np.geomspace(1.0, k_top, GRID_SIZE)).astype(int))
    return [int(k) for k in grid]
