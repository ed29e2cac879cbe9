"""Columns that number the rows (issue 13, item 4): the unnamed column a saved index leaves,
and a named column holding exactly 0..n-1 or 1..n in row order.

The two numberings are those the common tools write: pandas' default index is a RangeIndex
0, 1, ..., n - 1 (pandas documentation, ``RangeIndex``; checked against pandas below), and R's
automatic row names are 1, 2, ..., n (R documentation, ``row.names``).
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from nearwise.core import pipeline
from nearwise.core.data import Table
from nearwise.core.errors import BadTable
from nearwise.core.index_like import index_start, notices, refuse_unnamed
from nearwise.core.spec import Job

N = 12


def column(values) -> np.ndarray:
    return np.asarray(values, dtype=np.float64)


# -- the rule, just inside and just outside ---------------------------------------------------


def test_pandas_default_index_is_zero_based() -> None:
    written = pd.DataFrame({"x": np.arange(N) * 0.5}).to_csv()  # index kept, as by default
    index = pd.read_csv(io.StringIO(written)).iloc[:, 0].to_numpy()
    assert index_start(column(index)) == 0


def test_exactly_zero_to_n_minus_one() -> None:
    assert index_start(column(range(N))) == 0


def test_exactly_one_to_n() -> None:
    assert index_start(column(range(1, N + 1))) == 1


@pytest.mark.parametrize(
    "values",
    [
        [0, 1, 2, 3, 5, 5, 6, 7, 8, 9, 10, 11],  # one value off by one (4 -> 5)
        [*range(N - 1), 11.5],  # the last one off by a half
        [1, 0, *range(2, N)],  # a permutation of 0..n-1: not in row order
        [*range(N - 1), N],  # n - 1 rows in order, then a gap (n - 1 missing)
        [*range(2, N + 2)],  # 2..n+1: starts past 1
        [*range(N - 1), np.nan],  # a missing cell
    ],
    ids=["one-off", "last-half-off", "permutation", "gap", "starts-at-2", "missing-cell"],
)
def test_just_outside(values) -> None:
    assert index_start(column(values)) is None


# -- the warning and the refusal ----------------------------------------------------------------


def train_table(first: str = "row", start: int = 0) -> Table:
    rng = np.random.default_rng(4)
    x = np.round(rng.uniform(0.0, 10.0, N), 2)
    y = np.sin(x) + rng.normal(0.0, 0.1, N)
    values = np.column_stack([np.arange(N) + start, x, y])
    return Table("train", (first, "x", "y"), values)


def test_a_default_feature_numbering_the_rows_is_named() -> None:
    found = notices(train_table(), ("row", "x"))
    assert [n.code for n in found] == ["index_like_feature"]
    assert "`row` (0, 1, ..., 11)" in found[0].message
    assert "features" in found[0].message and found[0].rows == ()
    one_based = notices(train_table(start=1), ("row", "x"))
    assert "`row` (1, 2, ..., 12)" in one_based[0].message


def test_listed_in_features_it_is_not_warned_about() -> None:
    assert notices(train_table(), ("row", "x"), given=("row", "x")) == []


def test_the_warning_comes_out_of_a_fit() -> None:
    job = Job(method="knn", train=train_table(), target="y")
    codes = [w.code for w in pipeline.run(job).warnings]
    assert codes.count("index_like_feature") == 1
    listed = Job(method="knn", train=train_table(), target="y", features=("row", "x"))
    assert "index_like_feature" not in [w.code for w in pipeline.run(listed).warnings]
    off = train_table()
    off.values[5, 0] += 1.0  # one value off: no warning
    plain = Job(method="knn", train=off, target="y")
    assert "index_like_feature" not in [w.code for w in pipeline.run(plain).warnings]


@pytest.mark.parametrize("name", ["", "  "])
def test_an_unnamed_default_feature_is_refused(name: str) -> None:
    table = train_table(first=name)
    with pytest.raises(BadTable) as err:
        refuse_unnamed(table, (name, "x"))
    assert err.value.where[0].path == ("train", "columns", 0)
    assert "index=False" in err.value.detail and "`features`" in err.value.detail
    refuse_unnamed(table, ("x",), given=("x",))  # features given: the column is not used


def test_an_unnamed_column_left_out_of_features_fits() -> None:
    table = train_table(first="")
    with pytest.raises(BadTable):
        pipeline.run(Job(method="knn", train=table, target="y"))
    result = pipeline.run(Job(method="knn", train=table, target="y", features=("x",)))
    assert result.features == ("x",)
