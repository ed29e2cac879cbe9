"""The additive model against statsmodels' GLMGam and against the components it was given.

Reference: statsmodels ``GLMGam`` (Gaussian family, identity link) with ``BSplines``, cubic,
at the same interior knots and boundary, centered (``constraints="center"``, which makes each
component sum to zero over the rows, our identifiability constraint too).

The penalty mapping. For a Gaussian GLMGam, statsmodels' penalized iteratively reweighted least
squares solves the weighted least squares augmented with ``2 * alpha_j * cov_der2_j`` (see
``statsmodels.gam.generalized_additive_model.penalized_wls``), so it minimizes

    sum_i (y_i - f(x_i))^2 + sum_j 2 alpha_j beta_j' C_j beta_j,

with C_j = ``cov_der2``, the integral of B''(x) B''(x)' over x in the feature's own units
(Simpson's rule on points that make it exact for piecewise-quadratic integrands). Ours
minimizes sum_i (y_i - f(x_i))^2 + sum_j lambda_j integral f_j''(x)^2 dx, with lambda_j as
``model.features[j].lambda`` gives it. Hence alpha_j = lambda_j / 2. Both facts are checked
numerically below: C_j against an exact Gauss-Legendre integral, and GLMGam's coefficients
against a direct solve of that objective.

Data: generated here, additively, with known components (a sine, a quadratic, a line and a
null feature, on different scales) and Gaussian noise; the truth is known exactly.
"""

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.interpolate import BSpline
from statsmodels.gam.api import BSplines, GLMGam

from nearwise.core import tuning
from nearwise.core.methods.additive import Additive
from nearwise.core.spec import TuningSpec

N, NOISE = 400, 0.2
SCALES = np.array([1.0, 2.0, 10.0, 1.0])


def _truth(X):
    raw = [np.sin(2 * np.pi * X[:, 0]), (X[:, 1] - 1) ** 2, 0.3 * X[:, 2], 0 * X[:, 3]]
    return raw


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(7)
    X = rng.uniform(0, 1, (N, 4)) * SCALES
    raw = _truth(X)
    y = 1.5 + sum(raw) + rng.normal(0, NOISE, N)
    return X, y, [r - r.mean() for r in raw]


@pytest.fixture(scope="module")
def tuned(data):
    """The additive model as the service tunes it: 5-fold CV, one-standard-error rule."""
    X, y, _ = data
    method, folds, work = Additive(), tuning.make_folds(N, TuningSpec()), {}
    values = method.candidates(X, y, folds, {}, None, work)
    path = method.path(X, y, folds, {}, values, work)
    scores = tuning.score(y, path.oof, folds, "rmse")
    _, chosen = tuning.choose(scores.error, scores.error_se, "one_se")
    return work, values[chosen]


def _glmgam(model, X, y):
    """GLMGam at our knots and our lambdas (alpha = lambda / 2); its components at the rows."""
    feats = model.basis.features
    inner = [f.lo + f.span * f.knots[1:-1] for f in feats]
    bs = BSplines(
        X,
        df=[f.knots.size + 2 for f in feats],  # cubic B-splines: interior knots + 4
        degree=[3] * len(feats),
        constraints="center",
        knot_kwds=[{"knots": k} for k in inner],
    )
    alpha = [lam / 2 for lam in model.lambdas()]
    res = GLMGam(y, exog=np.ones((y.size, 1)), smoother=bs, alpha=alpha).fit()
    comps, start = [], 1
    for sm in bs.smoothers:
        comps.append(sm.basis @ res.params[start : start + sm.dim_basis])
        start += sm.dim_basis
    return bs, res, comps


@pytest.mark.parametrize("which", ["reml", "tuned"])
def test_components_match_glmgam_at_the_same_knots_and_penalty(data, tuned, which):
    X, y, _ = data
    work, chosen = tuned
    model = Additive().fit(X, y, {}, 1.0 if which == "reml" else chosen, work)
    _, res, ref = _glmgam(model, X, y)
    ours = [model.component(j, X[:, j])[0] for j in range(4)]
    for j in range(4):
        # Same knots and penalty; the only difference is the basis: ours are natural splines
        # (linear beyond the end knots, f'' = 0 there), statsmodels' B-splines have two more
        # functions per feature free at the ends. Measured: at most 1.1e-3 apart (the sine,
        # at its end points), RMS 1.6e-4, against a noise of 0.2. Allowed: 5e-3, 2.5% of the
        # noise and a fifth of the components' own standard error (~0.03).
        assert np.abs(ours[j] - ref[j]).max() < 5e-3, j
    assert np.abs(model.fitted - res.fittedvalues).max() < 5e-3
    # statsmodels' scale is RSS / (n - edf), as our sigma^2; the bases differ as above.
    assert res.scale == pytest.approx(model.sigma2(), rel=1e-3)
    se = model.std_error(X, 0.0)
    se_ref = res.get_prediction(exog=np.ones((N, 1)), exog_smooth=X).se_mean
    # Posterior SD sigma sqrt(x'(X'X + S)^-1 x) on both sides; the basis difference moves it
    # by at most 0.7% (near the ends), typically 4e-5. Allowed: 2% and 0.1% in the median.
    assert np.abs(se / se_ref - 1).max() < 0.02
    assert np.median(np.abs(se / se_ref - 1)) < 1e-3


