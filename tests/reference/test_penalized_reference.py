"""Penalized `linear` (ridge and lasso) against outside references.

Sources, named beside each check:
- scikit-learn's ``Ridge`` and ``Lasso`` in a ``Pipeline`` after ``StandardScaler`` (and, for
  degree 2, ``PolynomialFeatures`` and a second ``StandardScaler``), scored by
  ``cross_val_predict`` and ``GridSearchCV`` on our folds (``PredefinedSplit``), and
  ``RidgeCV``'s exact leave-one-out errors;
- scikit-learn's ``lars_path`` (LARS with the lasso modification) and ``lasso_path`` on the
  diabetes data (Efron, Hastie, Johnstone & Tibshirani 2004, "Least Angle Regression",
  Annals of Statistics 32, 407-499);
- statsmodels' ``OLS.fit_regularized`` with a penalty weight per coefficient, on the raw
  features, and ``OLS`` at alpha = 0.

The alpha mapping is the identity: on the standardized columns Z our ridge minimizes
||y - b0 - Zw||^2 + alpha ||w||^2, as ``Ridge(alpha)`` does, and our lasso minimizes
||y - b0 - Zw||^2 / (2n) + alpha ||w||_1, as ``Lasso(alpha)`` does. On raw features x_j with
training mean m_j and standard deviation s_j (degree 1), z_j = (x_j - m_j) / s_j and w_j = s_j
beta_j, so statsmodels' objective RSS / (2n) + sum_j a_j |beta_j| (lasso) or
+ sum_j a_j beta_j^2 / 2 (ridge) matches with a_j = alpha s_j (lasso) and
a_j = alpha s_j^2 / n (ridge), and a_0 = 0 for the intercept.

Tolerances: ridge is a direct solve on both sides (SVD here, Cholesky or SVD in the reference),
so it agrees to rounding (1e-9 relative). The lasso is solved by coordinate descent on both
sides until the duality gap is below 1e-10 of ||y||^2 (our solver's tolerance; the reference
is given the same tolerance), but from different starting points (we warm-start along the
path, the reference starts at zero for every alpha); the measured differences are below 2e-10
of the data scale (2e-7 on the diabetes coefficients of up to 32), and the tests allow 1e-7.
"""

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from sklearn.datasets import load_diabetes
from sklearn.linear_model import Lasso, Ridge, RidgeCV, lars_path, lasso_path
from sklearn.model_selection import GridSearchCV, PredefinedSplit, cross_val_predict
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from nearwise.core import tuning
from nearwise.core.data import Table
from nearwise.core.methods import penalized
from nearwise.core.methods.linear import Linear
from nearwise.core.pipeline import run
from nearwise.core.spec import Job, TuningSpec

LASSO_TOL = 1e-7  # coordinate descent from different starts, each to a 1e-10 duality gap
RIDGE_TOL = 1e-9  # direct solves: rounding only


