"""Work limits over HTTP: each refusal is a problem+json naming the limit's variable and the
place at fault, before any fitting starts."""

from __future__ import annotations

import pytest
from webhelpers import body, curve, pointers, problem

from nearwise.web.app import create_app
from nearwise.web.settings import Settings


def _client(**limits):
    return create_app(Settings(**limits)).test_client()


def test_query_rows_over_their_limit_are_413() -> None:
    client = _client(max_query_rows=3)
    query = {"columns": ["x"], "rows": [[1.0], [2.0], [3.0], [4.0]]}
    doc = problem(client.post("/v1/predict", json=body(query=query)), 413)
    assert doc["code"] == "table_too_large"
    assert pointers(doc) == ["/query/rows"]
    assert "NEARWISE_MAX_QUERY_ROWS" in doc["detail"]
    query["rows"] = query["rows"][:3]
    assert client.post("/v1/predict", json=body(query=query)).status_code == 200


def test_cell_at_list_over_the_query_limit_is_413() -> None:
    doc = problem(
        _client(max_query_rows=2).get("/v1/cell?x=1,2,3,4,5,6&y=1,2,3,4,5,6&at=1,2,3"), 413
    )
    assert "NEARWISE_MAX_QUERY_ROWS" in doc["detail"]
    assert doc["errors"] == [{"parameter": "at", "message": "too long"}]


def test_a_grid_over_the_limit_is_422_at_the_grid() -> None:
    doc = problem(
        _client(max_grid=5).post("/v1/predict", json=body(grid={"k": [1, 2, 3, 4, 5, 6]})), 422
    )
    assert doc["code"] == "over_limit"
    assert pointers(doc) == ["/grid/k"]
    assert "NEARWISE_MAX_GRID = 5" in doc["detail"]


def test_folds_times_repeats_over_the_limit_is_422() -> None:
    tuning = {"folds": 5, "repeats": 3}
    doc = problem(_client(max_fold_fits=10).post("/v1/predict", json=body(tuning=tuning)), 422)
    assert doc["code"] == "over_limit"
    assert pointers(doc) == ["/tuning/repeats"]
    assert "NEARWISE_MAX_FOLD_FITS = 10" in doc["detail"]


def test_too_many_methods_in_a_compare_is_422() -> None:
    req = body(method=None)
    del req["method"]
    req["methods"] = ["knn", "linear", "spline"]
    doc = problem(_client(max_methods=2).post("/v1/compare", json=req), 422)
    assert doc["code"] == "over_limit"
    assert pointers(doc) == ["/methods"]
    assert "NEARWISE_MAX_METHODS = 2" in doc["detail"]


@pytest.mark.parametrize("path", ["/v1/predict", "/v1/compare"])
def test_an_over_cost_request_is_422_with_the_rows_that_would_fit(path: str) -> None:
    req = body(train={"columns": ["x", "y"], "rows": curve(400)})
    if path == "/v1/compare":
        del req["method"]
        req["methods"] = ["knn", "spline"]
    doc = problem(_client(max_cost_s=0.001).post(path, json=req), 422)
    assert doc["code"] == "over_limit"
    assert pointers(doc) == ["/train/rows"]
    assert "NEARWISE_MAX_COST_S = 0.001 s" in doc["detail"]
    assert "training rows fit under it" in doc["detail"] or "Even a few rows" in doc["detail"]


def test_the_default_limits_let_the_samples_through(client) -> None:
    assert client.post("/v1/predict", json=body()).status_code == 200


def test_a_raised_grid_limit_is_honoured() -> None:
    grid = {"k": list(range(1, 251))}  # over the default 200
    assert problem(_client().post("/v1/predict", json=body(grid=grid)), 422)["code"] == "over_limit"
    rows = curve(400)
    req = body(grid=grid, train={"columns": ["x", "y"], "rows": rows})
    assert _client(max_grid=300).post("/v1/predict", json=req).status_code == 200
