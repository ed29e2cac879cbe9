"""The additive method: its basis, its solver against dense formulas, its invariants, errors and
warnings. The checks against outside references are in tests/reference/test_additive_reference.py.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import linalg

from nearwise.core import tuning
from nearwise.core.data import Table
from nearwise.core.errors import InvalidValue, TooFewRows
from nearwise.core.methods import spline1d
from nearwise.core.methods.additive import Additive
from nearwise.core.methods.additive_basis import FeatureBasis, default_knots, place_knots, reinsch
from nearwise.core.methods.additive_solve import LOG_HIGH, _Reml, _tau
from nearwise.core.methods.spline import Spline
from nearwise.core.pipeline import run
from nearwise.core.spec import IntervalSpec, Job, TuningSpec


def _table(X, y, name="train"):
    cols = (*[f"x{j}" for j in range(X.shape[1])], "y")
    return Table(name, cols, np.column_stack([X, y]))


def _data(n=120, p=3, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 1, (n, p)) * np.arange(1, p + 1)
    y = np.sin(4 * X[:, 0]) + (X[:, 1 % p] - 1) ** 2 + rng.normal(0, 0.2, n)
    return X, y


def _dense(model):
    """The design of the kept columns and the penalty matrix, built without the QR route."""
    N, W = model.basis.design(model.X)
    kept = model.smoother.red.kept
    D = np.column_stack([N[:, kept], W])
    pen = np.concatenate([np.zeros(kept.size), model.smoothing * model.smoother.lam_hat])
    return D, np.diag(pen)


# -- the basis ---------------------------------------------------------------------------
def test_basis_is_the_natural_cubic_spline_of_its_knot_values():
    """Values inside and linear continuation outside equal spline1d.evaluate (the one-feature
    spline's evaluator), with second derivatives from the Reinsch system."""
    rng = np.random.default_rng(1)
    fb = FeatureBasis.build(np.sort(rng.uniform(0, 1, 40)), 12)
    g = rng.normal(size=fb.knots.size)
    u = np.linspace(-0.3, 1.3, 97)
    expect = spline1d.evaluate(fb.knots, g, fb.F @ g, u)
    # Two arrangements of the same cubic polynomials: rounding only.
    assert_allclose(fb.spline(u, g[:, None])[:, 0], expect, atol=1e-12)
    assert not fb.F[0].any() and not fb.F[-1].any()  # natural: f'' = 0 at the end knots


def test_penalty_is_the_integral_of_the_squared_second_derivative():
    """f'' of a natural cubic spline is piecewise linear, so the integral of f''^2 over each
    knot interval is h (a^2 + a b + b^2) / 3 exactly (a, b the end values)."""
    rng = np.random.default_rng(2)
    knots = np.sort(np.concatenate([[0.0, 1.0], rng.uniform(0, 1, 9)]))
    F, S = reinsch(knots)
    g = rng.normal(size=knots.size)
    gam = F @ g
    h = np.diff(knots)
    exact = np.sum(h * (gam[:-1] ** 2 + gam[:-1] * gam[1:] + gam[1:] ** 2) / 3)
    # Same integral by two routes: rounding, relative 1e-10.
    assert_allclose(g @ S @ g, exact, rtol=1e-10)
    fb = FeatureBasis.build(knots, knots.size)
    # The wiggly columns carry an identity penalty (eigenvectors scaled by e^-1/2).
    assert_allclose(fb.wiggly.T @ S @ fb.wiggly, np.eye(fb.q), atol=1e-9)


def test_knots_at_quantiles_merged_when_close_and_default_counts():
    u = np.concatenate([np.linspace(0, 1, 11), [0.5 + 1e-5, 1 - 1e-6]])
    knots = place_knots(u, 100)
    assert knots[0] == 0 and knots[-1] == 1 and np.diff(knots).min() >= 1e-3
    assert place_knots(np.array([0.0, 1.0, 0.0]), 20).tolist() == [0.0, 1.0]
    # The service's own schedule, min(20, max(4, 2 + 240 // p)) knots per feature, kept in
    # step with the README ("default 20, fewer past 12 features"): a cost choice, not a figure
    # from outside. 2 + 240 // 12 = 22 and 2 + 240 // 13 = 20 are capped at 20.
    assert [default_knots(p) for p in (1, 12, 13, 24, 49)] == [20, 20, 20, 12, 6]


# -- the solver against dense formulas ------------------------------------------------------
def test_coefficients_df_and_leverage_equal_the_dense_penalized_solution():
    """beta = (X'X + S)^-1 X'y, df = tr X (X'X + S)^-1 X', leverage its diagonal."""
    X, y = _data()
    model = Additive().fit(X, y, {}, 0.7)
    D, P = _dense(model)
    A = D.T @ D + P
    beta = linalg.solve(A, D.T @ y)
    H = D @ linalg.solve(A, D.T)
    # Normal equations of a well-scaled 50-column system against QR and SVD: 1e-8.
    assert_allclose(model.coef, beta, rtol=1e-7, atol=1e-8)
    assert_allclose(model.df, np.trace(H), rtol=1e-9)
    assert_allclose(model.leverage(), np.diag(H), atol=1e-10)
    assert_allclose(sum(model.feature_df()) + 1, model.df, rtol=1e-12)
    sigma2 = np.sum((y - D @ beta) ** 2) / (y.size - np.trace(H))
    Xq = np.random.default_rng(3).uniform(-0.2, 3.2, (7, 3))
    Nq, Wq = model.basis.design(Xq)
    Dq = np.column_stack([Nq[:, model.smoother.red.kept], Wq])
    se = np.sqrt(sigma2 * np.einsum("ij,ji->i", Dq, linalg.solve(A, Dq.T)))
    assert_allclose(model.std_error(Xq, 0.0), se, rtol=1e-8)


def test_reml_weights_are_a_minimum_of_the_restricted_likelihood():
    """The criterion's gradient matches finite differences; at lambda-hat it is zero for the
    two curved features and points past the upper bound for the null feature (whose
    component REML makes a straight line)."""
    X, y = _data(n=200, seed=4)  # sin(4 x0) + (x1 - 1)^2; x2 has no effect
    model = Additive().fit(X, y, {}, 1.0)
    blocks = [b for _, b in model.basis.blocks]
    crit = _Reml(model.smoother.red, blocks)
    rho = np.log([model.smoother.lam_hat[b][0] for b in blocks])
    offset = rho - np.log(_tau(model.smoother.red, blocks))
    assert np.all(offset[:2] < LOG_HIGH - 1) and offset[2] == pytest.approx(LOG_HIGH)
    value, grad = crit.value_grad(rho)
    for j in range(rho.size):
        e = np.eye(rho.size)[j] * 1e-5
        numeric = (crit.value_grad(rho + e)[0] - crit.value_grad(rho - e)[0]) / 2e-5
        # Central differences of a smooth function of size ~400 at step 1e-5: ~1e-6.
        assert numeric == pytest.approx(grad[j], abs=1e-4)
    # L-BFGS-B stops at a projected gradient below 1e-8 (its gtol) inside the range.
    assert np.all(np.abs(grad[:2]) < 1e-6) and grad[2] < 0
    for j in range(rho.size):
        for step in (-0.1, 0.1) if j < 2 else (-0.1,):
            assert crit.value_grad(rho + step * np.eye(rho.size)[j])[0] > value


# -- invariants ----------------------------------------------------------------------------
def test_exact_linear_data_is_fitted_exactly_with_straight_components():
    rng = np.random.default_rng(5)
    X = rng.uniform(-5, 5, size=(60, 3))
    y = 2.5 - 1.5 * X[:, 0] + 0.25 * X[:, 1] + 4 * X[:, 2]
    result = run(Job("additive", _table(X, y), "y"))
    # Exact data: residuals are rounding, ~1e-15 of the data scale (~20).
    assert_allclose(result.predictions.residual, 0, atol=1e-9)
    assert result.fit.cv_error < 1e-9
    feats = result.model["features"]
    assert all(f["near_linear"] for f in feats)
    # Straight lines leave the wiggly parts nothing to fit: REML sends them to the bound,
    # where a wiggly part keeps about 1e-4 df.
    assert_allclose([f["df"] for f in feats], 1.0, atol=1e-3)
    assert result.model["intercept"] == pytest.approx(np.mean(y), rel=1e-12)


@pytest.mark.parametrize("p", [1, 3])
def test_row_order_does_not_change_the_answer(p):
    rng = np.random.default_rng(6)
    X = np.round(rng.uniform(0, 5, size=(80, p)), 1)  # with ties
    y = np.sin(X.sum(axis=1)) + rng.normal(0, 0.1, 80)
    Xq = rng.uniform(0, 5, size=(10, p))
    perm = rng.permutation(80)
    q = _table(Xq, np.zeros(10), "query")
    a = run(Job("additive", _table(X, y), "y", query=q))
    b = run(Job("additive", _table(X[perm], y[perm]), "y", query=q))
    assert a.params == b.params
    # Sums in another order, through an iterative REML search: 1e-7.
    assert_allclose(a.predictions.value, b.predictions.value, rtol=1e-7, atol=1e-7)
    assert_allclose(a.predictions.upper, b.predictions.upper, rtol=1e-7, atol=1e-7)


def test_one_feature_equals_the_smoothing_spline_when_every_x_is_a_knot():
    """Knots at every distinct x: the same function space and penalty as `spline`, so the two
    fits coincide at the same lambda (in x's units, as `model.features[0].lambda` gives it)."""
    rng = np.random.default_rng(7)
    x = np.linspace(0, 10, 60) + rng.uniform(-0.05, 0.05, 60)
    y = np.sin(x) + rng.normal(0, 0.2, 60)
    add = Additive().fit(x[:, None], y, {"knots": 100}, 0.3)
    lam = add.summary(("x",))["features"][0]["lambda"]
    ref = Spline().fit(x[:, None], y, {}, lam)
    xq = np.linspace(-1, 11, 121)[:, None]
    # Two exact solvers of one problem (banded Reinsch vs QR/SVD): rounding, 1e-10.
    assert_allclose(add.predict(xq), ref.predict(xq), atol=1e-10)
    assert_allclose(add.df, ref.df, rtol=1e-10)
    assert_allclose(add.loo_residuals(), ref.loo_residuals(), atol=1e-10)
    # At the rows the posterior variances are the same A_ii; between knots the spline's
    # adds the process's own variance there, so only the rows are compared.
    assert_allclose(add.std_error(x[:, None], 0), ref.std_error(x[:, None], 0), rtol=1e-8)


def test_one_feature_with_fewer_knots_agrees_with_the_spline_within_the_basis_error():
    """With K knots for 300 distinct x the regression spline approximates the smoothing spline
    at the same lambda from a K-dimensional space of natural splines; the gap is the basis
    approximation and shrinks as K grows (the spacing h ~ 1/K enters at the third to fourth
    power for cubic splines). Measured at lambda = 1 (df 9.2): 1.9e-2, 3.2e-3, 4.4e-4 for
    K = 10, 20, 40. The bounds: the default K = 20 within 0.01, a quarter of the fit's own
    smallest standard error (0.044) so the gap is statistically invisible; each doubling of K
    shrinks it at least 4 times; df within 0.25 of the spline's."""
    rng = np.random.default_rng(8)
    x = rng.uniform(0, 10, 300)
    y = np.sin(x) + 0.1 * x + rng.normal(0, 0.3, 300)
    ref = Spline().fit(x[:, None], y, {}, 1.0)
    xq = np.linspace(0, 10, 201)[:, None]
    gaps = []
    for knots in (10, 20, 40):
        first = Additive().fit(x[:, None], y, {"knots": knots}, 1.0)
        scale = 1.0 / first.lambdas()[0]  # the multiplier that puts lambda at 1 in x's units
        add = Additive().fit(x[:, None], y, {"knots": knots}, scale)
        assert add.lambdas()[0] == pytest.approx(1.0, rel=1e-12)
        gaps.append(np.abs(add.predict(xq) - ref.predict(xq)).max())
        if knots == 20:
            assert gaps[-1] < 0.01 < 0.25 * ref.std_error(xq, 0).min()
            assert add.df == pytest.approx(ref.df, abs=0.25)
    assert gaps[1] < gaps[0] / 4 and gaps[2] < gaps[1] / 4


def test_extrapolation_is_linear_beyond_the_training_range():
    X, y = _data(seed=9)
    model = Additive().fit(X, y, {}, 1.0)
    base = X[:1].copy()
    lo = X[:, 0].min()
    pts = np.repeat(base, 3, axis=0)
    pts[:, 0] = lo - np.array([1.0, 2.0, 3.0])
    f = model.predict(pts)
    # Equal steps on a straight line: rounding only.
    assert f[0] - f[1] == pytest.approx(f[1] - f[2], rel=1e-9)


# -- the summary -----------------------------------------------------------------------------
def test_summary_reports_each_feature_with_an_effect_curve_and_the_near_linear_rule():
    rng = np.random.default_rng(10)
    X = rng.uniform(0, 1, (300, 3))
    y = np.sin(6 * X[:, 0]) + 0.5 * X[:, 1] + rng.normal(0, 0.1, 300)
    model = Additive().fit(X, y, {}, 1.0)
    s = model.summary(("wavy", "straight", "null"))
    assert [f["name"] for f in s["features"]] == ["wavy", "straight", "null"]
    wavy, straight, null = s["features"]
    assert not wavy["near_linear"] and wavy["df"] > 4
    assert straight["near_linear"] and null["near_linear"]
    for f in s["features"]:
        e = f["effect"]
        assert len(e["x"]) == 50 and e["x"][0] == pytest.approx(0, abs=0.01)
        assert all(lo <= v <= hi for lo, v, hi in zip(e["lower"], e["f"], e["upper"], strict=True))
        assert (f["df"] < 1.5) == f["near_linear"]
    # The straight feature's effect is the line 0.5 x (centered): slope within 3 SE (~0.02).
    e = straight["effect"]
    slope = (e["f"][-1] - e["f"][0]) / (e["x"][-1] - e["x"][0])
    assert slope == pytest.approx(0.5, abs=0.06)
    assert s["df"] == pytest.approx(1 + sum(f["df"] for f in s["features"]), rel=1e-12)
    assert s["intercept"] == pytest.approx(y.mean(), rel=1e-12)  # centered components


# -- grid, errors and warnings ---------------------------------------------------------------
def test_default_grid_runs_from_nearly_straight_upwards():
    X, y = _data(n=150)
    folds = tuning.make_folds(150, TuningSpec())
    work: dict = {}
    values = Additive().candidates(X, y, folds, {}, None, work)
    path = Additive().path(X, y, folds, {}, values, work)
    assert values == sorted(values, reverse=True) and len(values) == 20
    assert np.all(np.diff(path.df) > 0)
    # p + 1 = 4 unpenalized columns; the first target is 4.25 df (rounded smoothing value).
    assert path.df[0] == pytest.approx(4.25, abs=0.01)
    assert path.df[-1] <= 75 + 1e-9  # at most half the distinct rows


def test_errors_name_the_fix():
    X, y = _data(n=40)
    folds = tuning.make_folds(40, TuningSpec())
    with pytest.raises(InvalidValue, match="must be positive"):
        Additive().candidates(X, y, folds, {"smoothing": 0.0}, None)
    with pytest.raises(InvalidValue, match="must be positive"):
        Additive().candidates(X, y, folds, {}, [1.0, -2.0])
    wide = np.random.default_rng(0).uniform(size=(40, 30))
    with pytest.raises(InvalidValue, match="at most 22 knots"):
        Additive().candidates(wide, y, folds, {"knots": 40}, None)
    with pytest.raises(TooFewRows, match="every feature is constant"):
        Additive().candidates(np.ones((40, 2)), y, folds, {}, None)
    small = tuning.make_folds(8, TuningSpec(folds=2))
    with pytest.raises(TooFewRows, match="at least 5 rows in each training fold"):
        Additive().candidates(X[:8], y[:8], small, {}, None)


def test_aliased_and_constant_features_are_dropped_and_named():
    rng = np.random.default_rng(11)
    x = rng.uniform(0, 1, 80)
    X = np.column_stack([x, 2 * x + 1, np.full(80, 3.0), rng.uniform(0, 1, 80)])
    y = np.sin(3 * x) + rng.normal(0, 0.1, 80)
    result = run(Job("additive", _table(X, y), "y"))
    notice = next(w for w in result.warnings if w.code == "rank_deficient")
    assert "x1, x2" in notice.message
    dfs = {f["name"]: f["df"] for f in result.model["features"]}
    assert dfs["x2"] == 0.0
    assert np.isfinite(result.predictions.value).all()


def test_tiny_smoothing_warns_that_the_fit_interpolates():
    rng = np.random.default_rng(12)
    x = rng.permutation(np.linspace(0, 1, 25))  # no two x close enough to share a knot
    y = np.sin(12 * x) + rng.normal(0, 0.01, 25)  # a curve REML leaves rough
    params = {"smoothing": 1e-9, "knots": 30}  # every x a knot: up to 25 df for 25 rows
    result = run(Job("additive", _table(x[:, None], y), "y", params=params))
    assert "interpolating" in [w.code for w in result.warnings]


def test_the_model_interval_and_jackknife_plus_are_offered():
    X, y = _data(n=100, seed=13)
    q = _table(X[:5] + 0.01, np.zeros(5), "query")
    model = run(Job("additive", _table(X, y), "y", query=q, interval=IntervalSpec(kind="model")))
    assert model.interval["construction"] == "model"
    loo = run(Job("additive", _table(X, y), "y", query=q, tuning=TuningSpec(scheme="loo")))
    assert loo.interval["construction"] == "jackknife_plus"
    for r in (model, loo):
        p = r.predictions
        assert np.all(p.lower < p.value) and np.all(p.value < p.upper)
        assert np.all(p.std_error > 0)