def _data(n=100, p=3, seed=0):
    """Features on different scales and offsets, a sparse linear signal plus a curve."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * np.array([1.0, 20.0, 0.05, 3.0, 1.0, 1.0])[:p] + 5.0
    y = 3 * X[:, 0] - 0.2 * X[:, 1] + np.sin(X[:, 0]) + rng.normal(0, 1.0, n)
    # Sorted by content, as the pipeline does, so its folds are the ones made here.
    canon = np.lexsort((y, *X.T[::-1]))
    return X[canon], y[canon]


def _pipe(penalty, alpha, degree):
    steps = [("scale", StandardScaler())]
    if degree > 1:
        steps += [("poly", PolynomialFeatures(degree, include_bias=False))]
        steps += [("rescale", StandardScaler())]
    if penalty == "ridge":
        steps += [("fit", Ridge(alpha=alpha))]
    else:
        steps += [("fit", Lasso(alpha=alpha, tol=penalized.LASSO_TOL, max_iter=100_000))]
    return Pipeline(steps)


def _tol(penalty):
    return LASSO_TOL if penalty == "lasso" else RIDGE_TOL


@pytest.mark.parametrize("penalty", ["ridge", "lasso"])
@pytest.mark.parametrize("degree", [1, 2])
def test_kfold_path_equals_scikit_learn_pipelines_on_the_same_folds(penalty, degree):
    """Source: scikit-learn cross_val_predict of Pipeline(StandardScaler, [PolynomialFeatures,
    StandardScaler,] Ridge / Lasso) with PredefinedSplit on our folds, for every alpha."""
    X, y = _data(p=3)
    folds = tuning.make_folds(y.size, TuningSpec(folds=5, seed=2))
    settings = Linear().settings({"penalty": penalty, "degree": degree})
    values = Linear().candidates(X, y, folds, settings, None, {})
    path = Linear().path(X, y, folds, settings, values)
    cv = PredefinedSplit(folds.fold_id[0])
    for c, alpha in enumerate(values):
        ref = cross_val_predict(_pipe(penalty, alpha, degree), X, y, cv=cv)
        assert_allclose(path.oof[c, 0], ref, rtol=0, atol=_tol(penalty) * np.std(y))


@pytest.mark.parametrize("penalty", ["ridge", "lasso"])
def test_chosen_alpha_errors_and_coefficients_equal_gridsearchcv(penalty):
    """Source: scikit-learn GridSearchCV over Pipeline(StandardScaler, Ridge / Lasso) on our
    folds: its mean_test_score (mean squared error per fold, equal folds of 24) is our CV
    error squared, its best alpha is ours under the `min` rule, and its refit coefficients,
    back in raw units, are our term table."""
    X, y = _data(n=120, p=4, seed=3)
    n = y.size
    cols = ("a", "b", "c", "d", "y")
    spec = TuningSpec(folds=5, seed=4, rule="min")
    folds = tuning.make_folds(n, spec)
    settings = Linear().settings({"penalty": penalty})
    grid = Linear().candidates(X, y, folds, settings, None, {})
    job = Job(
        "linear",
        Table("train", cols, np.column_stack([X, y])),
        "y",
        params={"penalty": penalty},
        grid={"alpha": grid},
        tuning=spec,
    )
    ours = run(job)
    search = GridSearchCV(
        _pipe(penalty, 1.0, 1),
        {"fit__alpha": grid},
        cv=PredefinedSplit(folds.fold_id[0]),
        scoring="neg_mean_squared_error",
    ).fit(X, y)
    errors = np.array([e.error for e in ours.tuning.path]) ** 2
    assert_allclose(errors, -search.cv_results_["mean_test_score"], rtol=10 * _tol(penalty))
    assert ours.params["alpha"] == search.best_params_["fit__alpha"]
    scaler, model = search.best_estimator_["scale"], search.best_estimator_["fit"]
    slope = model.coef_ / scaler.scale_
    intercept = model.intercept_ - slope @ scaler.mean_
    est = np.array([t["estimate"] for t in ours.model["terms"]])
    ref = np.concatenate([[intercept], slope])
    # Each coefficient against its own size plus the size of a unit-effect slope, sd(y) / s_j.
    scale = np.abs(ref) + np.std(y) / np.concatenate([[1.0], X.std(axis=0)])
    assert np.all(np.abs(est - ref) <= _tol(penalty) * scale), np.abs(est - ref) / scale
    if penalty == "lasso":
        zero = [n for n, w in zip(cols, model.coef_, strict=False) if w == 0]
        assert ours.model["dropped_terms"] == zero


def test_ridge_leave_one_out_equals_ridgecv():
    """Source: scikit-learn RidgeCV(store_cv_results=True), whose exact leave-one-out errors
    use the same standardized columns (learned from all rows, as our `loo` keeps them)."""
    X, y = _data(n=80, p=4, seed=5)
    folds = tuning.make_folds(y.size, TuningSpec(scheme="loo"))
    settings = Linear().settings({"penalty": "ridge"})
    values = Linear().candidates(X, y, folds, settings, None, {})
    path = Linear().path(X, y, folds, settings, values)
    Z = StandardScaler().fit_transform(X)
    ref = RidgeCV(alphas=values, store_cv_results=True).fit(Z, y)
    ours = (y[:, None] - path.oof[:, 0].T) ** 2
    assert_allclose(ours, ref.cv_results_, rtol=1e-8)  # two exact identities, rounding only
    scores = tuning.score(y, path.oof, folds, "rmse")
    assert values[tuning.choose(scores.error, scores.error_se, "min")[0]] == ref.alpha_


def _diabetes():
    data = load_diabetes()
    return data.data, data.target, tuple(data.feature_names)


def _entry_order(coefs: np.ndarray) -> list[int]:
    """Features in the order they first become nonzero along a path (columns: alphas)."""
    first = [int(np.flatnonzero(row)[0]) if row.any() else coefs.shape[1] for row in coefs]
    return sorted(range(coefs.shape[0]), key=lambda j: first[j])


def test_lasso_path_on_diabetes_enters_variables_as_lars_does():
    """Source: Efron, Hastie, Johnstone & Tibshirani (2004), the diabetes data as shipped with
    scikit-learn, and scikit-learn's lars_path(method="lasso") on the same standardized
    columns. Between consecutive LARS knots exactly one variable enters, so a grid with one
    alpha between each pair of knots must see them enter in LARS order."""
    X, y, names = _diabetes()
    Z = StandardScaler().fit_transform(X)
    knots, _, coefs_lars = lars_path(Z, y, method="lasso")
    grid = np.sqrt(knots[:-1] * knots[1:])  # one alpha strictly between consecutive knots
    grid = grid[grid > 0].tolist()
    folds = tuning.make_folds(y.size, TuningSpec(folds=5))
    settings = Linear().settings({"penalty": "lasso"})
    values = Linear().candidates(X, y, folds, settings, grid, {})
    work: dict = {}
    Linear().path(X, y, folds, settings, values, work)
    W = np.column_stack([work["lasso_full"][0][a] for a in values])
    order = [names[j] for j in _entry_order(W)]
    lars_order = [names[j] for j in _entry_order(coefs_lars[:, 1:])]
    assert order == lars_order
    # The paper's LARS order, from memory of its section 1: variables 3, 9, 4, 7, 2, 10, 5,
    # 8, 6, 1 (bmi, ltg = s5, bp, hdl = s3, sex, glu = s6, tc = s1, tch = s4, ldl = s2, age).
    assert order == ["bmi", "s5", "bp", "s3", "sex", "s6", "s1", "s4", "s2", "age"]
    # Coefficients on the grid: LARS gives the exact piecewise-linear path (interpolated at
    # our alphas); scikit-learn's lasso_path solves the same problems by coordinate descent.
    exact = np.column_stack(
        [[np.interp(a, knots[::-1], coefs_lars[j, ::-1]) for j in range(10)] for a in values]
    )
    _, coefs_cd, _ = lasso_path(Z, y - y.mean(), alphas=values, tol=1e-12, max_iter=100_000)
    # Coefficients up to 32 (y has sd 77): LARS is exact up to rounding; our 1e-10 duality
    # gap leaves about 2e-7 in the coefficients (measured).
    assert_allclose(W, exact, rtol=0, atol=2e-6)
    assert_allclose(W, coefs_cd, rtol=0, atol=2e-6)


@pytest.mark.parametrize("penalty", ["ridge", "lasso"])
def test_raw_unit_coefficients_equal_statsmodels_with_matched_penalties(penalty):
    """Source: statsmodels OLS(y, [1, X]).fit_regularized(L1_wt=0 or 1) with a penalty per
    coefficient (0 on the intercept): a_j = alpha s_j^2 / n (ridge) or alpha s_j (lasso)."""
    X, y = _data(n=90, p=3, seed=7)
    n = y.size
    s = X.std(axis=0)
    alpha = {"ridge": 30.0, "lasso": 0.3}[penalty]
    fitted = Linear().fit(X, y, {"penalty": penalty}, alpha)
    est = np.array([t["estimate"] for t in fitted.summary(("a", "b", "c"))["terms"]])
    ols = sm.OLS(y, sm.add_constant(X))
    if penalty == "ridge":
        ref = ols.fit_regularized(alpha=np.concatenate([[0.0], alpha * s**2 / n]), L1_wt=0.0)
        # statsmodels solves the normal equations of the raw design (condition ~1e4 here);
        # measured 1e-12 apart.
        assert_allclose(est, ref.params, rtol=1e-9)
    else:
        ref = ols.fit_regularized(
            alpha=np.concatenate([[0.0], alpha * s]), L1_wt=1.0, cnvrg_tol=1e-12, maxiter=10_000
        )
        # statsmodels' coordinate descent stops at a 1e-12 change in the coefficients and
        # sets coefficients below 1e-8 to zero; measured 2e-11 apart. The lasso zeroes `c`.
        assert_allclose(est, ref.params, rtol=1e-8, atol=1e-8)
        assert fitted.summary(("a", "b", "c"))["dropped_terms"] == ["c"]


@pytest.mark.parametrize("penalty", ["ridge", "lasso"])
def test_alpha_zero_equals_statsmodels_ols_on_raw_monomials(penalty):
    """Source: statsmodels OLS on the raw degree-2 monomials; alpha = 0 is least squares."""
    X, y = _data(n=70, p=2, seed=8)
    fitted = Linear().fit(X, y, {"penalty": penalty, "degree": 2}, 0.0)
    table = fitted.summary(("a", "b"))
    D = np.column_stack([np.ones(70), X, X[:, 0] ** 2, X[:, 0] * X[:, 1], X[:, 1] ** 2])
    ref = sm.OLS(y, D).fit()
    # Raw monomials of features near 5 and 100 with scales 1 and 20: mild conditioning.
    assert_allclose([t["estimate"] for t in table["terms"]], ref.params, rtol=1e-7)
    assert_allclose([t["std_error"] for t in table["terms"]], ref.bse, rtol=1e-7)
    assert_allclose(fitted.predict(X), ref.fittedvalues, rtol=1e-10)
    assert_allclose(table["sigma"], np.sqrt(ref.scale), rtol=1e-10)
