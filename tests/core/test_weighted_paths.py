"""With row weights, every fast cross-validation path equals refitting each candidate with the
same weights on the same folds, and the weighted scores and intervals follow their definitions.

The slow way is the method's own weighted ``fit`` (checked against statsmodels, scipy and
scikit-learn in tests/reference/test_weights_reference.py) on each training fold, without each
row, or without each window; the definitions are written out here with numpy.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core import intervals, tuning, uncertainty
from nearwise.core.data import Scaler
from nearwise.core.methods import penalized
from nearwise.core.methods.additive import Additive
from nearwise.core.methods.additive_basis import reduce_rows
from nearwise.core.methods.additive_model import FittedAdditive
from nearwise.core.methods.additive_solve import Reduced, Smoother
from nearwise.core.methods.knn import KNN
from nearwise.core.methods.linear import Linear
from nearwise.core.methods.spline import Spline
from nearwise.core.spec import IntervalSpec, TuningSpec

RIDGE = Linear().settings({"penalty": "ridge", "degree": 2})
LASSO = Linear().settings({"penalty": "lasso"})
CASES = [
    (KNN(), {"weights": "uniform", "scale": "standard"}, [1, 3, 8], 2),
    (KNN(), {"weights": "distance", "scale": "range"}, [2, 5], 2),
    (Linear(), {}, [1, 2, 3], 2),
    (Linear(), RIDGE, [30.0, 1.0, 0.01], 2),
    (Spline(), {}, [1e-4, 1e-2, 1.0], 1),
    (Spline(), {}, [1e-3, 0.1], 2),
]


def _refit_fixed(method, settings, X, y, w, value, train, Xq):
    """A weighted refit on rows ``train`` predicting at ``Xq``; ridge keeps the standardization of
    all rows (as its leave-one-out and window paths do, documented), so its refit solves the
    weighted ridge problem on the all-rows columns."""
    if settings.get("penalty") != "ridge":
        model = method.fit(X[train], y[train], settings, value, {"weights": w[train]})
        return model.predict(Xq)
    basis = penalized.Basis.fit(X, penalized.terms_for(X.shape[1], settings), w)
    Z = basis.transform(X)
    model = penalized.fit_with(basis, Z[train], y[train], "ridge", value, ("a", "b"), w=w[train])
    return model.predict(Xq)


def _data(n, p, seed=0, ties=False):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 4, size=(n, p))
    if ties:
        X = np.round(X * 2) / 2
    w = rng.uniform(0.2, 5.0, n)
    y = np.sin(X[:, 0]) + 0.3 * X[:, -1] + rng.normal(0, 0.3, n) / np.sqrt(w)
    return X, y, w


@pytest.mark.parametrize("ties", [False, True])
@pytest.mark.parametrize(
    ("method", "settings", "values", "p"), [*CASES, (Linear(), LASSO, [0.1, 0.01], 2)]
)
def test_weighted_kfold_path_equals_weighted_refits(method, settings, values, p, ties):
    X, y, w = _data(60, p, ties=ties)
    folds = tuning.make_folds(60, TuningSpec(folds=4, repeats=2, seed=3))
    path = method.path(X, y, folds, settings, values, {"weights": w})
    lasso = settings.get("penalty") == "lasso"
    for r, _f, train, test in folds.splits():
        for c, v in enumerate(values):
            refit = method.fit(X[train], y[train], settings, v, {"weights": w[train]})
            # Shared factorizations against one fit each: 1e-8 (the lasso: its solver's
            # duality-gap tolerance, from different starting points).
            tol = 1e-6 if lasso else 1e-8
            assert_allclose(path.oof[c, r, test], refit.predict(X[test]), rtol=tol, atol=tol)
        if r == 0:
            model = path.fold_models[_f]
            for c in range(len(values)):
                assert_allclose(model.predict(X[test], c), path.oof[c, 0, test], rtol=1e-10)


@pytest.mark.parametrize(("method", "settings", "values", "p"), CASES)
def test_weighted_loo_path_equals_weighted_refits(method, settings, values, p):
    X, y, w = _data(30, p, seed=1)
    folds = tuning.make_folds(30, TuningSpec(scheme="loo"))
    path = method.path(X, y, folds, settings, values, {"weights": w})
    if isinstance(method, KNN):  # kNN leave-one-out keeps the scaling of all rows
        X = Scaler.fit(X, settings["scale"]).transform(X)
        settings = {**settings, "scale": "none"}
    if isinstance(method, Spline) and p == 2:
        X = Scaler.fit(X, "standard").transform(X)  # thin-plate loo keeps it too
        settings = {"scale": "none"}
    for i in range(30):
        keep = np.arange(30) != i
        for c, v in enumerate(values):
            expect = _refit_fixed(method, settings, X, y, w, v, keep, X[[i]])[0]
            # The weighted leave-one-out identity is exact: rounding.
            assert_allclose(path.oof[c, 0, i], expect, rtol=1e-7, atol=1e-7)


@pytest.mark.parametrize(
    ("method", "settings", "values", "p"),
    [(Linear(), {}, [1, 2], 2), (Linear(), RIDGE, [10.0, 0.1], 2), (Spline(), {}, [0.01, 1.0], 1)],
)
def test_weighted_gcv_equals_its_definition(method, settings, values, p):
    """Weighted GCV: sum w (y - Ay)^2 / (sum w (1 - tr A / n)^2), A built from refits."""
    X, y, w = _data(40, p, seed=2)
    folds = tuning.make_folds(40, TuningSpec(scheme="gcv"))
    path = method.path(X, y, folds, settings, values, {"weights": w})
    scores = tuning.score(y, path.oof, folds, "rmse", path.gcv_scale, w)
    for c, v in enumerate(values):
        A = np.column_stack(
            [method.fit(X, e, settings, v, {"weights": w}).fitted for e in np.eye(40)]
        )
        gcv = np.sum(w * (y - A @ y) ** 2) / (np.sum(w) * (1 - np.trace(A) / 40) ** 2)
        assert_allclose(path.df[c], np.trace(A), rtol=1e-7)
        assert_allclose(scores.error[c] ** 2, gcv, rtol=1e-7)


def _window_folds(n_steps=30, per=2, gap=2):
    step = np.repeat(np.arange(n_steps), per)
    spec = TuningSpec(scheme="window", order_by="t")
    return step, tuning.ordered_folds(spec, step, n_steps, gap)


@pytest.mark.parametrize(("method", "settings", "values", "p"), [*CASES[:4], CASES[4]])
def test_weighted_window_path_equals_weighted_refits(method, settings, values, p):
    step, folds = _window_folds()
    X, y, w = _data(step.size, p, seed=3)
    path = method.path(X, y, folds, settings, values, {"weights": w})
    if isinstance(method, KNN):
        X = Scaler.fit(X, settings["scale"]).transform(X)
        settings = {**settings, "scale": "none"}
    for _r, _f, train, test in folds.splits():
        for c, v in enumerate(values):
            expect = _refit_fixed(method, settings, X, y, w, v, train, X[test])
            # Leave-a-set-out from hat-matrix blocks against a refit: rounding.
            assert_allclose(path.oof[c, 0, test], expect, rtol=1e-7, atol=1e-7)


def _fixed(full, X, y, w, s):
    """The additive fit to these rows and weights with the basis and lambda-hat of ``full``."""
    basis = full.basis
    red = Reduced.of(reduce_rows(basis, X, y, lambda: None, w), basis.k, y.size)
    sm = Smoother.of(red, [b for _, b in basis.blocks], full.smoother.lam_hat)
    return FittedAdditive(basis, sm, s, X, y, full.names, w)


def test_weighted_additive_paths_equal_refits():
    X, y, w = _data(60, 2, seed=4)
    values = [10.0, 1.0, 0.1]
    folds = tuning.make_folds(60, TuningSpec(folds=4, seed=3))
    work = {"weights": w}
    path = Additive().path(X, y, folds, {}, values, work)
    for _r, _f, train, test in folds.splits():
        for c, v in enumerate(values):
            fold_work = {"basis": work["basis"], "weights": w[train]}
            refit = Additive().fit(X[train], y[train], {}, v, fold_work)
            # Stacked per-fold factors vs a direct QR, and a REML search: 1e-6 (as unweighted).
            assert_allclose(path.oof[c, 0, test], refit.predict(X[test]), rtol=1e-6, atol=1e-6)
    full = Additive().fit(X, y, {}, 1.0, {"weights": w})
    Xl, yl, wl = X[:30], y[:30], w[:30]
    loo = Additive().path(
        Xl, yl, tuning.make_folds(30, TuningSpec(scheme="loo")), {}, values, {"weights": wl}
    )
    full = Additive().fit(Xl, yl, {}, 1.0, {"weights": wl})
    for i in range(30):
        keep = np.arange(30) != i
        for c, v in enumerate(values):
            expect = _fixed(full, Xl[keep], yl[keep], wl[keep], v).predict(Xl[[i]])
            assert_allclose(loo.oof[c, 0, i], expect[0], rtol=1e-8, atol=1e-8)
    _, wfolds = _window_folds(20, 3, 1)
    Xw, yw, ww = _data(60, 2, seed=5)
    wpath = Additive().path(Xw, yw, wfolds, {}, values, {"weights": ww})
    fullw = Additive().fit(Xw, yw, {}, 1.0, {"weights": ww})
    for _r, _f, train, test in wfolds.splits():
        for c, v in enumerate(values):
            expect = _fixed(fullw, Xw[train], yw[train], ww[train], v).predict(Xw[test])
            assert_allclose(wpath.oof[c, 0, test], expect, rtol=1e-7, atol=1e-7)


@pytest.mark.parametrize(
    ("method", "settings", "value", "p"),
    [
        (KNN(), {"weights": "uniform", "scale": "none"}, 5, 2),
        (Linear(), {}, 2, 2),
        (Linear(), RIDGE, 0.5, 2),
        (Spline(), {}, 0.05, 1),
        (Spline(), {"scale": "none"}, 0.01, 2),
        (Additive(), {}, 0.5, 2),
    ],
)
def test_weighted_leave_one_out_predictions_equal_refits(method, settings, value, p):
    """The updates behind jackknife+ equal refitting without each row, weights kept."""
    X, y, w = _data(30, p, seed=6)
    Xq = np.random.default_rng(7).uniform(-0.5, 4.5, (5, p))
    model = method.fit(X, y, settings, value, {"weights": w})
    loo = model.loo_predictions(Xq)(np.arange(5))
    for i in range(30):
        keep = np.arange(30) != i
        if isinstance(method, Additive):
            expect = _fixed(model, X[keep], y[keep], w[keep], value).predict(Xq)
        else:
            expect = _refit_fixed(method, settings, X, y, w, value, keep, Xq)
        assert_allclose(loo[:, i], expect, rtol=1e-8, atol=1e-8)


def test_weighted_scores_are_weighted_means_per_fold():
    """The definition written out: each fold's weighted mean of squared errors; the pooled
    error sqrt(sum w e^2 / sum w); the standard error from the folds' errors."""
    X, y, w = _data(40, 2, seed=8)
    folds = tuning.make_folds(40, TuningSpec(folds=4, seed=1))
    path = Linear().path(X, y, folds, {}, [1, 2], {"weights": w})
    scores = tuning.score(y, path.oof, folds, "rmse", None, w)
    ids = folds.fold_id[0]
    for c in range(2):
        e2 = (y - path.oof[c, 0]) ** 2
        per_fold = np.array([np.sum((w * e2)[ids == f]) / np.sum(w[ids == f]) for f in range(4)])
        assert_allclose(scores.unit_errors[c], per_fold, rtol=1e-12)
        pooled = np.sqrt(np.sum(w * e2) / np.sum(w))
        assert_allclose(scores.error[c], pooled, rtol=1e-12)
        se = np.std(per_fold, ddof=1) / 2 / (2 * pooled)
        assert_allclose(scores.error_se[c], se, rtol=1e-10)
    loo = tuning.make_folds(40, TuningSpec(scheme="loo"))
    lpath = Linear().path(X, y, loo, {}, [1], {"weights": w})
    ls = tuning.score(y, lpath.oof, loo, "mae", None, w)
    a = np.abs(y - lpath.oof[0, 0])
    mean = np.sum(w * a) / np.sum(w)
    se = np.sqrt(40 / 39 * np.sum(w**2 * (a - mean) ** 2)) / np.sum(w)
    assert_allclose([ls.error[0], ls.error_se[0]], [mean, se], rtol=1e-12)
    # Equal weights give the unweighted scores.
    same = tuning.score(y, lpath.oof, loo, "mae", None, np.full(40, 3.0))
    plain = tuning.score(y, lpath.oof, loo, "mae")
    assert_allclose([same.error, same.error_se], [plain.error, plain.error_se], rtol=1e-12)


