"""Every fast cross-validation path equals refitting each candidate on the same folds.

The slow way here is the method's own ``fit`` on each training fold (or with each row left
out), whose agreement with outside references is checked in tests/reference.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core import tuning
from nearwise.core.data import Scaler
from nearwise.core.methods.additive import Additive
from nearwise.core.methods.additive_basis import reduce_rows
from nearwise.core.methods.additive_model import FittedAdditive
from nearwise.core.methods.additive_solve import Reduced, Smoother
from nearwise.core.methods.knn import KNN
from nearwise.core.methods.linear import Linear
from nearwise.core.methods.spline import Spline
from nearwise.core.spec import TuningSpec

CASES = [
    (KNN(), {"weights": "uniform", "scale": "standard"}, [1, 2, 5, 9, 20]),
    (KNN(), {"weights": "distance", "scale": "range"}, [1, 3, 8]),
    (Linear(), {}, [1, 2, 3]),
    (Linear(), {"interactions": False}, [1, 4]),
    (Spline(), {}, [0.0, 1e-4, 1e-2, 1.0]),
]


def _data(method, n=60, seed=0, ties=False):
    rng = np.random.default_rng(seed)
    p = 1 if isinstance(method, Spline) else 2
    X = rng.uniform(0, 4, size=(n, p))
    if ties:
        X = np.round(X * 2) / 2  # repeated x values and exact distance ties
    y = np.sin(X[:, 0]) + 0.3 * X[:, -1] + rng.normal(0, 0.2, n)
    return X, y


def _refit(method, settings, X, y, value, train, test):
    return method.fit(X[train], y[train], settings, value).predict(X[test])


@pytest.mark.parametrize("ties", [False, True])
@pytest.mark.parametrize(("method", "settings", "values"), CASES)
def test_kfold_path_equals_refits(method, settings, values, ties):
    X, y = _data(method, ties=ties)
    folds = tuning.make_folds(60, TuningSpec(folds=4, repeats=2, seed=3))
    path = method.path(X, y, folds, settings, values)
    for r, _f, train, test in folds.splits():
        for c, v in enumerate(values):
            expect = _refit(method, settings, X, y, v, train, test)
            # Same arithmetic in a different order (shared factorizations): 1e-8 relative.
            assert_allclose(path.oof[c, r, test], expect, rtol=1e-8, atol=1e-8)


@pytest.mark.parametrize("ties", [False, True])
@pytest.mark.parametrize(("method", "settings", "values"), CASES)
def test_loo_path_equals_refits(method, settings, values, ties):
    if isinstance(method, Spline) and ties:
        values = [v for v in values if v > 0]  # interpolation has no leave-one-out value
    X, y = _data(method, n=30, ties=ties)
    folds = tuning.make_folds(30, TuningSpec(scheme="loo"))
    path = method.path(X, y, folds, settings, values)
    if isinstance(method, KNN):
        # kNN leave-one-out keeps the scaling learned from all rows (documented), so the
        # refits see the same scaled features.
        X = Scaler.fit(X, settings["scale"]).transform(X)
        settings = {**settings, "scale": "none"}
    for i in range(30):
        keep = np.arange(30) != i
        for c, v in enumerate(values):
            if isinstance(method, Spline) and v == 0:
                continue  # leaving out a knot of an interpolant: checked with lam > 0
            expect = _refit(method, settings, X, y, v, keep, np.array([i]))
            # The leave-one-out identity is exact; conditioning of the update costs digits.
            assert_allclose(path.oof[c, 0, i], expect[0], rtol=1e-7, atol=1e-7)


def test_thin_plate_paths_equal_refits():
    rng = np.random.default_rng(8)
    X = rng.uniform(size=(50, 2))
    y = np.cos(3 * X[:, 0]) * X[:, 1] + rng.normal(0, 0.05, 50)
    values = [1.0, 1e-2, 1e-4]
    # Leave-one-out keeps the scaling learned from all rows, so it is checked unscaled.
    for spec, settings in (
        (TuningSpec(folds=5, seed=1), {}),
        (TuningSpec(scheme="loo"), {"scale": "none"}),
    ):
        folds = tuning.make_folds(50, spec)
        path = Spline().path(X, y, folds, settings, values)
        if spec.scheme == "kfold":
            pairs = [(r, tr, te) for r, _f, tr, te in folds.splits()]
        else:
            pairs = [(0, np.arange(50) != i, np.array([i])) for i in range(50)]
        for r, train, test in pairs:
            for c, v in enumerate(values):
                expect = Spline().fit(X[train], y[train], settings, v).predict(X[test])
                # Eigendecomposition path vs a direct dense solve.
                assert_allclose(path.oof[c, r, test], expect, rtol=1e-7, atol=1e-7)


@pytest.mark.parametrize(
    ("method", "values"), [(Linear(), [1, 2, 3]), (Spline(), [1e-3, 0.1, 10.0])]
)
@pytest.mark.parametrize("p", [1, 2])
def test_gcv_equals_its_definition(method, values, p):
    """GCV(v) = n RSS / (n - tr A)^2 (Craven & Wahba 1979), with A built column by column."""
    rng = np.random.default_rng(4)
    n = 40
    X = rng.uniform(0, 3, size=(n, p))
    y = np.sin(X.sum(axis=1)) + rng.normal(0, 0.1, n)
    folds = tuning.make_folds(n, TuningSpec(scheme="gcv"))
    path = method.path(X, y, folds, {}, values)
    scores = tuning.score(y, path.oof, folds, "rmse", path.gcv_scale)
    for c, v in enumerate(values):
        A = np.column_stack([method.fit(X, e, {}, v).fitted for e in np.eye(n)])
        rss = np.sum((y - A @ y) ** 2)
        gcv = n * rss / (n - np.trace(A)) ** 2
        # A built from 40 refits: its rounding adds up to about 1e-10 relative.
        assert_allclose(path.df[c], np.trace(A), rtol=1e-7)
        assert_allclose(scores.error[c] ** 2, gcv, rtol=1e-7)


@pytest.mark.parametrize(
    ("method", "settings", "values"),
    [*CASES, (Spline(), {}, [1e-3, 1.0]), (Additive(), {}, [30.0, 1.0, 0.01])],
)
@pytest.mark.parametrize("p", [1, 2])
def test_fold_models_reproduce_the_out_of_fold_predictions(method, settings, values, p):
    """The models kept from the path (for intervals) are the ones that scored the path."""
    rng = np.random.default_rng(9)
    X = rng.uniform(0, 4, size=(60, p))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 60)
    folds = tuning.make_folds(60, TuningSpec(folds=4, repeats=2, seed=3))
    path = method.path(X, y, folds, settings, values)
    assert len(path.fold_models) == 4
    for f, model in enumerate(path.fold_models):
        test = np.flatnonzero(folds.fold_id[0] == f)
        for c in range(len(values)):
            # Same arrays, same arithmetic: equal to rounding.
            assert_allclose(model.predict(X[test], c), path.oof[c, 0, test], rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize(
    ("method", "settings", "value", "p"),
    [
        (KNN(), {"weights": "uniform", "scale": "none"}, 5, 2),
        (KNN(), {"weights": "distance", "scale": "none"}, 4, 1),
        (Linear(), {}, 2, 2),
        (Spline(), {}, 0.05, 1),
        (Spline(), {"scale": "none"}, 0.01, 2),
    ],
)
@pytest.mark.parametrize("ties", [False, True])
def test_leave_one_out_predictions_equal_refits(method, settings, value, p, ties):
    """The updates behind jackknife+ equal refitting without each row (scaling fixed)."""
    rng = np.random.default_rng(12)
    X = rng.uniform(0, 3, (30, p))
    if p == 1 and not ties:  # no two x within 1/10,000 of the range, so no knot is merged
        X = rng.permutation(np.linspace(0, 3, 30) + rng.uniform(-0.02, 0.02, 30))[:, None]
    if ties:
        X = np.round(X * 2) / 2 if p == 1 else np.round(X, 1)
    y = np.sin(X.sum(axis=1)) + rng.normal(0, 0.2, 30)
    Xq = rng.uniform(-0.5, 3.5, (6, p))
    model = method.fit(X, y, settings, value)
    loo = model.loo_predictions(Xq)(np.arange(6))
    for i in range(30):
        keep = np.arange(30) != i
        expect = method.fit(X[keep], y[keep], settings, value).predict(Xq)
        # Exact identities; rounding in the updates of mildly conditioned systems: 1e-8.
        assert_allclose(loo[:, i], expect, rtol=1e-8, atol=1e-8)


# -- additive: the basis (knots, scaling, centering) is the one of all rows, shared by the
# folds; each training fold chooses its lambda-hat by REML, so its refit is ``fit`` on the
# fold's rows given that basis. Leave-one-out and GCV also keep lambda-hat of all rows, so
# their refits fix it too.


def _additive_data(p, n=60, ties=False, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 4, size=(n, p))
    if ties:
        X = np.round(X * 2) / 2  # nine distinct values per feature, repeated rows
    y = np.sin(X[:, 0]) + 0.3 * X[:, -1] ** 2 + rng.normal(0, 0.2, n)
    return X, y


def _fixed(full, X, y, s):
    """The additive fit to these rows with the basis and lambda-hat of ``full``."""
    basis = full.basis
    red = Reduced.of(reduce_rows(basis, X, y, lambda: None), basis.k, y.size)
    sm = Smoother.of(red, [b for _, b in basis.blocks], full.smoother.lam_hat)
    return FittedAdditive(basis, sm, s, X, y, full.names)


@pytest.mark.parametrize("ties", [False, True])
@pytest.mark.parametrize("p", [1, 3])
def test_additive_kfold_path_equals_refits(p, ties):
    X, y = _additive_data(p, ties=ties)
    values = [100.0, 3.0, 1.0, 0.05]
    folds = tuning.make_folds(60, TuningSpec(folds=4, repeats=2, seed=3))
    work: dict = {}
    path = Additive().path(X, y, folds, {}, values, work)
    for r, _f, train, test in folds.splits():
        for c, v in enumerate(values):
            refit = Additive().fit(X[train], y[train], {}, v, {"basis": work["basis"]})
            # The fold's R from stacked per-fold factors vs a direct QR of its rows: the same
            # reduced problem up to rounding, and a REML search that lands within ~1e-9.
            assert_allclose(path.oof[c, r, test], refit.predict(X[test]), rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("ties", [False, True])
def test_additive_loo_path_equals_refits(ties):
    X, y = _additive_data(2, n=30, ties=ties)
    values = [10.0, 1.0, 0.1]
    folds = tuning.make_folds(30, TuningSpec(scheme="loo"))
    path = Additive().path(X, y, folds, {}, values)
    full = Additive().fit(X, y, {}, 1.0)
    for i in range(30):
        keep = np.arange(30) != i
        for c, v in enumerate(values):
            expect = _fixed(full, X[keep], y[keep], v).predict(X[[i]])
            # The leave-one-out identity of penalized least squares is exact: rounding.
            assert_allclose(path.oof[c, 0, i], expect[0], rtol=1e-8, atol=1e-8)


@pytest.mark.parametrize("p", [1, 2])
def test_additive_gcv_equals_its_definition(p):
    """GCV(s) = n RSS / (n - tr A)^2 with A built column by column at the lambda-hat of y."""
    X, y = _additive_data(p, n=40, seed=4)
    values = [10.0, 1.0, 0.1]
    folds = tuning.make_folds(40, TuningSpec(scheme="gcv"))
    path = Additive().path(X, y, folds, {}, values)
    scores = tuning.score(y, path.oof, folds, "rmse", path.gcv_scale)
    full = Additive().fit(X, y, {}, 1.0)
    for c, v in enumerate(values):
        A = np.column_stack([_fixed(full, X, e, v).fitted for e in np.eye(40)])
        rss = np.sum((y - A @ y) ** 2)
        # A built from 40 refits: its rounding adds up to about 1e-10 relative.
        assert_allclose(path.df[c], np.trace(A), rtol=1e-8)
        assert_allclose(scores.error[c] ** 2, 40 * rss / (40 - np.trace(A)) ** 2, rtol=1e-8)


@pytest.mark.parametrize("ties", [False, True])
def test_additive_leave_one_out_predictions_equal_refits(ties):
    """The updates behind jackknife+ equal refitting without each row (basis and lambda-hat
    fixed), inside and outside the data."""
    X, y = _additive_data(2, n=30, ties=ties, seed=12)
    Xq = np.random.default_rng(13).uniform(-0.5, 4.5, (6, 2))
    model = Additive().fit(X, y, {}, 0.5)
    loo = model.loo_predictions(Xq)(np.arange(6))
    for i in range(30):
        keep = np.arange(30) != i
        expect = _fixed(model, X[keep], y[keep], 0.5).predict(Xq)
        # Exact identity; rounding in the updates: 1e-8.
        assert_allclose(loo[:, i], expect, rtol=1e-8, atol=1e-8)


def test_knn_final_fit_in_blocks_equals_one_block(monkeypatch) -> None:
    """The final kNN fit walks the rows in blocks to bound memory; the fitted values and the
    typical radius do not depend on the block size (rows with tied distances included)."""
    from nearwise.core.methods import knn

    rng = np.random.default_rng(11)
    X = np.round(rng.uniform(0, 1, (700, 2)), 1)  # many ties
    y = rng.normal(0, 1, 700)
    model = knn.KNN()
    settings = model.settings({})
    whole = model.fit(X, y, settings, 7)
    monkeypatch.setattr(knn, "FIT_BLOCK_CELLS", 8 * 13)  # blocks of 13 rows
    blocks = model.fit(X, y, settings, 7)
    np.testing.assert_array_equal(blocks.fitted, whole.fitted)
    assert blocks.typical_radius == whole.typical_radius
