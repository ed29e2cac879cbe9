"""Row weights (``weight_by``) against outside references, method by method.

Sources, named beside each check:
- statsmodels ``WLS(y, D, weights=w).fit()`` on the raw monomial design: coefficients,
  standard errors, sigma and R^2, ``get_prediction(Dq, weights=w0).summary_frame(obs=True)``
  for the standard error of the mean and the ``model`` interval;
- scipy ``make_smoothing_spline(x, y, w=w, lam=lam)`` for the one-feature spline and
  ``RBFInterpolator(kernel="thin_plate_spline", smoothing=lam / w)`` for the thin-plate spline;
- scikit-learn ``Ridge`` and ``Lasso`` with ``sample_weight`` after ``StandardScaler`` (fitted
  with the same ``sample_weight``) and ``PolynomialFeatures``;
- statsmodels ``GLMGam`` with ``var_weights`` at our knots and lambdas (the additive model),
  and numpy's dense solve of the weighted penalized normal equations;
- the weighted kNN average computed directly from scikit-learn's ``NearestNeighbors``.

Then two identities every weighted fit must meet: rows of weight 0 give the answer of the
table without them (every method, through ``pipeline.run``), and integer weights give the fit
of the table with each row repeated that many times where the method's criterion is a sum
over rows (least squares, ridge, the smoothing splines).
"""

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy.interpolate import RBFInterpolator, make_smoothing_spline
from sklearn.linear_model import Lasso, Ridge
from sklearn.neighbors import NearestNeighbors
from sklearn.preprocessing import PolynomialFeatures, StandardScaler
from statsmodels.gam.api import BSplines, GLMGam

from nearwise.core import pipeline
from nearwise.core.data import Table
from nearwise.core.methods.additive import Additive
from nearwise.core.methods.knn import KNN
from nearwise.core.methods.linear import Linear, monomials
from nearwise.core.methods.spline import Spline
from nearwise.core.spec import IntervalSpec, Job, TuningSpec


def _data(n=80, p=2, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 4, size=(n, p))
    w = rng.uniform(0.2, 5.0, n)
    y = np.sin(X[:, 0]) + 0.5 * X[:, -1] + rng.normal(0, 0.3, n) / np.sqrt(w)
    return X, y, w


def _raw(X, degree):
    terms = monomials(X.shape[1], degree, True)
    return np.column_stack([np.prod(X ** np.array(e), axis=1) for e in terms])


# -- weighted least squares ------------------------------------------------------------------
@pytest.mark.parametrize("degree", [1, 2])
def test_weighted_least_squares_equals_statsmodels_wls(degree):
    X, y, w = _data(seed=1)
    Xq = np.random.default_rng(2).uniform(-0.5, 4.5, size=(15, 2))
    w0 = np.random.default_rng(3).uniform(0.5, 4.0, 15)
    model = Linear().fit(X, y, {}, degree, {"weights": w})
    ref = sm.WLS(y, _raw(X, degree), weights=w).fit()
    table = model.summary(("a", "b"))
    # QR of the scaled design here, pinv in statsmodels: rounding, 1e-8 relative.
    assert_allclose([t["estimate"] for t in table["terms"]], ref.params, rtol=1e-8)
    assert_allclose([t["std_error"] for t in table["terms"]], ref.bse, rtol=1e-8)
    assert_allclose(table["sigma"], np.sqrt(ref.scale), rtol=1e-10)
    assert_allclose(table["r2"], ref.rsquared, rtol=1e-10)
    frame = ref.get_prediction(_raw(Xq, degree), weights=w0).summary_frame(alpha=0.1)
    assert_allclose(model.predict(Xq), frame["mean"], rtol=1e-8)
    assert_allclose(model.std_error(Xq, 0.0), frame["mean_se"], rtol=1e-8)
    lower, upper = model.model_interval(Xq, 0.9, w0)
    assert_allclose(lower, frame["obs_ci_lower"], rtol=1e-8, atol=1e-8)
    assert_allclose(upper, frame["obs_ci_upper"], rtol=1e-8, atol=1e-8)
    # A new row of weight 1 unless told: statsmodels' default for new rows is weight 1 too.
    plain = ref.get_prediction(_raw(Xq, degree)).summary_frame(alpha=0.1)
    lower1, _ = model.model_interval(Xq, 0.9)
    assert_allclose(lower1, plain["obs_ci_lower"], rtol=1e-8, atol=1e-8)


