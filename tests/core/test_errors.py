"""One test per core error code: the message names the thing, the expectation and a fix, and
``where`` points at the input at fault."""

import numpy as np
import pytest

from nearwise.core.data import Table
from nearwise.core.errors import (
    BadCell,
    BadTable,
    InvalidValue,
    NotApplicable,
    TooFewRows,
    UnknownName,
    UnsupportedDimension,
)
from nearwise.core.pipeline import run
from nearwise.core.spec import IntervalSpec, Job, TuningSpec

RNG = np.random.default_rng(0)
X40 = RNG.uniform(0, 10, size=(40, 4))
Y40 = X40[:, 0] + RNG.normal(0, 1, 40)


def table(X=X40, y=Y40, cols=None, labels=None):
    cols = cols or (*[f"x{j}" for j in range(X.shape[1])], "y")
    return Table("train", tuple(cols), np.column_stack([X, y]), labels or {})


def job(method="knn", **kw):
    kw.setdefault("train", table())
    kw.setdefault("target", "y")
    return Job(method, **kw)


def test_unknown_method():
    with pytest.raises(UnknownName, match="unknown method 'kriging'; choose one of knn") as e:
        run(job("kriging"))
    assert e.value.where[0].path == ("method",)


def test_unknown_parameter_and_column():
    with pytest.raises(UnknownName, match="`kk` is not a parameter of knn") as e:
        run(job(params={"kk": 3}))
    assert e.value.where[0].path == ("params", "kk")
    with pytest.raises(UnknownName, match="column `power` is not in the train table") as e:
        run(job(target="power"))
    assert e.value.where[0].path == ("target",)
    with pytest.raises(UnknownName, match="column `x9`") as e:
        run(job(features=["x0", "x9"]))
    assert e.value.where[0].path == ("features", 1)


def test_k_out_of_range_message():
    with pytest.raises(InvalidValue) as e:
        run(job(params={"k": 0}))
    assert str(e.value).startswith(
        "`k` must be an integer in [1, 31] for 40 rows in 5 folds; got 0."
    )
    assert e.value.where[0].path == ("params", "k")
    with pytest.raises(InvalidValue, match=r"in \[1, 31\].*got 32"):
        run(job(grid={"k": [3, 32]}))


@pytest.mark.parametrize(
    ("method", "params", "grid", "path"),
    [
        ("knn", {"k": True}, {}, ("params", "k")),
        ("knn", {"weights": "gaussian"}, {}, ("params", "weights")),
        ("linear", {"degree": 6}, {}, ("params", "degree")),
        ("spline", {"smoothing": -1.0}, {}, ("params", "smoothing")),
        ("knn", {}, {"k": []}, ("grid", "k")),
        ("knn", {}, {"k": [3, 3]}, ("grid", "k")),
        ("knn", {"k": 3}, {"k": [3, 5]}, ("grid", "k")),
    ],
)
def test_invalid_values(method, params, grid, path):
    with pytest.raises(InvalidValue) as e:
        run(job(method, params=params, grid=grid, features=["x0"]))
    assert e.value.where[0].path[: len(path)] == path


def test_text_and_missing_feature_cells_name_row_and_column():
    cells = np.array([1.0] * 40, dtype=object)
    cells[7] = "calm"
    values = np.column_stack([X40[:, :1], Y40])
    values[7, 0] = np.nan
    t = Table("train", ("x0", "y"), values, {0: cells})
    with pytest.raises(BadCell, match="row 7 holds text 'calm'") as e:
        run(job(train=t))
    assert e.value.where[0].path == ("train", "rows", 7, 0)
    values = np.column_stack([X40[:, :1], Y40])
    values[3, 0] = np.nan
    with pytest.raises(BadCell, match="the first is row 3, column `x0`") as e:
        run(job(train=Table("train", ("x0", "y"), values)))
    assert e.value.where[0].path == ("train", "rows", 3, 0)


def test_missing_target_rows_are_dropped_and_reported():
    y = Y40.copy()
    y[[2, 5]] = np.nan
    result = run(job(train=table(y=y)))
    assert result.fit.rows_dropped == 2 and result.fit.n_train == 38
    notice = next(w for w in result.warnings if w.code == "target_missing")
    assert notice.rows == (2, 5)
    assert np.isnan(result.predictions.residual[[2, 5]]).all()
    assert np.isfinite(result.predictions.value).all()


def test_bad_tables():
    with pytest.raises(BadTable, match="`x0` appears more than once"):
        run(job(train=table(cols=("x0", "x0", "x2", "x3", "y"))))
    with pytest.raises(BadTable, match="at least one feature column"):
        run(job(train=Table("train", ("y",), Y40[:, None])))


def test_too_few_rows():
    small = table(X40[:4], Y40[:4])
    with pytest.raises(TooFewRows, match="needs at least 5 usable rows; got 4") as e:
        run(job(train=small))
    assert e.value.where[0].path == ("tuning", "folds")
    x = np.repeat([1.0, 2.0, 3.0, 4.0], 10)[:, None]
    with pytest.raises(TooFewRows, match="at least 5 distinct feature values; found 4"):
        run(job("spline", train=table(x, Y40)))
    with pytest.raises(TooFewRows, match="found 1"):
        run(job("spline", train=table(np.ones((40, 1)), Y40)))


def test_spline_with_four_features_names_the_methods_that_apply():
    with pytest.raises(
        UnsupportedDimension, match=r"got 4\. With more features use `knn` or `linear`"
    ):
        run(job("spline"))


@pytest.mark.parametrize(
    ("kw", "path"),
    [
        ({"tuning": TuningSpec(scheme="gcv")}, ("tuning", "scheme")),
        ({"tuning": TuningSpec(scheme="loo", repeats=2)}, ("tuning", "repeats")),
        ({"interval": IntervalSpec(kind="model")}, ("interval", "kind")),
        ({"grid": {"weights": ["uniform"]}}, ("grid", "weights")),
    ],
)
def test_not_applicable(kw, path):
    with pytest.raises(NotApplicable) as e:
        run(job(**kw))
    assert e.value.where[0].path == path


def test_scale_does_not_apply_to_a_one_feature_spline():
    with pytest.raises(NotApplicable, match="`scale` applies to thin-plate splines"):
        run(job("spline", features=["x0"], params={"scale": "range"}))


def test_huge_values_are_refused_and_overflowing_predictions_named():
    y = Y40.copy()
    y[4] = 1e120
    with pytest.raises(BadCell, match="values beyond 1e\\+100 in magnitude") as e:
        run(job(train=table(y=y)))
    assert e.value.where[0].path == ("train", "rows", 4, 4)
    query = Table("query", ("x0",), np.array([[1.0], [1e99]]))
    with pytest.raises(BadCell, match="prediction at query row 1 is too large") as e:
        run(job("linear", features=["x0"], params={"degree": 5}, query=query))
    assert e.value.where[0].path == ("query", "rows", 1)


def test_time_budget_is_checked_between_folds():
    from nearwise.core.errors import OverBudget

    with pytest.raises(OverBudget, match="past its time budget of 1e-09 s"):
        run(job(time_budget_s=1e-9))
    assert run(job(time_budget_s=60.0)).fit.n_train == 40
