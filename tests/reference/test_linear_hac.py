"""Least squares with ``tuning.order_by``: HAC standard errors against statsmodels.

Reference: statsmodels ``OLS(y, X).fit(cov_type="HAC", cov_kwds={"maxlags": L})`` on the raw
monomial design in time order (bse, tvalues, pvalues; ``get_prediction`` for the standard error
of the mean), with L = floor(4 (n / 100)^(2/9)) (Newey & West 1994). Without ``order_by`` the
reference is the default ``OLS(y, X).fit()``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy import stats

from nearwise.core.methods.linear import Linear
from nearwise.core.sequence import Timeline

LEVEL = 0.9


def _ar1(rng: np.random.Generator, n: int, phi: float, scale: float) -> np.ndarray:
    """An AR(1) series e_t = phi e_{t-1} + u_t, u_t ~ N(0, scale^2), started stationary."""
    e = np.empty(n)
    e[0] = rng.normal(0, scale / np.sqrt(1 - phi**2))
    for i in range(1, n):
        e[i] = phi * e[i - 1] + rng.normal(0, scale)
    return e


def _two_features(seed: int, n: int):
    """Degree 1 in two features that drift in time; AR(1) noise."""
    rng = np.random.default_rng(seed)
    t = 2000.0 + 0.25 * np.arange(n)  # distinct times, not the row numbers
    X = np.column_stack([3 + _ar1(rng, n, 0.7, 1.0), -1 + _ar1(rng, n, 0.5, 0.5)])
    y = 1.5 + 0.8 * X[:, 0] - 1.2 * X[:, 1] + _ar1(rng, n, 0.6, 0.7)
    design = np.column_stack([np.ones(n), X])  # intercept, a, b (the service's term order)
    Xq = np.array([[3.0, -1.0], [5.5, 0.2], [1.0, -2.5]])
    return t, X, y, 1, design, Xq, lambda Q: np.column_stack([np.ones(len(Q)), Q])


def _one_feature_quadratic(seed: int, n: int):
    """Degree 2 in one feature that follows time; AR(1) noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 3.0 - 50.0
    x = np.linspace(-2, 4, n) + 0.3 * rng.normal(size=n)
    X = x[:, None]
    y = 2.0 - 0.5 * x + 0.3 * x**2 + _ar1(rng, n, 0.7, 0.5)
    design = np.column_stack([np.ones(n), x, x**2])  # intercept, a, a^2
    Xq = np.array([[0.0], [2.5], [4.5]])
    return t, X, y, 2, design, Xq, lambda Q: np.column_stack([np.ones(len(Q)), Q, Q**2])


CASES = {
    "degree1_two_features": lambda: _two_features(7, 120),
    "degree2_one_feature": lambda: _one_feature_quadratic(8, 75),
}


def _post(client, t, X, y, degree, Xq, order: np.ndarray, ordered: bool = True):
    """POST the rows in the given (shuffled) order; query rows as given."""
    names = [chr(ord("a") + j) for j in range(X.shape[1])]
    rows = [[float(t[i]), *map(float, X[i]), float(y[i])] for i in order]
    body = {
        "method": "linear",
        "train": {"columns": ["t", *names, "y"], "rows": rows},
        "target": "y",
        "features": names,
        "params": {"degree": degree},
        "interval": {"kind": "model", "level": LEVEL},
        "query": {"columns": names, "rows": Xq.tolist()},
    }
    if ordered:
        body["tuning"] = {"order_by": "t"}
    response = client.post("/v1/predict", json=body)
    assert response.status_code == 200, response.get_json()
    return response.get_json()


def _terms(doc, key: str) -> np.ndarray:
    return np.array([row[key] for row in doc["model"]["terms"]], dtype=float)


def _predictions(doc, key: str) -> np.ndarray:
    return np.array([row[key] for row in doc["predictions"]], dtype=float)


def _hac_case(client, case: str, seed: int):
    """The service's answer with rows sent shuffled, and statsmodels' HAC fit on the rows in
    time order (the order they were generated in): OLS(...).fit(cov_type="HAC",
    cov_kwds={"maxlags": L}), L = floor(4 (n/100)^(2/9)) (Newey & West 1994)."""
    t, X, y, degree, design, Xq, expand = CASES[case]()
    n = y.size
    lags = math.floor(4 * (n / 100) ** (2 / 9))
    shuffled = np.random.default_rng(seed).permutation(n)
    doc = _post(client, t, X, y, degree, Xq, shuffled)
    ref = sm.OLS(y, design).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
    return doc, ref, lags, y, design, expand(Xq)


@pytest.mark.parametrize("case", sorted(CASES))
def test_term_table_matches_statsmodels_hac(client, case):
    doc, ref, lags, y, design, _ = _hac_case(client, case, 99)
    assert doc["model"]["covariance"] == "HAC"
    assert_allclose(_terms(doc, "estimate"), ref.params, rtol=1e-8)  # statsmodels params
    assert_allclose(_terms(doc, "std_error"), ref.bse, rtol=1e-8)  # statsmodels HAC bse
    assert_allclose(_terms(doc, "t"), ref.tvalues, rtol=1e-8)  # statsmodels HAC tvalues
    assert_allclose(_terms(doc, "p_value"), ref.pvalues, rtol=1e-8)  # statsmodels HAC pvalues
    assert doc["model"]["hac_lags"] == lags
    # The HAC standard errors differ from the classical ones on these data (else the check
    # above would not tell them apart).
    classical = sm.OLS(y, design).fit()
    assert np.max(np.abs(ref.bse / classical.bse - 1)) > 0.05


