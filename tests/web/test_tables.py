"""JSON tables: strict cells, each bad input answered with a pointer to the place at fault."""

from __future__ import annotations

import numpy as np
import pytest
from webhelpers import body, curve, pointers, problem

from nearwise.core.errors import BadCell, BadTable
from nearwise.web.problems import Problem
from nearwise.web.tables import Limits, from_json

LIMITS = Limits(max_rows=1000, max_columns=10, max_cells=5000)


def test_numbers_and_nulls_become_floats_with_nan() -> None:
    parsed = from_json("train", ["a", "b"], [[1, 2.5], [None, -3]], LIMITS)
    np.testing.assert_array_equal(parsed.table.values, [[1.0, 2.5], [np.nan, -3.0]])
    assert parsed.table.labels == {}


def test_text_cells_are_kept_as_labels() -> None:
    parsed = from_json("train", ["g", "y"], [["a", 1.0], [2, None], [None, 3]], LIMITS)
    np.testing.assert_array_equal(parsed.table.values[:, 1], [1.0, np.nan, 3.0])
    assert list(parsed.table.labels) == [0]
    assert parsed.table.labels[0].tolist() == ["a", 2, None]
    assert np.isnan(parsed.table.values[0, 0]) and parsed.table.values[1, 0] == 2.0


def test_empty_table_has_the_right_width() -> None:
    assert from_json("query", ["a", "b"], [], LIMITS).table.values.shape == (0, 2)


@pytest.mark.parametrize(
    ("rows", "where", "kind"),
    [
        ([[1, 2], [True, 3]], ("train", "rows", 1, 0), BadCell),
        ([[1, 2], [3, [4]]], ("train", "rows", 1, 1), BadCell),
        ([[1, 2], [3, {"v": 4}]], ("train", "rows", 1, 1), BadCell),
        ([[1, 2], [3, "x"], [False, 1]], ("train", "rows", 2, 0), BadCell),
        ([[1, 2], [3]], ("train", "rows", 1), BadTable),
        ([[1, 2], [3, 4, 5]], ("train", "rows", 1), BadTable),
        ([[1, 2], 7], ("train", "rows", 1), BadTable),
        ([[1, 2], "ab"], ("train", "rows", 1), BadTable),
        ([[1, 2], [3, 10**400]], ("train", "rows", 1, 1), BadCell),
        ([[1, 2], [3, float("inf")]], ("train", "rows", 1, 1), BadCell),
        ([[1, None], [float("nan"), 1]], ("train", "rows", 1, 0), BadCell),
        ([[1, 2], [[], []]], ("train", "rows", 1, 0), BadCell),
    ],
)
def test_bad_rows_name_their_place(rows: list, where: tuple, kind: type) -> None:
    with pytest.raises(kind) as info:
        from_json("train", ["a", "b"], rows, LIMITS, saw_constant=True)
    assert info.value.where[0].path == where


def test_duplicate_column_names_are_refused() -> None:
    with pytest.raises(BadTable, match="appears more than once") as info:
        from_json("train", ["a", "b", "a"], [[1, 2, 3]], LIMITS)
    assert info.value.where[0].path == ("train", "columns", 2)


@pytest.mark.parametrize(
    ("n_rows", "n_cols"), [(1001, 2), (2, 11), (600, 9)], ids=["rows", "columns", "cells"]
)
def test_tables_over_the_limits_are_413(n_rows: int, n_cols: int) -> None:
    rows = [[1.0] * n_cols] * n_rows
    with pytest.raises(Problem) as info:
        from_json("train", [f"c{j}" for j in range(n_cols)], rows, LIMITS)
    assert info.value.status == 413


# Over HTTP: the same faults, each with its RFC 6901 pointer.
BAD_BODIES = {
    "boolean": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,2],[2,true]]}}',
        "/train/rows/1/1",
    ),
    "NaN literal": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,2],[NaN,3]]}}',
        "/train/rows/1/0",
    ),
    "Infinity literal": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,-Infinity],[2,3]]}}',
        "/train/rows/0/1",
    ),
    "overflow": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,2],[1e400,3]]}}',
        "/train/rows/1/0",
    ),
    "ragged": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,2],[2,3],[4]]}}',
        "/train/rows/2",
    ),
    "nested": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,2],[2,[3]]]}}',
        "/train/rows/1/1",
    ),
    "duplicate column": (
        b'{"method":"knn","target":"y","train":{"columns":["x","x"],"rows":[[1,2]]}}',
        "/train/columns/1",
    ),
    "duplicate key": (
        b'{"method":"knn","target":"y","tuning":{"folds":3,"folds":4},'
        b'"train":{"columns":["x","y"],"rows":[[1,2]]}}',
        "/tuning/folds",
    ),
    "rows not a list": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":{"a":1}}}',
        "/train/rows",
    ),
    "text in a feature": (
        b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,2],["a",3]]}}',
        "/train/rows/1/0",
    ),
}


@pytest.mark.parametrize("case", BAD_BODIES)
def test_bad_cells_over_http_are_422_with_pointer(client, case: str) -> None:
    data, pointer = BAD_BODIES[case]
    resp = client.post("/v1/predict", data=data, content_type="application/json")
    doc = problem(resp, 422)
    assert pointer in pointers(doc), doc


def test_missing_target_rows_are_dropped_and_reported(client) -> None:
    rows = curve()
    rows[4][1] = None
    resp = client.post("/v1/predict", json=body(train={"columns": ["x", "y"], "rows": rows}))
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    assert doc["fit"]["rows_dropped"] == 1
    assert doc["predictions"][4]["residual"] is None
    assert doc["predictions"][3]["residual"] is not None


def test_table_over_the_row_limit_is_413(client, app) -> None:
    app.extensions["nearwise"] = app.extensions["nearwise"].with_overrides(
        {"max_rows": "NEARWISE_MAX_ROWS"}, {"max_rows": "10"}
    )
    doc = problem(client.post("/v1/predict", json=body()), 413)
    assert pointers(doc) == ["/train/rows"]