@pytest.mark.parametrize("adaptive", [False, True])
def test_weighted_cv_plus_follows_its_definition(adaptive):
    """CV+ with weights (by brute force): the conformity score is |r_i| sqrt(w_i); the interval
    at a query row of weight w0 runs over mu_f(x0) -/+ |r_i| sqrt(w_i) / sqrt(w0)."""
    X, y, w = _data(50, 2, seed=9)
    Xq = np.random.default_rng(10).uniform(0, 4, (6, 2))
    w0 = np.array([1.0, 0.5, 2.0, 4.0, 1.0, 0.25])
    folds = tuning.make_folds(50, TuningSpec(folds=5, seed=2))
    work = {"weights": w}
    method = Linear()
    path = method.path(X, y, folds, {}, [1], work)
    model = method.fit(X, y, {}, 1, work)
    value = model.predict(Xq)
    spec = IntervalSpec(level=0.8, adaptive=adaptive)
    bars = uncertainty.compute(spec, model, path, folds, 0, X, y, Xq, value, 1.0, w=w, w_at=w0)
    r = np.abs(y - path.oof[0, 0]) * np.sqrt(w)
    spread_q = np.ones(6)
    if adaptive:
        sc = Scaler.fit(X, "standard")
        spread_q, spread_t = intervals.local_spread(sc.transform(X), r, sc.transform(Xq))
        r = r / spread_t
    mu = np.stack([fm.predict(Xq, 0) for fm in path.fold_models])[folds.fold_id[0]]  # (n, m)
    half = r[:, None] * spread_q[None, :] / np.sqrt(w0)[None, :]
    lo_k, hi_k = intervals.ranks(50, 0.8)
    lower = np.sort(mu - half, axis=0)[lo_k - 1]
    upper = np.sort(mu + half, axis=0)[hi_k - 1]
    assert_allclose(bars.lower, np.fmin(lower, value), rtol=1e-9)
    assert_allclose(bars.upper, np.fmax(upper, value), rtol=1e-9)
    # A heavier query row gets a narrower interval.
    width = bars.upper - bars.lower
    assert width[3] < width[0] < width[5]


@pytest.mark.parametrize(
    ("value", "ok"),
    [
        (0.0, True),
        (1e-100, True),
        (0.9e-100, False),
        (1e100, True),
        (1.1e100, False),
        (-1e-300, False),
    ],
)
def test_weight_bounds_just_inside_and_outside(value, ok):
    """A weight is 0 or within [1e-100, 1e100]: its reciprocal and square root stay far inside
    the doubles."""
    from nearwise.core.data import Table, prepare
    from nearwise.core.errors import BadCell

    X, y, w = _data(12, 1, seed=11)
    w[4] = value
    train = Table("train", ("x", "y", "w"), np.column_stack([X, y, w]))
    if ok:
        data = prepare(train, "y", None, None, None, None, "w")
        assert data.features == ("x",)
        assert data.rows_zero_weight == (1 if value == 0 else 0)
        assert data.X.shape[0] == (11 if value == 0 else 12)
    else:
        with pytest.raises(BadCell) as info:
            prepare(train, "y", None, None, None, None, "w")
        assert info.value.where[0].path == ("train", "rows", 4, 2)