@pytest.mark.parametrize("case", sorted(CASES))
def test_model_interval_and_std_error_match_statsmodels_hac(client, case):
    doc, ref, _, _, _, query = _hac_case(client, case, 5)
    # Reference: statsmodels get_prediction under the HAC covariance gives se(mean); the
    # new-observation interval is mean +/- t(n - p) sqrt(se(mean)^2 + scale), scale = RSS / (n - p)
    # of the same statsmodels fit.
    pred = ref.get_prediction(query)
    half = stats.t.ppf(0.5 + LEVEL / 2, ref.df_resid) * np.sqrt(pred.se_mean**2 + ref.scale)
    assert_allclose(_predictions(doc, "value"), pred.predicted_mean, rtol=1e-8)  # statsmodels
    assert_allclose(_predictions(doc, "std_error"), pred.se_mean, rtol=1e-8)  # statsmodels HAC
    assert_allclose(_predictions(doc, "lower"), pred.predicted_mean - half, rtol=1e-8)
    assert_allclose(_predictions(doc, "upper"), pred.predicted_mean + half, rtol=1e-8)
    assert doc["model"]["residual_df"] == ref.df_resid  # statsmodels df_resid
    assert_allclose(doc["model"]["sigma"], np.sqrt(ref.scale), rtol=1e-10)  # statsmodels scale


@pytest.mark.parametrize("case", sorted(CASES))
def test_without_order_by_stays_classical(client, case):
    t, X, y, degree, design, Xq, expand = CASES[case]()
    shuffled = np.random.default_rng(3).permutation(y.size)
    doc = _post(client, t, X, y, degree, Xq, shuffled, ordered=False)
    # Reference: statsmodels' default OLS(...).fit() (nonrobust covariance, t(n - p)).
    ref = sm.OLS(y, design).fit()
    pred = ref.get_prediction(expand(Xq))
    frame = pred.summary_frame(alpha=1 - LEVEL)
    assert doc["model"]["covariance"] == "classical"
    assert "hac_lags" not in doc["model"]
    assert_allclose(_terms(doc, "std_error"), ref.bse, rtol=1e-8)  # statsmodels bse
    assert_allclose(_terms(doc, "t"), ref.tvalues, rtol=1e-8)  # statsmodels tvalues
    assert_allclose(_terms(doc, "p_value"), ref.pvalues, rtol=1e-8)  # statsmodels pvalues
    assert_allclose(_predictions(doc, "std_error"), pred.se_mean, rtol=1e-8)  # statsmodels
    assert_allclose(_predictions(doc, "lower"), frame["obs_ci_lower"], rtol=1e-8)  # statsmodels
    assert_allclose(_predictions(doc, "upper"), frame["obs_ci_upper"], rtol=1e-8)  # statsmodels


def test_tied_time_stamps_do_not_depend_on_row_order(client):
    """Rows sharing a time stamp: the answer is the same whatever order they are sent in."""
    t, X, y, degree, _, Xq, _ = _two_features(21, 90)
    t = np.floor(np.arange(y.size) / 3.0)  # three rows per time stamp
    rng = np.random.default_rng(4)
    first = _post(client, t, X, y, degree, Xq, rng.permutation(y.size))
    second = _post(client, t, X, y, degree, Xq, rng.permutation(y.size))
    assert first["model"]["covariance"] == "HAC"
    assert first["model"] == second["model"]
    assert first["predictions"] == second["predictions"]


def test_fit_puts_shuffled_rows_in_time_order():
    """The method itself sorts by the timeline (the service hands it rows already in time
    order): rows and timeline shuffled together give statsmodels' HAC numbers."""
    t, X, y, degree, design, Xq, expand = _one_feature_quadratic(31, 64)
    n = y.size
    lags = math.floor(4 * (n / 100) ** (2 / 9))  # Newey & West (1994)
    shuffled = np.random.default_rng(6).permutation(n)
    _, step = np.unique(t[shuffled], return_inverse=True)
    line = Timeline("t", t[shuffled], step.reshape(-1), n, "number")
    work = {"features": ("a",), "line": line}
    model = Linear().fit(X[shuffled], y[shuffled], {}, degree, work)
    table = model.summary(("a",))
    # Reference: statsmodels OLS(...).fit(cov_type="HAC", cov_kwds={"maxlags": L}), rows in
    # time order.
    ref = sm.OLS(y, design).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
    assert table["hac_lags"] == lags
    se = [row["std_error"] for row in table["terms"]]
    assert_allclose(se, ref.bse, rtol=1e-8)  # statsmodels HAC bse
    pred = ref.get_prediction(expand(Xq))
    assert_allclose(model.std_error(Xq, np.nan), pred.se_mean, rtol=1e-8)  # statsmodels
