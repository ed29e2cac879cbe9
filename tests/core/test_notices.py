"""Known-answer designs for the warnings a fit attaches to its predictions."""

import numpy as np
import pytest

from nearwise.core.data import Table
from nearwise.core.pipeline import run
from nearwise.core.spec import Job, TuningSpec


def _job(method, X, y, Xq=None, **kw):
    cols = (*[f"x{j}" for j in range(X.shape[1])], "y")
    query = None if Xq is None else Table("query", cols[:-1], Xq)
    return Job(method, Table("train", cols, np.column_stack([X, y])), "y", query=query, **kw)


def _codes(result):
    return {w.code: w.rows for w in result.warnings}


def test_hidden_extrapolation_is_flagged_high_leverage():
    """Montgomery, Peck & Vining (2012), section 3.8: with two strongly correlated features a
    point inside both ranges can lie far outside the data cloud."""
    rng = np.random.default_rng(1)
    a = rng.uniform(0, 10, 80)
    X = np.column_stack([a, a + rng.normal(0, 0.3, 80)])
    y = X.sum(axis=1) + rng.normal(0, 0.5, 80)
    Xq = np.array([[5.0, 5.0], [9.0, 1.0]])  # the second is inside both ranges, off the cloud
    result = run(_job("linear", X, y, Xq, params={"degree": 1}))
    assert _codes(result)["high_leverage"] == (1,)
    assert result.predictions.flags[0] == ()
    assert "high_leverage" in result.predictions.flags[1]


def test_wide_neighborhoods_and_non_local_knn():
    rng = np.random.default_rng(2)
    X = rng.uniform(0, 1, size=(60, 1))
    y = np.sin(6 * X[:, 0]) + rng.normal(0, 0.1, 60)
    wide = run(_job("knn", X, y, np.array([[0.5]]), params={"k": 40}))
    assert "wide_neighborhood" in wide.predictions.flags[0]
    narrow = run(_job("knn", X, y, np.array([[0.5]]), params={"k": 3}))
    assert "wide_neighborhood" not in narrow.predictions.flags[0]
    X10 = rng.uniform(0, 1, size=(60, 10))
    far = run(_job("knn", X10, y, params={"k": 5}))
    near = run(_job("knn", X, y, params={"k": 5}))
    assert "not_local" in _codes(far) and "not_local" not in _codes(near)


def test_interpolating_fits_are_named():
    rng = np.random.default_rng(3)
    X = np.linspace(0, 5, 50)[:, None]
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 50)
    assert "interpolating" in _codes(run(_job("spline", X, y, params={"smoothing": 0.0})))
    assert "interpolating" in _codes(run(_job("knn", X, y, params={"k": 1})))
    assert "interpolating" not in _codes(run(_job("spline", X, y)))


def test_few_rows_and_rank_deficient():
    rng = np.random.default_rng(4)
    X = np.repeat([[0.0], [1.0]], 10, axis=0)  # two distinct values: only a line is determined
    y = X[:, 0] + rng.normal(0, 0.1, 20)
    result = run(_job("linear", X, y, params={"degree": 3}))
    codes = _codes(result)
    assert "few_rows" in codes and "rank_deficient" in codes
    assert result.model["aliased_terms"] == ["x0^2", "x0^3"]
    assert [t["name"] for t in result.model["terms"]] == ["intercept", "x0"]


def test_a_constant_feature_is_dropped_and_named():
    rng = np.random.default_rng(7)
    X = np.column_stack([rng.uniform(0, 1, 40), np.full(40, 3.0)])
    y = 2 * X[:, 0] + rng.normal(0, 0.1, 40)
    result = run(_job("linear", X, y, params={"degree": 1}))
    assert result.model["aliased_terms"] == ["x1"]
    est = {t["name"]: t["estimate"] for t in result.model["terms"]}
    # The true slope is 2; least squares estimates it with standard error sigma / (sd(x)
    # sqrt(n)) = 0.1 / (0.29 sqrt(40)) = 0.055 (the textbook formula for a straight line), so
    # 0.2 is about 3.6 standard errors.
    assert set(est) == {"intercept", "x0"} and abs(est["x0"] - 2) < 0.2


def test_cv_residuals_and_an_unusual_reading():
    rng = np.random.default_rng(5)
    X = np.linspace(0, 10, 120)[:, None]
    y = np.sin(X[:, 0]) + rng.normal(0, 0.1, 120)
    y[37] += 3.0  # a recording error
    result = run(_job("spline", X, y, tuning=TuningSpec(scheme="loo")))
    assert _codes(result)["unusual_response"] == (37,)
    assert result.predictions.flags[37] == ("unusual_response",)
    r = result.predictions.cv_residual
    assert np.argmax(np.abs(r)) == 37
    assert np.all(np.abs(r) >= np.abs(result.predictions.residual) - 1e-12)


@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
def test_a_query_beyond_the_range_is_flagged(method):
    rng = np.random.default_rng(6)
    X = rng.uniform(0, 1, size=(80, 2))
    y = X.sum(axis=1) + rng.normal(0, 0.1, 80)
    result = run(_job(method, X, y, np.array([[0.5, 0.5], [1.5, 0.5]])))
    assert "outside_range" not in result.predictions.flags[0]
    assert "outside_range" in result.predictions.flags[1]


def test_every_warning_code_is_documented_in_the_catalogue():
    import re
    from pathlib import Path

    from nearwise.core import catalogue, locality

    core = Path(catalogue.__file__).parent
    emitted = set(locality.CODES)
    for path in core.rglob("*.py"):
        emitted |= set(re.findall(r'Notice\(\s*"([a-z_]+)"', path.read_text()))
    documented = {w["code"] for w in catalogue.describe()["warnings"]}
    assert emitted <= documented, emitted - documented
    assert len(emitted) >= 15
