"""Default grids: what the issue promises for each method."""

import numpy as np
import pytest

from nearwise.core.data import Table
from nearwise.core.pipeline import run
from nearwise.core.spec import Job, TuningSpec


def _run(method, n, p, **kw):
    rng = np.random.default_rng(5)
    X = rng.uniform(0, 3, size=(n, p))
    y = np.sin(X.sum(axis=1)) + rng.normal(0, 0.2, n)
    cols = (*[f"x{j}" for j in range(p)], "y")
    return run(Job(method, Table("train", cols, np.column_stack([X, y])), "y", **kw))


def test_knn_grid_at_few_rows_runs_from_1_to_the_smaller_of_50_and_the_training_fold_minus_one():
    # Folds of 160 rows in 2-D: the rate 160^(2/3) = 29.5 is below the floor of 50, so the
    # grid is every k up to 50; it grows past 50 above 353 rows a fold (test_knn_grid.py).
    big = _run("knn", 200, 2)
    assert [e.params["k"] for e in big.tuning.path] == list(range(50, 0, -1))
    small = _run("knn", 30, 2)  # training folds of 24 rows
    assert [e.params["k"] for e in small.tuning.path] == list(range(23, 0, -1))


def test_linear_grid_is_degrees_one_to_three():
    result = _run("linear", 60, 2)
    assert [e.params["degree"] for e in result.tuning.path] == [1, 2, 3]
    assert [e.df for e in result.tuning.path] == [3.0, 6.0, 10.0]


@pytest.mark.parametrize(("p", "n"), [(1, 300), (2, 200), (3, 150)])
def test_spline_grid_spans_df_from_about_2_to_about_half_n(p, n):
    result = _run("spline", n, p, tuning=TuningSpec(scheme="gcv"))
    df = [e.df for e in result.tuning.path]
    assert len(df) == 20
    assert df == sorted(df)  # simplest first
    assert df[0] < p + 1 + 0.5  # a linear fit has p + 1 degrees of freedom
    assert 0.35 * n <= df[-1] <= 0.65 * n
