"""kNN's default grid grows with the rows (issue 14, item 2): its rule, and its top beyond the
best k on smooth surfaces up to the row limit.

The top K = max(50, ceil(m^(4/(4+p)))) follows the rate of the best k for twice-differentiable
surfaces, a k of order n^(4/(4+p)) (handbook formula: bias^2 of order (k/n)^(4/p) against
variance sigma^2/k; Gyorfi, Kohler, Krzyzak & Walk 2002, ch. 6, whose Thm 6.2 gives the
Lipschitz rate the same way). The best k on each surface is found with scikit-learn: the
neighbors from ``NearestNeighbors`` and their running means, which are
``KNeighborsRegressor``'s uniform averages (checked against it directly at some k).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn.neighbors import KNeighborsRegressor, NearestNeighbors
from sklearn.preprocessing import StandardScaler

from nearwise.core.data import Table
from nearwise.core.methods import knn_grid
from nearwise.core.pipeline import run, setup
from nearwise.core.spec import Job, TuningSpec

SURFACES = {
    "sine": lambda X: np.sin(3 * X.sum(axis=1) / np.sqrt(X.shape[1])),
    "bump": lambda X: np.exp(-8 * ((X - 0.5) ** 2).sum(axis=1)),
    "quadratic": lambda X: ((X - 0.3) ** 2).sum(axis=1),
}
NOISE = 0.3


def _truth_rmse(X, y, Xq, fq, ks):
    """Root mean squared error against the noiseless surface at ``Xq`` of the k-neighbor
    average fitted to (X, y), for each k in ``ks`` (features standard-scaled, as `knn` does)."""
    sc = StandardScaler().fit(X)
    nn = NearestNeighbors(n_neighbors=int(max(ks))).fit(sc.transform(X))
    ind = nn.kneighbors(sc.transform(Xq), return_distance=False)
    means = np.cumsum(y[ind], axis=1)[:, np.asarray(ks) - 1] / np.asarray(ks)
    return np.sqrt(((means - fq[:, None]) ** 2).mean(axis=0)), sc


# -- the rule --------------------------------------------------------------------------------
@pytest.mark.parametrize(("m", "p"), [(353, 2), (354, 2), (133, 1), (134, 1), (52, 2)])
def test_the_top_follows_the_rate_with_50_as_its_floor(m, p) -> None:
    # Just inside and just outside the floor: 353^(2/3) = 49.98 and 354^(2/3) = 50.05;
    # 133^(4/5) = 49.87 and 134^(4/5) = 50.17. Small folds cap it at m - 1.
    rate = math.ceil(m ** (4 / (4 + p)))  # the handbook rate, computed here on its own
    assert knn_grid.top(m, p) == min(max(50, rate), m - 1)
    grid = knn_grid.values(m, p)
    if knn_grid.top(m, p) <= 50:
        assert grid == list(range(1, knn_grid.top(m, p) + 1))  # every integer, as before
    else:
        assert grid[0] == 1 and grid[-1] == knn_grid.top(m, p) == 51
        assert len(grid) <= 50 and grid == sorted(set(grid))


def test_a_large_grid_is_log_spaced_and_holds_50_values_at_most() -> None:
    m, p = 200_000, 2
    grid = np.array(knn_grid.values(m, p))
    assert grid[-1] == math.ceil(200_000 ** (2 / 3)) == 3420
    assert len(grid) <= 50
    step = grid[-1] ** (1 / 49)  # 50 values evenly spaced in log k from 1 to K
    ratios = grid[1:] / grid[:-1]
    big = grid[1:] > 20  # above 20 the rounding no longer merges values
    assert np.allclose(ratios[big], step, rtol=0.06)
    assert knn_grid.top(10, 2) == 9  # a fold of 10 rows: at most 9 neighbors


def test_the_pipeline_offers_the_default_grid() -> None:
    rng = np.random.default_rng(4)
    X = rng.uniform(0, 1, (2_000, 1))
    y = np.sin(3 * X[:, 0]) + rng.normal(0, NOISE, 2_000)
    result = run(Job("knn", Table("train", ("x", "y"), np.column_stack([X, y])), "y"))
    ks = [e.params["k"] for e in result.tuning.path][::-1]
    assert ks == knn_grid.values(1_600, 1)  # 5 folds of 400 rows
    assert ks[-1] == math.ceil(1_600**0.8) == 366


# -- the top lies beyond the best k at the row limit ------------------------------------------
@pytest.mark.slow
@pytest.mark.parametrize("p", [1, 2, 3])
def test_the_top_lies_beyond_the_best_k_at_the_row_limit(p) -> None:
    # Training folds of 200,000 rows: 5 folds of the row limit, 250,000.
    m = 200_000
    rng = np.random.default_rng(20 + p)
    X = rng.uniform(0, 1, (m, p))
    Xq = rng.uniform(0, 1, (1_000, p))
    top = knn_grid.top(m, p)
    ks = np.unique(np.rint(np.geomspace(1, 1.5 * top, 70)).astype(int))
    for name, f in SURFACES.items():
        y = f(X) + rng.normal(0, NOISE, m)
        err, sc = _truth_rmse(X, y, Xq, f(Xq), ks)
        best = int(ks[np.argmin(err)])
        # The best k lies inside the grid, with room: measured 0.27 to 0.61 of the top.
        assert best <= 0.75 * top, (name, p, best, top)
        # What the running means stand for: KNeighborsRegressor at the best k.
        sk = KNeighborsRegressor(n_neighbors=best).fit(sc.transform(X), y)
        direct = np.sqrt(((sk.predict(sc.transform(Xq)) - f(Xq)) ** 2).mean())
        assert direct == pytest.approx(err.min(), rel=1e-9)


# -- the check: 100,000 rows of a smooth 2-D surface ---------------------------------
def _cv_errors(X, y, fold_id, ks):
    """5-fold mean squared error of every k in ``ks``, with scikit-learn's neighbors on the
    same folds (features standard-scaled on each training fold, as `knn` does)."""
    sq = np.zeros(len(ks))
    for f in np.unique(fold_id):
        train, test = fold_id != f, fold_id == f
        sc = StandardScaler().fit(X[train])
        nn = NearestNeighbors(n_neighbors=int(max(ks))).fit(sc.transform(X[train]))
        Xt, yt, ytr = sc.transform(X[test]), y[test], y[train]
        for at in range(0, Xt.shape[0], 1_000):  # in blocks: 1,000 x 4,000 neighbors each
            ind = nn.kneighbors(Xt[at : at + 1_000], return_distance=False)
            means = np.cumsum(ytr[ind], axis=1)[:, np.asarray(ks) - 1] / np.asarray(ks)
            sq += ((means - yt[at : at + 1_000, None]) ** 2).sum(axis=0)
    return sq / y.size


@pytest.mark.slow
def test_at_100000_rows_the_chosen_k_is_as_good_as_the_best_on_a_wide_grid() -> None:
    n = 100_000
    rng = np.random.default_rng(14)
    X = rng.uniform(0, 1, (n, 2))
    f = SURFACES["sine"]
    y = f(X) + rng.normal(0, NOISE, n)
    Xq = rng.uniform(0, 1, (2_000, 2))  # held out: never seen by the fit
    train = Table("train", ("a", "b", "y"), np.column_stack([X, y]))
    job = Job("knn", train, "y", tuning=TuningSpec(rule="min"))
    result = run(job)
    assert "tuning_at_edge" not in [w.code for w in result.warnings]
    path = result.tuning.path  # simplest (largest k) first
    chosen = result.params["k"]
    assert path[0].params["k"] == knn_grid.top(80_000, 2) == 1857

    # The best k on a wide grid, twice past the top, scored with scikit-learn's neighbors on
    # the same folds (the rows in the service's working order, with its fold of each row).
    ctx = setup(job)
    wide = np.unique(np.rint(np.geomspace(1, 4_000, 80)).astype(int))
    best_wide = int(wide[np.argmin(_cv_errors(ctx.X, ctx.y, ctx.folds.fold_id[0], wide))])

    err, sc = _truth_rmse(X, y, Xq, f(Xq), [chosen, best_wide, 50])
    # Held-out error against the surface: within 5 % of the wide grid's best k.
    assert err[0] <= 1.05 * err[1], (chosen, best_wide, err)
    sk = KNeighborsRegressor(n_neighbors=chosen).fit(sc.transform(X), y)
    direct = np.sqrt(((sk.predict(sc.transform(Xq)) - f(Xq)) ** 2).mean())
    assert direct == pytest.approx(err[0], rel=1e-9)
    # The old grid (k <= 50) stopped at its end, far worse (measured: 2.3 times the best).
    assert err[2] > 1.5 * err[1]