def test_alpha_is_half_our_lambda(data, tuned):
    """GLMGam's coefficients solve min |y - X b|^2 + sum_j lambda_j b_j' C_j b_j at
    alpha_j = lambda_j / 2, and C_j is the exact integral of B'' B''' in x's units."""
    X, y, _ = data
    work, _ = tuned
    model = Additive().fit(X, y, {}, 1.0, work)
    bs, res, _ = _glmgam(model, X, y)
    lams = model.lambdas()
    D = np.column_stack([np.ones(N), bs.basis])
    P = np.zeros((D.shape[1], D.shape[1]))
    start = 1
    for lam, sm in zip(lams, bs.smoothers, strict=True):
        d = sm.dim_basis
        P[start : start + d, start : start + d] = lam * sm.cov_der2
        start += d
    beta = np.linalg.solve(D.T @ D + P, D.T @ y)
    # Normal equations here vs statsmodels' pinv of the augmented system: 1e-6 relative.
    assert_allclose(res.params, beta, rtol=1e-6, atol=1e-6 * np.abs(beta).max())

    sm = bs.smoothers[0]
    knots = sm.knots  # the full knot vector, boundary knots repeated
    nb = len(knots) - 4  # cubic B-splines before centering
    second = [BSpline(knots, np.eye(nb)[i], 3).derivative(2) for i in range(nb)]
    nodes, weights = np.polynomial.legendre.leggauss(3)  # exact up to degree 5
    C = np.zeros((nb, nb))
    ends = np.unique(knots)
    for a, b in itertools.pairwise(ends):
        x = (a + b) / 2 + (b - a) / 2 * nodes
        d2 = np.column_stack([d(x) for d in second])  # B'' is linear on each interval
        C += (d2 * ((b - a) / 2 * weights)[:, None]).T @ d2
    exact = sm.ctransf.T @ C @ sm.ctransf
    # Simpson on points exact for these integrands vs Gauss-Legendre: rounding.
    assert_allclose(sm.cov_der2, exact, rtol=1e-8, atol=1e-8 * np.abs(exact).max())


@pytest.mark.parametrize("which", ["reml", "tuned"])
def test_components_are_close_to_the_truth(data, tuned, which):
    X, y, truth = data
    work, chosen = tuned
    model = Additive().fit(X, y, {}, 1.0 if which == "reml" else chosen, work)
    summary = model.summary(("sine", "quadratic", "line", "null"))
    for j, f in enumerate(summary["features"]):
        fitted = model.component(j, X[:, j])[0]
        rms = np.sqrt(np.mean((fitted - truth[j]) ** 2))
        # A component with df_j fitted from n rows at noise sigma has a standard error of
        # about sigma sqrt(df_j / n): 0.2 sqrt(10 / 400) = 0.032 for the sine, less for the
        # others. Measured RMS errors: 0.022-0.034 (sine), 0.025, 0.017, 0.010. Allowed: 0.06,
        # about twice the sine's standard error, room for the smoothing bias of a 2 pi sine.
        assert rms < 0.06, (f["name"], rms)
        # The band +/- 1.96 posterior SD holds the truth on most of the grid: Bayesian bands
        # cover on average across the range (Nychka 1988); measured: all 50 points, each.
        e = f["effect"]
        t = _truth(np.tile(np.array(e["x"])[:, None], (1, 4)))[j]
        t = t - _truth(X)[j].mean()
        inside = np.mean((np.array(e["lower"]) <= t) & (t <= np.array(e["upper"])))
        assert inside >= 0.8, (f["name"], inside)
    names = [f["name"] for f in summary["features"] if f["near_linear"]]
    assert names == ["line", "null"]  # df below 1.5: only the straight and the null feature
    e = summary["features"][2]["effect"]
    slope = (e["f"][-1] - e["f"][0]) / (e["x"][-1] - e["x"][0])
    # Least-squares slope SE: sigma / (sd(x) sqrt(n)) = 0.2 / (2.9 * 20) = 0.0035; allow 4 SE.
    assert slope == pytest.approx(0.3, abs=0.015)
