"""Cross-validation paths against scikit-learn's GridSearchCV on identical folds.

Reference: ``sklearn.model_selection.GridSearchCV`` with ``cv`` given as our (train, test)
index pairs and ``scoring="neg_mean_squared_error"``; its ``split{i}_test_score`` is the mean
squared error of fold i, which must equal our per-fold error of each candidate.
"""

import numpy as np
from numpy.testing import assert_allclose
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import GridSearchCV
from sklearn.neighbors import KNeighborsRegressor
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from nearwise.core import tuning
from nearwise.core.methods.knn import KNN
from nearwise.core.methods.linear import Linear
from nearwise.core.spec import TuningSpec


def _folds(n, folds=5, repeats=1, seed=0):
    f = tuning.make_folds(n, TuningSpec(folds=folds, repeats=repeats, seed=seed))
    return f, [(train, test) for _r, _f, train, test in f.splits()]


def _our_fold_mse(method, X, y, folds, settings, values):
    path = method.path(X, y, folds, settings, values)
    return tuning.score(y, path.oof, folds, "rmse").unit_errors


def _sklearn_fold_mse(estimator, grid, X, y, cv):
    search = GridSearchCV(estimator, grid, cv=cv, scoring="neg_mean_squared_error")
    search.fit(X, y)
    res = search.cv_results_
    return -np.array(
        [
            [res[f"split{i}_test_score"][c] for i in range(len(cv))]
            for c in range(len(res["params"]))
        ]
    )


def test_knn_path_equals_gridsearchcv():
    rng = np.random.default_rng(5)
    X = rng.uniform(size=(250, 3))
    y = np.sin(6 * X[:, 0]) + X[:, 1] + rng.normal(0, 0.2, 250)
    folds, cv = _folds(250, repeats=2, seed=9)
    ks = list(range(1, 41))
    ours = _our_fold_mse(KNN(), X, y, folds, {"weights": "uniform", "scale": "standard"}, ks)
    pipe = Pipeline([("s", StandardScaler()), ("knn", KNeighborsRegressor())])
    ref = _sklearn_fold_mse(pipe, {"knn__n_neighbors": ks}, X, y, cv)
    # Identical neighbor sets; only summation order differs.
    assert_allclose(ours, ref, rtol=1e-10)


def test_polynomial_path_equals_gridsearchcv():
    rng = np.random.default_rng(6)
    X = rng.uniform(-1, 2, size=(120, 2))
    y = 1 + X[:, 0] ** 3 - 2 * X[:, 0] * X[:, 1] + rng.normal(0, 0.3, 120)
    folds, cv = _folds(120, folds=6, seed=4)
    degrees = [1, 2, 3, 4]
    ours = _our_fold_mse(Linear(), X, y, folds, {}, degrees)
    pipe = Pipeline([("p", PolynomialFeatures()), ("ls", LinearRegression())])
    ref = _sklearn_fold_mse(pipe, {"p__degree": degrees}, X, y, cv)
    # Different but stable solvers (nested QR here, SVD-based lstsq in scikit-learn).
    assert_allclose(ours, ref, rtol=1e-8)
