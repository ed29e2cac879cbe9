"""The dependence figures (`tuning.dependence`) against statsmodels and the published formulas.

Sources: statsmodels ``tsa.stattools.acf`` (sample autocorrelation, divisor n, mean removed:
Box, Jenkins & Reinsel, Time Series Analysis, section 2.1.4) and
``stats.diagnostic.acorr_ljungbox`` (Ljung & Box 1978, Biometrika 65); the effective number
of rows n (1 - rho) / (1 + rho) (Bayley & Hammersley 1946, JRSS Supplement 8: the variance
of the mean of an AR(1) series, to first order in 1/n).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.stattools import acf

from nearwise.core import sequence


def ar1(n: int, phi: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    e = np.empty(n)
    e[0] = rng.normal()
    for i in range(1, n):
        e[i] = phi * e[i - 1] + rng.normal() * np.sqrt(1 - phi**2)
    return e


@pytest.mark.parametrize(("n", "phi"), [(30, 0.0), (200, 0.5), (1000, 0.9), (57, -0.4)])
def test_acf_equals_statsmodels(n: int, phi: float) -> None:
    x = ar1(n, phi, 1) + 3.0
    ours = sequence.acf(x, 10)
    theirs = acf(x, nlags=10, fft=False)[1:]
    assert_allclose(ours, theirs, rtol=0, atol=1e-13)  # same formula; rounding only


@pytest.mark.parametrize(("n", "phi"), [(10, 0.0), (30, 0.3), (49, 0.0), (50, 0.6), (400, 0.2)])
def test_ljung_box_equals_statsmodels(n: int, phi: float) -> None:
    x = ar1(n, phi, 2)
    dep = sequence.dependence(x, n, "order_by")
    assert dep is not None
    lags = min(10, n // 5)  # the documented rule
    assert dep.ljung_box_lags == lags
    table = acorr_ljungbox(x, lags=[lags])
    assert_allclose(dep.ljung_box_p, float(table["lb_pvalue"].iloc[0]), rtol=1e-10, atol=1e-15)
    assert_allclose(dep.lag1, acf(x, nlags=1, fft=False)[1], atol=1e-13)


def test_effective_rows_formula() -> None:
    x = ar1(500, 0.7, 3)
    dep = sequence.dependence(x, 800, "order_by")
    assert dep is not None
    rho = acf(x, nlags=1, fft=False)[1]
    assert rho > 0.5
    assert_allclose(dep.effective_rows, 800 * (1 - rho) / (1 + rho), rtol=1e-12)
    # A negative lag-1 correlation counts as none: never more rows than were sent.
    neg = sequence.dependence(ar1(500, -0.6, 4), 500, "order_by")
    assert neg is not None and neg.lag1 < 0 and neg.effective_rows == 500


def test_series_shorter_than_ten_steps_has_no_figures() -> None:
    assert sequence.dependence(np.arange(9.0), 9, "order_by") is None
    assert sequence.dependence(ar1(10, 0.0, 5), 10, "order_by") is not None


def test_answer_lag1_equals_statsmodels_acf_of_its_cv_residuals(client) -> None:
    """End to end: the answer's lag1 is the acf of its own out-of-fold residuals in the order
    of `order_by` (one row per time stamp, rows sent shuffled)."""
    rng = np.random.default_rng(6)
    n = 150
    t = np.arange(n, dtype=float)
    x = rng.uniform(0, 10, n)
    y = np.sin(x) + 0.5 * ar1(n, 0.6, 7)
    perm = rng.permutation(n)
    body = {
        "method": "spline",
        "target": "y",
        "features": ["x"],
        "train": {"columns": ["t", "x", "y"], "rows": np.column_stack([t, x, y])[perm].tolist()},
        "tuning": {"order_by": "t"},
    }
    answer = client.post("/v1/predict", json=body).get_json()
    cv = np.array([p["cv_residual"] for p in answer["predictions"]])
    in_time = cv[np.argsort(t[perm])]
    dep = answer["tuning"]["dependence"]
    assert dep["order"] == "order_by"
    assert_allclose(dep["lag1"], acf(in_time, nlags=1, fft=False)[1], atol=1e-12)
    table = acorr_ljungbox(in_time, lags=[10])
    assert_allclose(dep["ljung_box_p"], float(table["lb_pvalue"].iloc[0]), rtol=1e-9)
    # Without order_by the same figures are taken in the order the rows arrived.
    del body["tuning"]
    body["train"]["rows"] = np.column_stack([t, x, y]).tolist()  # sent in time order
    answer = client.post("/v1/predict", json=body).get_json()
    cv = np.array([p["cv_residual"] for p in answer["predictions"]])
    dep = answer["tuning"]["dependence"]
    assert dep["order"] == "arrival"
    assert_allclose(dep["lag1"], acf(cv, nlags=1, fft=False)[1], atol=1e-12)
