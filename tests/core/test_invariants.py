"""Invariants every fit must keep, whatever the data."""

import subprocess
import sys

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core.data import Table
from nearwise.core.methods.knn import KNN
from nearwise.core.pipeline import run
from nearwise.core.spec import Job, TuningSpec


def _table(X, y, name="train"):
    cols = (*[f"x{j}" for j in range(X.shape[1])], "y")
    return Table(name, cols, np.column_stack([X, y]))


def test_exact_linear_data_is_fitted_exactly():
    rng = np.random.default_rng(1)
    X = rng.uniform(-5, 5, size=(40, 3))
    y = 2.5 - 1.5 * X[:, 0] + 0.25 * X[:, 1] + 4 * X[:, 2]
    result = run(Job("linear", _table(X, y), "y", params={"degree": 1}))
    # Exact data: residuals are rounding only, about 1e-15 times the data scale (~10).
    assert_allclose(result.predictions.residual, 0, atol=1e-10)
    est = [t["estimate"] for t in result.model["terms"]]
    # Back-transformed from standardised features: a few ulps of conditioning.
    assert_allclose(est, [2.5, -1.5, 0.25, 4], rtol=1e-11)
    assert result.fit.cv_error < 1e-10


def test_k_equal_to_n_gives_the_mean():
    rng = np.random.default_rng(2)
    X = rng.normal(size=(25, 2))
    y = rng.normal(size=25)
    fitted = KNN().fit(X, y, {"weights": "uniform", "scale": "standard"}, 25)
    # A mean of 25 numbers in another order: ulps.
    assert_allclose(fitted.predict(rng.normal(size=(7, 2))), y.mean(), rtol=1e-13)


@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
@pytest.mark.parametrize("p", [1, 2])
def test_row_order_does_not_change_any_answer(method, p):
    rng = np.random.default_rng(3)
    X = np.round(rng.uniform(0, 5, size=(80, p)), 1)  # with ties
    y = np.sin(X.sum(axis=1)) + rng.normal(0, 0.1, 80)
    Xq = rng.uniform(0, 5, size=(10, p))
    perm = rng.permutation(80)
    a = run(Job(method, _table(X, y), "y", query=_table(Xq, np.zeros(10), "query")))
    b = run(Job(method, _table(X[perm], y[perm]), "y", query=_table(Xq, np.zeros(10), "query")))
    assert a.params == b.params
    # Sums in another order: a few ulps, amplified by the conditioning of the fit.
    assert_allclose(a.predictions.value, b.predictions.value, rtol=1e-9, atol=1e-9)
    # Same folds by content; sums in another order.
    assert_allclose([e.error for e in a.tuning.path], [e.error for e in b.tuning.path], rtol=1e-9)


@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
def test_same_seed_same_answer_and_other_seed_other_folds(method):
    rng = np.random.default_rng(4)
    X = rng.uniform(0, 5, size=(60, 1))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 60)
    job = Job(method, _table(X, y), "y", tuning=TuningSpec(seed=7))
    a, b = run(job), run(job)
    assert np.array_equal(a.predictions.value, b.predictions.value) and a.params == b.params
    assert [e.error for e in a.tuning.path] == [e.error for e in b.tuning.path]
    c = run(Job(method, _table(X, y), "y", tuning=TuningSpec(seed=8)))
    assert [e.error for e in a.tuning.path] != [e.error for e in c.tuning.path]


def test_core_imports_no_web_code():
    code = (
        "import sys, nearwise.core.pipeline, nearwise.core.catalogue\n"
        "bad = [m for m in ('flask', 'marshmallow', 'werkzeug', 'apispec') if m in sys.modules]\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
def test_row_numbers_survive_the_internal_sorting(method):
    """Rows are sorted by content inside the fit; everything per row must come back in the
    caller's order: residuals, out-of-fold residuals, bounds, flags and warning rows."""
    rng = np.random.default_rng(8)
    X = rng.uniform(0, 5, size=(60, 1))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.1, 60)
    y[[7, 31]] = np.nan  # missing targets stay at their rows
    y[44] += 4.0  # an unusual reading at row 44
    perm = rng.permutation(60)
    a = run(Job(method, _table(X, y), "y"))
    b = run(Job(method, _table(X[perm], y[perm]), "y"))
    inv = np.argsort(perm)  # row i of the caller's table is row inv[i] of the permuted one
    for field in ("value", "residual", "cv_residual", "std_error", "lower", "upper"):
        # Same fit up to summation order.
        assert_allclose(
            getattr(b.predictions, field)[inv],
            getattr(a.predictions, field),
            rtol=1e-9,
            atol=1e-9,
            equal_nan=True,
        )
    assert [b.predictions.flags[i] for i in inv] == list(a.predictions.flags)
    rows_a = {w.code: w.rows for w in a.warnings}
    rows_b = {w.code: tuple(sorted(int(perm[r]) for r in w.rows)) for w in b.warnings}
    assert rows_a == rows_b
    assert rows_a["target_missing"] == (7, 31)
    assert 44 in rows_a["unusual_response"]