def test_weighted_hac_matches_statsmodels_wls_hac():
    """With order_by, the HAC covariance of the weighted fit is statsmodels' WLS
    ``cov_type="HAC"``, which works on the weighted design and residuals."""
    from nearwise.core.sequence import timeline

    X, y, w = _data(n=120, p=1, seed=4)
    t = np.arange(120.0)
    line = timeline(Table("train", ("t",), t[:, None]), "t")
    model = Linear().fit(X, y, {}, 1, {"weights": w, "line": line})
    lags = model.hac_lags
    ref = sm.WLS(y, _raw(X, 1), weights=w).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
    se = [r["std_error"] for r in model.summary(("x",))["terms"]]
    assert_allclose(se, ref.bse, rtol=1e-8)


# -- ridge and lasso ---------------------------------------------------------------------------
def _sklearn_basis(X, Xq, w, degree):
    first = StandardScaler().fit(X, sample_weight=w)
    poly = PolynomialFeatures(degree, include_bias=False)
    B, Bq = poly.fit_transform(first.transform(X)), poly.transform(first.transform(Xq))
    second = StandardScaler().fit(B, sample_weight=w)
    return second.transform(B), second.transform(Bq)


@pytest.mark.parametrize("degree", [1, 2])
@pytest.mark.parametrize("alpha", [0.05, 3.0, 200.0])
def test_weighted_ridge_equals_sklearn_sample_weight(degree, alpha):
    X, y, w = _data(seed=5)
    Xq = np.random.default_rng(6).uniform(0, 4, size=(20, 2))
    settings = Linear().settings({"penalty": "ridge", "degree": degree})
    model = Linear().fit(X, y, settings, alpha, {"weights": w})
    Z, Zq = _sklearn_basis(X, Xq, w, degree)
    ref = Ridge(alpha=alpha).fit(Z, y, sample_weight=w)
    # Both direct solves (SVD here, Cholesky there): rounding.
    assert_allclose(model.predict(Xq), ref.predict(Zq), rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize("alpha", [0.002, 0.03, 0.3])
def test_weighted_lasso_equals_sklearn_sample_weight(alpha):
    """Lasso's objective with weights: sum w r^2 / (2 sum w) + alpha |b|_1, the one of
    scikit-learn's Lasso, which rescales sample_weight to sum to n."""
    X, y, w = _data(seed=7)
    Xq = np.random.default_rng(8).uniform(0, 4, size=(20, 2))
    settings = Linear().settings({"penalty": "lasso", "degree": 2})
    model = Linear().fit(X, y, settings, alpha, {"weights": w})
    Z, Zq = _sklearn_basis(X, Xq, w, 2)
    ref = Lasso(alpha=alpha, tol=1e-12, max_iter=1_000_000).fit(Z, y, sample_weight=w)
    # Coordinate descent on both sides to a duality gap near 1e-10 of |y|^2: 1e-6.
    assert_allclose(model.predict(Xq), ref.predict(Zq), atol=1e-6)
    assert model.summary(("a", "b"))["converged"]


# -- smoothing splines ------------------------------------------------------------------------
@pytest.mark.parametrize("lam", [1e-4, 0.05, 3.0, 300.0])
def test_weighted_spline_equals_make_smoothing_spline(lam):
    rng = np.random.default_rng(21)
    x = np.linspace(0, 10, 150) + rng.uniform(-0.02, 0.02, 150)
    w = rng.uniform(0.1, 10.0, 150)
    y = np.sin(x) + rng.normal(0, 0.3, 150) / np.sqrt(w)
    fitted = Spline().fit(x[:, None], y, {}, lam, {"weights": w})
    assert fitted.summary(("x",))["knot_placement"] == "exact"
    ref = make_smoothing_spline(x, y, w=w, lam=lam)
    xq = np.linspace(0, 10, 301).clip(x[0], x[-1])
    scale = np.abs(y).max()
    # The tolerance of tests/reference/test_spline_scipy.py: 5e-8 of the data scale (both
    # banded solves lose digits as lam grows).
    assert_allclose(fitted.predict(xq[:, None]), ref(xq), atol=5e-8 * scale)
    assert_allclose(fitted.fitted, ref(x), atol=5e-8 * scale)


def test_weighted_ties_multiply_counts():
    """Repeated x with row weights: the knot holds the weighted mean with the summed weight,
    so the fit equals scipy's on those means and sums."""
    rng = np.random.default_rng(22)
    x = rng.integers(0, 40, 300) / 4.0
    w = rng.uniform(0.5, 3.0, 300)
    y = np.cos(x) + rng.normal(0, 0.2, 300)
    fitted = Spline().fit(x[:, None], y, {}, 0.02, {"weights": w})
    t, inv = np.unique(x, return_inverse=True)
    total = np.bincount(inv, weights=w)
    means = np.bincount(inv, weights=w * y) / total
    ref = make_smoothing_spline(t, means, w=total, lam=0.02)
    assert_allclose(fitted.predict(t[:, None]), ref(t), atol=1e-10)


@pytest.mark.parametrize("lam", [1e-3, 0.1, 10.0])
def test_weighted_thin_plate_equals_rbfinterpolator(lam):
    rng = np.random.default_rng(25)
    X = rng.uniform(size=(100, 2)) * np.array([1.0, 2.0])
    w = rng.uniform(0.2, 5.0, 100)
    y = np.sin(3 * X[:, 0]) + X[:, 1] ** 2 + rng.normal(0, 0.1, 100)
    Xq = rng.uniform(size=(30, 2)) * np.array([1.0, 2.0])
    fitted = Spline().fit(X, y, {"scale": "none"}, lam, {"weights": w})
    ref = RBFInterpolator(X, y, kernel="thin_plate_spline", smoothing=lam / w)
    # The same dense symmetric system on both sides.
    assert_allclose(fitted.predict(Xq), ref(Xq), atol=1e-8)


# -- additive ---------------------------------------------------------------------------------
def test_weighted_additive_solves_its_penalized_normal_equations_and_matches_glmgam():
    rng = np.random.default_rng(31)
    n = 300
    X = rng.uniform(0, 1, (n, 2)) * np.array([1.0, 3.0])
    w = rng.uniform(0.3, 4.0, n)
    y = np.sin(2 * np.pi * X[:, 0]) + 0.3 * X[:, 1] + rng.normal(0, 0.2, n) / np.sqrt(w)
    work = {"weights": w}
    model = Additive().fit(X, y, {}, 2.0, work)
    # Direct: min sum w (y - N a - W b)^2 + s sum lambda_j |b_j|^2 by numpy's dense solve.
    N, Wg = model.basis.design(X)
    kept = model.smoother.red.kept
    D = np.column_stack([N[:, kept], Wg])
    pen = np.concatenate([np.zeros(kept.size), 2.0 * model.smoother.lam_hat])
    beta = np.linalg.solve(D.T @ (w[:, None] * D) + np.diag(pen), D.T @ (w * y))
    assert_allclose(model.fitted, D @ beta, atol=1e-9)
    # statsmodels GLMGam at our knots and lambdas (alpha = lambda / 2, as in
    # tests/reference/test_additive_reference.py). Its PIRLS weighs the rows by the `weights`
    # of fit() (var_weights alone enter only its scale), so both are given. The bases differ
    # only past the end knots' curvature (natural splines here, free B-splines there).
    # Measured: fits 5.4e-4 apart, scales 4e-5 relative, posterior SDs 1% at most (median
    # 2e-5); allowed: the 5e-3, 1e-3, 2% and 1e-3 of that test.
    feats = model.basis.features
    bs = BSplines(
        X,
        df=[f.knots.size + 2 for f in feats],
        degree=[3] * len(feats),
        constraints="center",
        knot_kwds=[{"knots": f.lo + f.span * f.knots[1:-1]} for f in feats],
    )
    alpha = [lam / 2 for lam in model.lambdas()]
    gam = GLMGam(y, exog=np.ones((n, 1)), smoother=bs, alpha=alpha, var_weights=w)
    res = gam.fit(weights=w)
    assert np.abs(model.fitted - res.fittedvalues).max() < 5e-3
    assert res.scale == pytest.approx(model.sigma2(), rel=1e-3)
    se = model.std_error(X, 0.0)
    se_ref = res.get_prediction(exog=np.ones((n, 1)), exog_smooth=X).se_mean
    assert np.abs(se / se_ref - 1).max() < 0.02
    assert np.median(np.abs(se / se_ref - 1)) < 1e-3
    # Unweighted, the same GLMGam is 0.03 off: the weights matter at this tolerance.
    plain = GLMGam(y, exog=np.ones((n, 1)), smoother=bs, alpha=alpha).fit()
    assert np.abs(model.fitted - plain.fittedvalues).max() > 2e-2


# -- kNN --------------------------------------------------------------------------------------
@pytest.mark.parametrize("weights", ["uniform", "distance"])
def test_weighted_knn_is_the_weighted_average_of_the_neighbors(weights):
    X, y, w = _data(n=120, seed=41)
    Xq = np.random.default_rng(42).uniform(0, 4, size=(25, 2))
    settings = {"weights": weights, "scale": "none"}
    model = KNN().fit(X, y, settings, 7, {"weights": w})
    d, ind = NearestNeighbors(n_neighbors=7).fit(X).kneighbors(Xq)
    a = w[ind] if weights == "uniform" else w[ind] / d
    direct = np.sum(a * y[ind], axis=1) / np.sum(a, axis=1)
    # Continuous features: no distance ties; the same sums in another order.
    assert_allclose(model.predict(Xq), direct, rtol=1e-12)


def test_weighted_knn_shares_a_tied_run_by_weight():
    """Three rows tied at the k-th distance, one of them needed: each enters with a third of
    its own weight (the unweighted rule, an equal share of the run, applied to weights)."""
    X = np.array([[0.0], [1.0], [-1.0], [2.0], [-2.0], [2.0]])
    y = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    w = np.array([1.0, 2.0, 3.0, 1.0, 4.0, 2.0])
    model = KNN().fit(X, y, {"weights": "uniform", "scale": "none"}, 4, {"weights": w})
    run = [3, 4, 5]  # at distance 2 from x0 = 0; rows 0, 1, 2 are the three nearest
    num = np.sum(w[:3] * y[:3]) + np.sum(w[run] * y[run]) / 3
    den = np.sum(w[:3]) + np.sum(w[run]) / 3
    assert model.predict(np.array([[0.0]]))[0] == pytest.approx(num / den, rel=1e-14)


# -- zero weights and repeated rows, through the pipeline --------------------------------------
METHOD_CASES = [
    ("knn", {}, 2),
    ("linear", {}, 2),
    ("linear", {"penalty": "ridge", "degree": 2}, 2),
    ("linear", {"penalty": "lasso"}, 2),
    ("spline", {}, 1),
    ("spline", {}, 2),
    ("additive", {}, 2),
]


def _job(method, params, X, y, w, Xq, interval=None, scheme="kfold"):
    p = X.shape[1]
    cols = (*(f"x{j}" for j in range(p)), "y", "w")
    train = Table("train", cols, np.column_stack([X, y, w]))
    query = Table("query", cols[:p], Xq)
    return Job(
        method=method,
        train=train,
        target="y",
        features=list(cols[:p]),
        query=query,
        params=params,
        tuning=TuningSpec(scheme=scheme),
        interval=interval or IntervalSpec(),
        weight_by="w",
    )


def _same(a, b):
    assert a.params == b.params
    assert [(e.params, e.error, e.error_se) for e in a.tuning.path] == [
        (e.params, e.error, e.error_se) for e in b.tuning.path
    ]
    # Identical arrays after the same arithmetic on the same rows; sums reordered by the rows
    # left out in between cost at most rounding.
    for field in ("value", "lower", "upper", "std_error"):
        assert_allclose(getattr(a.predictions, field), getattr(b.predictions, field), rtol=1e-9)
    assert a.fit.cv_error == pytest.approx(b.fit.cv_error, rel=1e-12)


@pytest.mark.parametrize(("method", "params", "p"), METHOD_CASES)
def test_zero_weights_give_the_answer_without_those_rows(method, params, p):
    X, y, w = _data(n=90, p=p, seed=50 + p)
    Xq = np.random.default_rng(51).uniform(0, 4, size=(12, p))
    zero = np.zeros(90, dtype=bool)
    zero[[3, 17, 40, 41, 77]] = True
    w_zero = np.where(zero, 0.0, w)
    with_zeros = pipeline.run(_job(method, params, X, y, w_zero, Xq))
    without = pipeline.run(_job(method, params, X[~zero], y[~zero], w[~zero], Xq))
    assert with_zeros.fit.rows_zero_weight == 5 and without.fit.rows_zero_weight == 0
    assert with_zeros.fit.n_train == without.fit.n_train == 85
    _same(with_zeros, without)


@pytest.mark.parametrize(
    ("method", "params", "p", "scheme", "kind"),
    [
        ("linear", {}, 2, "loo", "model"),
        ("spline", {}, 1, "gcv", "cv_plus"),
        ("spline", {}, 1, "loo", "model"),
        ("additive", {}, 2, "loo", "cv_plus"),
        ("linear", {"penalty": "ridge"}, 2, "gcv", "cv_plus"),
        ("knn", {}, 2, "loo", "cv_plus"),
    ],
)
def test_zero_weights_other_schemes_and_intervals(method, params, p, scheme, kind):
    X, y, w = _data(n=70, p=p, seed=60)
    Xq = np.random.default_rng(61).uniform(0, 4, size=(8, p))
    zero = np.zeros(70, dtype=bool)
    zero[[0, 9, 33]] = True
    spec = IntervalSpec(kind=kind)
    a = pipeline.run(_job(method, params, X, y, np.where(zero, 0.0, w), Xq, spec, scheme))
    b = pipeline.run(_job(method, params, X[~zero], y[~zero], w[~zero], Xq, spec, scheme))
    _same(a, b)


@pytest.mark.parametrize(
    ("method", "settings", "value", "p"),
    [
        (Linear(), {}, 2, 2),
        (Linear(), Linear().settings({"penalty": "ridge", "degree": 2}), 1.5, 2),
        (Spline(), {}, 0.05, 1),
        (Spline(), {"scale": "none"}, 0.01, 2),
    ],
)
def test_integer_weights_equal_repeated_rows(method, settings, value, p):
    """Least squares, ridge and both splines minimize a sum over rows: a row of weight m is
    that row m times (the standardizations are weighted, so they match the repeated rows)."""
    rng = np.random.default_rng(70)
    X = rng.uniform(0, 4, size=(50, p))
    y = np.cos(X[:, 0]) + X[:, -1] + rng.normal(0, 0.2, 50)
    m = rng.integers(1, 4, 50).astype(float)
    Xq = rng.uniform(0, 4, size=(10, p))
    weighted = method.fit(X, y, settings, value, {"weights": m})
    reps = np.repeat(np.arange(50), m.astype(int))
    repeated = method.fit(X[reps], y[reps], settings, value)
    # The same minimizer from two systems of different sizes: rounding (the thin-plate system
    # with repeated rows is the worst conditioned, 1e-8).
    assert_allclose(weighted.predict(Xq), repeated.predict(Xq), rtol=1e-8, atol=1e-8)
