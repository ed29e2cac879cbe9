"""Comparison on shared folds and the automatic choice."""

import numpy as np
import pytest

from nearwise.core import pipeline
from nearwise.core.compare import compare
from nearwise.core.data import Table
from nearwise.core.errors import NearwiseError, UnknownName
from nearwise.core.pipeline import run
from nearwise.core.spec import Job, TuningSpec


def _job(X, y, Xq=None, method="auto", **kw):
    cols = (*[f"x{j}" for j in range(X.shape[1])], "y")
    query = None if Xq is None else Table("query", cols[:-1], Xq)
    return Job(method, Table("train", cols, np.column_stack([X, y])), "y", query=query, **kw)


def test_linear_data_recommend_linear():
    """Comparison honesty (common practice: the one-standard-error rule prefers the simplest
    adequate model): a straight line with noise is a linear model."""
    rng = np.random.default_rng(1)
    X = rng.uniform(0, 10, (200, 1))
    result = compare(_job(X, 3 + 2 * X[:, 0] + rng.normal(0, 1, 200)))
    assert result.recommended == "linear"
    assert [r.error for r in result.ranking] == sorted(r.error for r in result.ranking)


def test_a_smooth_curve_is_not_recommended_linear():
    rng = np.random.default_rng(2)
    X = rng.uniform(0, 10, (200, 1))
    result = compare(_job(X, np.sin(X[:, 0]) + rng.normal(0, 0.2, 200)))
    assert result.recommended != "linear"


def test_additive_data_in_six_dimensions_are_not_left_to_knn():
    rng = np.random.default_rng(3)
    X = rng.uniform(0, 1, (300, 6))
    y = np.sin(3 * X[:, 0]) + X[:, 1] ** 2 + X[:, 2] + rng.normal(0, 0.1, 300)
    result = compare(_job(X, y))
    assert result.recommended in ("additive", "linear")
    assert "spline" not in [r.method for r in result.ranking]  # 6 features: it does not apply


@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
def test_every_method_is_tuned_exactly_as_alone_on_the_same_folds(method):
    rng = np.random.default_rng(4)
    X = rng.uniform(0, 5, (120, 1))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 120)
    spec = TuningSpec(seed=9, repeats=2)
    together = compare(_job(X, y, tuning=spec)).paths[method]
    alone = pipeline.run(_job(X, y, method=method, tuning=spec)).tuning
    assert together == alone


def test_parameters_go_to_the_methods_that_define_them():
    rng = np.random.default_rng(5)
    X = rng.uniform(0, 5, (80, 1))
    y = X[:, 0] + rng.normal(0, 0.3, 80)
    result = compare(_job(X, y, methods=["knn", "linear"], params={"k": 7}))
    assert {r.method: r.params for r in result.ranking}["knn"]["k"] == 7
    with pytest.raises(UnknownName, match="not a parameter of any compared method") as e:
        compare(_job(X, y, methods=["knn", "linear"], params={"smoothing": 1.0}))
    assert e.value.where[0].path == ("params", "smoothing")


def test_named_methods_must_apply_and_default_ones_are_skipped_with_a_reason():
    rng = np.random.default_rng(6)
    X = np.repeat([[0.0], [1.0], [2.0]], 10, axis=0)  # 3 distinct values: no spline
    y = X[:, 0] + rng.normal(0, 0.1, 30)
    result = compare(_job(X, y))
    assert "spline" not in [r.method for r in result.ranking]
    assert any(w.code == "method_skipped" and "spline" in w.message for w in result.warnings)
    with pytest.raises(NearwiseError, match=r"^spline: "):
        compare(_job(X, y, methods=["linear", "spline"]))


def test_auto_answers_like_predict_and_names_its_choice():
    rng = np.random.default_rng(7)
    X = rng.uniform(0, 10, (150, 1))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 150)
    result = run(_job(X, y, Xq=np.array([[2.0], [5.0]])))
    assert result.method == result.comparison["recommended"]
    assert result.warnings[0].code == "method_chosen"
    assert result.predictions.value.shape == (2,)
    alone = run(_job(X, y, Xq=np.array([[2.0], [5.0]]), method=result.method))
    assert np.array_equal(alone.predictions.value, result.predictions.value)


def test_curves_for_pictures_follow_the_fits():
    rng = np.random.default_rng(8)
    X = rng.uniform(0, 10, (100, 1))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 100)
    one = run(_job(X, y, method="spline", curve_points=40))
    grid = one.curve["x"][:, None]
    alone = run(_job(X, y, Xq=grid, method="spline"))
    assert np.array_equal(one.curve["value"], alone.predictions.value)
    assert np.array_equal(one.curve["lower"], alone.predictions.lower)
    assert grid[0, 0] < X.min() and grid[-1, 0] > X.max()  # 5 % beyond the data each side
    many = compare(_job(X, y, curve_points=40))
    assert set(many.curves) == {r.method for r in many.ranking}
    assert np.array_equal(many.curves["spline"]["value"], one.curve["value"])
