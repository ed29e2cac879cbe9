"""Polynomial least squares against statsmodels OLS on the same monomial design.

Reference: statsmodels ``OLS(...).fit()`` (params, bse, tvalues, pvalues, scale, rsquared).
"""

import numpy as np
import statsmodels.api as sm
from numpy.testing import assert_allclose

from nearwise.core.methods.linear import Linear, monomials


def test_degree_two_term_table_matches_statsmodels():
    rng = np.random.default_rng(11)
    X = np.column_stack([rng.uniform(3, 15, 80), rng.normal(1.2, 0.05, 80)])
    y = 5 + 2 * X[:, 0] - 0.1 * X[:, 0] ** 2 + 30 * X[:, 0] * X[:, 1] + rng.normal(0, 2, 80)
    fitted = Linear().fit(X, y, {}, 2)
    table = fitted.summary(("wind", "rho"))
    terms = monomials(2, 2, True)
    D = np.column_stack([np.prod(X ** np.array(e), axis=1) for e in terms])
    ref = sm.OLS(y, D).fit()
    got = {k: np.array([t[k] for t in table["terms"]]) for k in ("estimate", "std_error", "t")}
    # Raw monomials of wind ~ 10 and rho ~ 1.2 are mildly ill-conditioned; 1e-8 relative
    # leaves room for the different factorizations (QR here, pinv in statsmodels).
    assert_allclose(got["estimate"], ref.params, rtol=1e-8)
    assert_allclose(got["std_error"], ref.bse, rtol=1e-8)
    assert_allclose(got["t"], ref.tvalues, rtol=1e-8)
    assert_allclose([t["p_value"] for t in table["terms"]], ref.pvalues, rtol=1e-6, atol=1e-14)
    assert_allclose(table["sigma"], np.sqrt(ref.scale), rtol=1e-10)
    assert_allclose(table["r2"], ref.rsquared, rtol=1e-10)
    assert [t["name"] for t in table["terms"]] == [
        "intercept",
        "wind",
        "rho",
        "wind^2",
        "wind*rho",
        "rho^2",
    ]


def test_without_interactions_matches_statsmodels():
    rng = np.random.default_rng(12)
    X = rng.uniform(-2, 2, size=(60, 2))
    y = 1 + X[:, 0] ** 3 - X[:, 1] + rng.normal(0, 0.3, 60)
    fitted = Linear().fit(X, y, {"interactions": False}, 3)
    D = np.column_stack([np.ones(60), X, X**2, X**3])
    ref = sm.OLS(y, D).fit()
    # Column order: intercept, x0, x1, x0^2, x1^2, x0^3, x1^3 (same as D above).
    est = [t["estimate"] for t in fitted.summary(("a", "b"))["terms"]]
    # Cubic powers of x in [-2, 2]: QR against pinv, about 1e-12 apart.
    assert_allclose(est, ref.params, rtol=1e-9, atol=1e-12)
    assert_allclose(fitted.predict(X), ref.fittedvalues, rtol=1e-10, atol=1e-10)
