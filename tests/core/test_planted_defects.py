"""Checks written against defects that once slipped through the suite: each test below fails
when the line it guards is broken (the line is named in each test's docstring).

- jackknife+ under ``gcv``: the bounds against refits that leave each row out (the definition
  of Barber, Candes, Ramdas & Tibshirani 2021, *Annals of Statistics* 49(1), 486-507);
- kNN ``std_error``: sigma / sqrt(k), sigma the root mean squared out-of-fold residual (the
  README's "Error figures"), against the out-of-fold residuals computed with scikit-learn;
- ``not_local`` and ``wide_neighborhood``: designs just inside, at and just outside each cut-off
  (the README's "Warnings" table);
- the cost estimate: growing with ``repeats`` alone, and the limit just under and just over;
- the one-dimensional convex hull at both ends.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.interpolate import make_smoothing_spline
from sklearn.neighbors import NearestNeighbors

from nearwise.core import cost, hull, locality, pipeline
from nearwise.core.data import Table
from nearwise.core.errors import OverLimit
from nearwise.core.spec import Caps, Job, TuningSpec


def _job(method, X, y, Xq=None, **kw) -> Job:
    cols = (*[f"x{j}" for j in range(X.shape[1])], "y")
    query = None if Xq is None else Table("query", cols[:-1], Xq)
    return Job(method, Table("train", cols, np.column_stack([X, y])), "y", query=query, **kw)


def _codes(result) -> dict:
    return {w.code: w.rows for w in result.warnings}


# -- jackknife+ under gcv -----------------------------------------------------------------------


def _jackknife_plus(mu_loo: np.ndarray, resid: np.ndarray, level: float):
    """Jackknife+ as defined by Barber et al. (2021), eq. (6): with mu_{-i} the model fitted
    without row i and R_i = |y_i - mu_{-i}(x_i)|, the lower end is the floor(alpha (n + 1))-th
    smallest of mu_{-i}(x0) - R_i and the upper end the ceil((1 - alpha)(n + 1))-th smallest of
    mu_{-i}(x0) + R_i. ``mu_loo`` is (n, queries)."""
    n = resid.size
    alpha = 1 - level
    lo = int(np.floor(alpha * (n + 1)))
    hi = int(np.ceil((1 - alpha) * (n + 1)))
    lower = np.sort(mu_loo - resid[:, None], axis=0)[lo - 1]
    upper = np.sort(mu_loo + resid[:, None], axis=0)[hi - 1]
    return lower, upper


def _brute_force(x, y, xq, refit, level):
    """Leave each row out, refit, predict there and at the queries."""
    n = x.size
    mu = np.empty((n, xq.size))
    resid = np.empty(n)
    for i in range(n):
        keep = np.arange(n) != i
        f = refit(x[keep], y[keep])
        resid[i] = abs(y[i] - f(x[i : i + 1])[0])
        mu[i] = f(xq)
    return _jackknife_plus(mu, resid, level)


def _gcv_data(seed: int, n: int = 40):
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0, 3, n))
    y = np.sin(2 * x) + rng.normal(0, 0.3, n)
    xq = np.array([0.2, 1.1, 1.5, 2.4, 2.9])
    return x, y, xq


def test_gcv_jackknife_plus_of_a_polynomial_equals_refits_without_each_row() -> None:
    """Guards uncertainty._bars: ``resid = np.abs(model.loo_residuals())`` under gcv (in-sample
    residuals y - fitted narrow the bounds by the factor 1 - h_ii)."""
    x, y, xq = _gcv_data(1)
    result = pipeline.run(
        _job("linear", x[:, None], y, xq[:, None], tuning=TuningSpec(scheme="gcv"))
    )
    assert result.interval["construction"] == "jackknife_plus"
    degree = result.params["degree"]

    def refit(xs, ys):  # least squares by numpy's polynomial fit, at the chosen degree
        coef = np.polynomial.polynomial.polyfit(xs, ys, degree)
        return lambda t: np.polynomial.polynomial.polyval(t, coef)

    lower, upper = _brute_force(x, y, xq, refit, 0.9)
    value = refit(x, y)(xq)
    p = result.predictions
    assert_allclose(p.value, value, rtol=1e-9, atol=1e-9)
    # The service widens the bounds to enclose the value (README, "Error figures").
    assert_allclose(p.lower, np.minimum(lower, value), rtol=1e-9, atol=1e-9)
    assert_allclose(p.upper, np.maximum(upper, value), rtol=1e-9, atol=1e-9)


def test_gcv_jackknife_plus_of_a_smoothing_spline_equals_refits_without_each_row() -> None:
    """The same for a one-feature smoothing spline at the chosen smoothing, refitted by scipy's
    ``make_smoothing_spline(x, y, lam)`` (the same criterion: tests/reference/
    test_spline_scipy.py). Guards the same line of uncertainty._bars."""
    x, y, xq = _gcv_data(2)
    result = pipeline.run(
        _job("spline", x[:, None], y, xq[:, None], tuning=TuningSpec(scheme="gcv"))
    )
    assert result.interval["construction"] == "jackknife_plus"
    lam = result.params["smoothing"]
    assert lam > 0

    def refit(xs, ys):
        f = make_smoothing_spline(xs, ys, lam=lam)
        lo, hi = xs[0], xs[-1]
        slope = f.derivative(1)

        def natural(t):  # the minimizer is linear beyond the end rows; scipy's BSpline
            # would extrapolate the end cubic pieces (tests/reference/test_spline_scipy.py)
            inside = f(np.clip(t, lo, hi))
            return (
                inside
                + np.where(t < lo, slope(lo) * (t - lo), 0.0)
                + np.where(t > hi, slope(hi) * (t - hi), 0.0)
            )

        return natural

    lower, upper = _brute_force(x, y, xq, refit, 0.9)
    value = refit(x, y)(xq)
    p = result.predictions
    # Two banded solvers of the same system: agreement to about 1e-8 of the data scale
    # (tests/reference/test_spline_scipy.py allows 5e-8).
    tol = 5e-8 * np.abs(y).max()
    assert_allclose(p.value, value, atol=tol)
    assert_allclose(p.lower, np.minimum(lower, value), atol=tol)
    assert_allclose(p.upper, np.maximum(upper, value), atol=tol)


# -- kNN std_error ------------------------------------------------------------------------------


@pytest.mark.parametrize("k", [2, 7])
def test_knn_std_error_is_sigma_over_root_k(k: int) -> None:
    """README "Error figures": sigma / sqrt(k), sigma the root mean squared out-of-fold
    residual of the chosen k. With ``loo`` the out-of-fold prediction of row i is the mean of
    its k nearest other rows, computed here with scikit-learn's NearestNeighbors (one feature:
    scaling does not change the order). Guards knn.FittedKNN.std_error:
    ``sigma_cv / np.sqrt(self.k)`` (with k - 1 it is sqrt(k / (k - 1)) too large)."""
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 1, 60)
    y = np.sin(6 * x) + rng.normal(0, 0.2, 60)
    xq = np.array([[0.1], [0.5], [0.9]])
    result = pipeline.run(
        _job("knn", x[:, None], y, xq, params={"k": k}, tuning=TuningSpec(scheme="loo"))
    )
    _, ind = NearestNeighbors(n_neighbors=k + 1).fit(x[:, None]).kneighbors(x[:, None])
    others = np.array([[j for j in row if j != i][:k] for i, row in enumerate(ind)])
    sigma = np.sqrt(np.mean((y - y[others].mean(axis=1)) ** 2))
    assert_allclose(result.fit.cv_error, sigma, rtol=1e-12)
    assert_allclose(result.predictions.std_error, sigma / np.sqrt(k), rtol=1e-12)


def test_knn_std_error_with_kfold_is_cv_error_over_root_k() -> None:
    """With ``kfold`` (one repeat) sigma is the root mean square of the out-of-fold residuals,
    which the answer reports as ``cv_residual`` and ``cv_error``. Guards the same line."""
    rng = np.random.default_rng(4)
    X = rng.uniform(0, 1, (80, 2))
    y = X.sum(axis=1) + rng.normal(0, 0.1, 80)
    result = pipeline.run(_job("knn", X, y, params={"k": 5}))
    sigma = np.sqrt(np.mean(result.predictions.cv_residual**2))
    assert_allclose(result.fit.cv_error, sigma, rtol=1e-12)
    assert_allclose(result.predictions.std_error, sigma / np.sqrt(5), rtol=1e-12)


# -- warning cut-offs ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("n", "p", "k", "warned"),
    [
        (100, 1, 49, False),  # e_1 = k/n = 0.49
        (100, 1, 50, False),  # e_1 = 0.5 exactly: the rule is "above 0.5"
        (100, 1, 51, True),  # 0.51
        (100, 2, 24, False),  # e_2 = sqrt(0.24) = 0.490
        (100, 2, 25, False),  # sqrt(0.25) = 0.5 exactly
        (100, 2, 26, True),  # sqrt(0.26) = 0.510
    ],
)
def test_not_local_just_inside_at_and_just_outside_the_cut_off(n, p, k, warned) -> None:
    """README "Warnings": ``not_local`` when e_p(k/n) = (k/n)^(1/p) is above 0.5 (Hastie,
    Tibshirani & Friedman 2009, section 2.5), for the k of a kNN fit and for the size asked
    of /v1/locality. Guards locality.NOT_LOCAL_EDGE = 0.5 (halved, 0.49 is warned; doubled,
    0.51 is not)."""
    rng = np.random.default_rng(5)
    X = rng.uniform(0, 1, (n, p))
    y = X.sum(axis=1) + rng.normal(0, 0.1, n)
    fit = pipeline.run(_job("knn", X, y, params={"k": k}))
    assert ("not_local" in _codes(fit)) is warned
    doc = locality.summary(X, [f"x{j}" for j in range(p)], k=k)
    assert ("not_local" in [w["code"] for w in doc["warnings"]]) is warned


@pytest.mark.parametrize(("k", "warned"), [(49, False), (51, False), (53, True)])
def test_wide_neighborhood_just_inside_at_and_just_outside_the_cut_off(k, warned) -> None:
    """README "Warnings": ``wide_neighborhood`` when the k neighbors of a query spread over
    more than 50 % of some feature's training range. On x = 0, 1, ..., 100 (``scale: none``,
    so the spreads are exact) the k = 2j + 1 neighbors of x = 50 span 2j: 48, 50 (exactly half:
    not more) and 52 of the range 100. Only the second feature spreads, so the check must look
    at every feature. Guards knn.WIDE_FRACTION = 0.5 (halved, 48 % is warned; doubled, 52 %
    is not)."""
    x = np.arange(101.0)
    X = np.column_stack([np.full(101, 7.0), x])  # the first feature is constant: no spread
    y = np.sin(x / 10)
    fit = pipeline.run(_job("knn", X, y, np.array([[7.0, 50.0]]), params={"k": k, "scale": "none"}))
    assert ("wide_neighborhood" in fit.predictions.flags[0]) is warned
    assert ("wide_neighborhood" in _codes(fit)) is warned


# -- cost ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("method", "params", "p"),
    [
        ("knn", {}, 2),
        ("linear", {}, 2),
        ("linear", {"penalty": "lasso"}, 2),
        ("spline", {}, 1),
        ("spline", {}, 2),
        ("additive", {}, 2),
    ],
)
def test_the_estimate_grows_with_repeats_alone(method, params, p) -> None:
    """Repeated K-fold fits folds x repeats models (README "Tuning options"). Guards
    cost.Shape.of: ``fits = spec.folds * spec.repeats``."""
    item = cost.Item(method, params, None)
    seconds = [
        item.seconds(cost.Shape.of(2000, p, 10, TuningSpec(folds=5, repeats=r))) for r in (1, 2, 4)
    ]
    assert seconds[0] < seconds[1] < seconds[2], seconds
    assert cost.Shape.of(2000, p, 10, TuningSpec(folds=5, repeats=4)).fits == 20


def test_the_cost_limit_just_under_and_just_over_the_estimate() -> None:
    """README "Limits": a request whose estimate exceeds the limit is refused (422
    over_limit), one at or under it runs. Guards cost.check: ``estimate <= caps.cost_s``
    (with 2 * caps.cost_s an estimate just over the limit is let through)."""
    rng = np.random.default_rng(6)
    X = rng.uniform(0, 1, (300, 2))
    y = X.sum(axis=1) + rng.normal(0, 0.1, 300)
    job = _job("knn", X, y)
    method = pipeline.get_method("knn")
    settings, grid = pipeline.check_method(method, job, job.params, job.grid)
    items = [cost.Item("knn", settings, grid)]
    shape = pipeline.shape(pipeline.setup(job))
    estimate = cost.total(items, shape)
    assert estimate > 0
    assert cost.check(items, shape, Caps(cost_s=estimate)) == estimate  # at the limit: runs
    for over in (1 + 1e-9, 1.5, 1.99, 2.5):
        with pytest.raises(OverLimit):
            cost.check(items, shape, Caps(cost_s=estimate / over))
    under = Job(job.method, job.train, job.target, caps=Caps(cost_s=estimate * (1 + 1e-9)))
    assert pipeline.run(under).method == "knn"
    over = Job(job.method, job.train, job.target, caps=Caps(cost_s=estimate * (1 - 1e-9)))
    with pytest.raises(OverLimit):
        pipeline.run(over)


# -- the convex hull in one dimension -----------------------------------------------------------


@pytest.mark.parametrize("collinear", [False, True])
def test_the_one_dimensional_hull_at_both_ends(collinear: bool) -> None:
    """README "Warnings": ``outside_hull`` is decided on the scaled features, and a point
    within 1e-7 of the largest feature range counts as inside. In one dimension (one feature,
    or rows on a line in two) the hull is the segment between the end rows: both ends inside,
    1e-8 of the range beyond either end inside, 1e-6 beyond outside. Guards
    hull._by_facets' one-dimensional test (either comparison, or the sign of its
    tolerance)."""
    t = np.array([2.0, 3.5, 5.0, 9.0, 12.0])  # range 10
    rel = np.array([0.0, 1.0, -1e-8, 1 + 1e-8, -1e-6, 1 + 1e-6, 0.5, -0.3, 1.3])
    tq = 2.0 + 10.0 * rel
    expect = [False, False, False, False, True, True, False, True, True]
    if collinear:  # a line in two dimensions: the largest range is still 10, along t
        Z, Zq = np.column_stack([t, 0.5 * t]), np.column_stack([tq, 0.5 * tq])
    else:
        Z, Zq = t[:, None], tq[:, None]
    test = hull.hull_test(Z, Zq)
    assert test.dim == 1 and test.tested.all()
    assert test.outside.tolist() == expect
    # Both ends again, with the rows in reverse order and the query rows alone.
    for i in range(len(tq)):
        assert hull.hull_test(Z[::-1], Zq[i : i + 1]).outside.tolist() == [expect[i]]
