"""The three JSON shapes of a table (web/table_shapes.py): columns and rows, row objects, split.

The row-object and split shapes are pandas' ``to_json(orient="records")`` and
``to_json(orient="split")`` (pandas documentation, ``DataFrame.to_json``). pandas is not a test
dependency: the shapes are built here with the json module, and where pandas is installed one
test checks that pandas writes exactly these documents.
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient
from webhelpers import body, curve, pointers, problem

from nearwise.core.errors import BadTable
from nearwise.web import prescan
from nearwise.web.app import create_app
from nearwise.web.intake import json_bounds
from nearwise.web.openapi import build
from nearwise.web.settings import Settings
from nearwise.web.table_shapes import ROWS, SPLIT, JsonTable, Shape, read
from nearwise.web.tables import Limits

JSON = {"Content-Type": "application/json"}
COLUMNS = ["wind_ms", "air_density", "site", "power_kw"]


def _rows(n: int = 60, seed: int = 3) -> list[list[Any]]:
    """Invented test data: power against wind and air density at three sites, a missing target."""
    rng = np.random.default_rng(seed)
    wind = np.round(rng.uniform(3.0, 14.0, n), 4)
    density = np.round(rng.uniform(1.15, 1.25, n), 4)
    power = np.round(0.5 * density * wind**3 + rng.normal(0.0, 20.0, n), 4)
    out = [
        [float(w), float(d), ["north", "south", "east"][i % 3], float(p)]
        for i, (w, d, p) in enumerate(zip(wind, density, power, strict=True))
    ]
    out[7][3] = None  # a missing target: the row is dropped in every shape
    return out


TRAIN = _rows()
QUERY = [[4.5, 1.2], [9.25, 1.18], [15.5, 1.21]]  # the last beyond the training winds


def as_rows(columns: list[str], rows: list[list[Any]]) -> dict[str, Any]:
    return {"columns": columns, "rows": rows}


def as_records(columns: list[str], rows: list[list[Any]]) -> list[dict[str, Any]]:
    return [dict(zip(columns, row, strict=True)) for row in rows]


def as_split(columns: list[str], rows: list[list[Any]]) -> dict[str, Any]:
    return {"columns": columns, "index": list(range(len(rows))), "data": rows}


SHAPES = {"rows": as_rows, "records": as_records, "split": as_split}


def _post(client: FlaskClient, path: str, doc: dict[str, Any], **headers: str) -> bytes:
    resp = client.post(path, data=json.dumps(doc), headers={**JSON, **headers})
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_data()


def _request(path: str, shape: str, query_shape: str | None = None) -> dict[str, Any]:
    make, make_query = SHAPES[shape], SHAPES[query_shape or shape]
    doc: dict[str, Any] = {
        "train": make(COLUMNS, TRAIN),
        "query": make_query(["wind_ms", "air_density"], QUERY),
    }
    if path == "/v1/locality":
        return {**doc, "features": ["wind_ms", "air_density"], "k": 10}
    fields = {"target": "power_kw", "tuning": {"group_by": "site", "folds": 3}}
    if path == "/v1/compare":
        return {**doc, **fields, "methods": ["knn", "linear"]}
    return {**doc, **fields, "method": "linear"}


@pytest.mark.parametrize("path", ["/v1/predict", "/v1/compare", "/v1/locality"])
def test_the_three_shapes_give_byte_identical_answers(client: FlaskClient, path: str) -> None:
    want = _post(client, path, _request(path, "rows"))
    for shape in ("records", "split"):
        assert _post(client, path, _request(path, shape)) == want, shape
    # and mixed: each table in its own shape
    assert _post(client, path, _request(path, "records", "split")) == want
    assert _post(client, path, _request(path, "split", "rows")) == want


def test_the_csv_answer_echoes_the_query_cells_in_every_shape(client: FlaskClient) -> None:
    csv = {"Accept": "text/csv"}
    want = _post(client, "/v1/predict", _request("/v1/predict", "rows"), **csv)
    assert want.startswith(b"wind_ms,air_density,prediction")
    for shape in ("records", "split"):
        assert _post(client, "/v1/predict", _request("/v1/predict", shape), **csv) == want


def test_row_objects_take_the_column_order_of_the_first_row(client: FlaskClient) -> None:
    """Later rows may hold the keys in any order; the first row's order names the columns."""
    order = ["air_density", "wind_ms", "site", "power_kw"]
    moved = [[r[1], r[0], r[2], r[3]] for r in TRAIN]
    records = as_records(order, moved)
    for i in range(1, len(records), 2):  # every other row with its keys reversed
        records[i] = dict(reversed(records[i].items()))
    doc = _request("/v1/predict", "rows")
    want = _post(client, "/v1/predict", {**doc, "train": as_rows(order, moved)})
    assert json.loads(want)["features"] == ["air_density", "wind_ms"]
    assert _post(client, "/v1/predict", {**doc, "train": records}) == want


def test_pandas_writes_these_shapes() -> None:
    """Reference: pandas' own ``to_json`` (skipped where pandas is not installed). Values have
    at most 10 significant digits, pandas' default ``double_precision``."""
    pd = pytest.importorskip("pandas")
    frame = pd.DataFrame(TRAIN, columns=COLUMNS)
    assert json.loads(frame.to_json(orient="records")) == as_records(COLUMNS, TRAIN)
    assert json.loads(frame.to_json(orient="split")) == as_split(COLUMNS, TRAIN)
    no_index = json.loads(frame.to_json(orient="split", index=False))
    assert no_index == {"columns": COLUMNS, "data": TRAIN}


def test_split_without_index_or_with_any_labels_is_read(client: FlaskClient) -> None:
    doc = _request("/v1/predict", "rows")
    want = _post(client, "/v1/predict", doc)
    labels = [f"2026-01-{i % 28 + 1:02d}" for i in range(len(TRAIN))]
    for index in ({}, {"index": labels}):
        train = {"columns": COLUMNS, "data": TRAIN, **index}
        assert _post(client, "/v1/predict", {**doc, "train": train}) == want


# Errors point into the shape sent.


def test_a_core_error_points_at_the_key_of_a_row_object(client: FlaskClient) -> None:
    """Text in a feature is refused by the core at ("train", "rows", i, j)."""
    rows = [list(r) for r in TRAIN]
    rows[11][0] = "calm"
    for shape, pointer in [
        ("rows", "/train/rows/11/0"),
        ("records", "/train/11/wind_ms"),
        ("split", "/train/data/11/0"),
    ]:
        doc = {**_request("/v1/predict", "rows"), "train": SHAPES[shape](COLUMNS, rows)}
        resp = client.post("/v1/predict", json=doc)
        assert pointers(problem(resp, 422)) == [pointer], shape


def test_a_query_without_a_feature_points_at_its_first_row(client: FlaskClient) -> None:
    doc = {**_request("/v1/predict", "rows"), "query": [{"wind_ms": 5.0}]}
    doc_ = problem(client.post("/v1/predict", json=doc), 422)
    assert pointers(doc_) == ["/query/0"]
    assert "air_density" in doc_["detail"]


def test_unequal_keys_name_the_first_row_at_fault(client: FlaskClient) -> None:
    records = as_records(["x", "y"], curve(12))
    records[4] = {"x": 1.0, "q": 2.0}  # y replaced by q: both named
    records[9] = 3.0  # later: not reported
    resp = client.post("/v1/predict", json=body(train=records))
    doc = problem(resp, 422)
    assert doc["code"] == "bad_table"
    assert pointers(doc) == ["/train/4/y", "/train/4/q"]
    assert "lacks `y`" in doc["detail"] and "has `q`" in doc["detail"]


def test_a_row_object_with_a_million_keys_is_answered_briefly(client: FlaskClient) -> None:
    """As the first row: over the column limit (413) before its keys are listed; as a later
    row: a 422 naming a few of its keys, never all of them."""
    wide = {f"k{i}": 0 for i in range(10**6)}
    doc = problem(client.post("/v1/predict", json=body(train=[wide, {"x": 1, "y": 2}])), 413)
    assert doc["code"] == "table_too_large" and pointers(doc) == ["/train/0"]
    assert "1000000 columns" in doc["detail"]
    wide.update({"x": 1, "y": 2})
    resp = client.post("/v1/predict", json=body(train=[{"x": 1, "y": 2}, wide]))
    doc = problem(resp, 422)
    assert len(doc["errors"]) == 5 and pointers(doc)[0] == "/train/1/k0"
    assert "and 999995 more" in doc["detail"] and len(doc["detail"]) < 400


def test_a_repeated_key_in_a_row_object_is_refused_by_the_parser(client: FlaskClient) -> None:
    data = b'{"method":"knn","target":"y","train":[{"x":1,"y":2},{"x":2,"y":3,"x":4}]}'
    doc = problem(client.post("/v1/predict", data=data, headers=JSON), 422)
    assert pointers(doc) == ["/train/1/x"] and "more than once" in doc["detail"]


@pytest.mark.parametrize(
    ("train", "pointer"),
    [
        ({"columns": ["x", "y"], "rows": curve(12), "index": list(range(12))}, "/train/index"),
        ({"columns": ["x", "y"], "rows": curve(12), "data": curve(12)}, "/train/data"),
        ({"columns": ["x", "y"], "index": list(range(12)), "data": curve(11)}, "/train/index"),
        ({"columns": ["x", "y"], "index": [], "data": curve(1)}, "/train/index"),
        ({"columns": ["x", "y"], "data": curve(12), "extra": 1}, "/train/extra"),
        ({"columns": ["x", "y"], "data": 5}, "/train/data"),
        ({"data": curve(12)}, "/train/columns"),
        ("x,y", "/train"),
        ([{}], "/train/0"),
        ([None, {"x": 1}], "/train/0"),
    ],
)
def test_malformed_shapes_are_422_at_their_place(
    client: FlaskClient, train: Any, pointer: str
) -> None:
    assert pointer in pointers(problem(client.post("/v1/predict", json=body(train=train)), 422))


def test_an_index_of_one_entry_per_row_is_just_enough(client: FlaskClient) -> None:
    """Just inside and just outside: n entries pass, n - 1 and n + 1 do not."""
    for entries, status in [(11, 422), (12, 200), (13, 422)]:
        train = {"columns": ["x", "y"], "index": list(range(entries)), "data": curve(12)}
        assert client.post("/v1/predict", json=body(train=train)).status_code == status


def test_an_empty_list_is_refused_like_an_empty_table(client: FlaskClient) -> None:
    empty = problem(client.post("/v1/predict", json=body(train=as_rows(["x", "y"], []))), 422)
    doc = problem(client.post("/v1/predict", json=body(train=[])), 422)
    assert doc["code"] == empty["code"] == "too_few_rows"
    assert pointers(doc) == ["/train"]
    query = problem(client.post("/v1/predict", json=body(query=[])), 422)
    assert pointers(query) == ["/query"] and '"rows": []' in query["detail"]


# Limits: the same 413 in every shape, checked before the rows are built.

SMALL = Settings(max_rows=100, max_query_rows=100, max_cells=1000, max_columns=10)


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize(
    ("rows", "width", "status"),
    [(100, 2, 200), (101, 2, 413), (100, 10, 200), (100, 11, 413), (91, 11, 413)],
    ids=["rows-at", "rows-over", "cells-at", "cells-over", "columns-over"],
)
def test_each_shape_meets_the_same_limits(shape: str, rows: int, width: int, status: int) -> None:
    columns = [f"c{j}" for j in range(width - 1)] + ["y"]
    table = [[float((i * 7 + j) % 13) for j in range(width)] for i in range(rows)]
    doc = {"method": "linear", "target": "y", "train": SHAPES[shape](columns, table)}
    doc["params"] = {"degree": 1}
    resp = create_app(SMALL).test_client().post("/v1/predict", json=doc)
    if status == 200:
        assert resp.status_code == 200, resp.get_data(as_text=True)
        return
    refused = problem(resp, 413)
    assert refused["code"] == "table_too_large"
    assert "NEARWISE_MAX_ROWS" in refused["detail"]


def test_the_row_limit_pointer_is_in_the_shape_sent() -> None:
    c = create_app(SMALL).test_client()
    table = curve(101)
    for shape, pointer in [
        ("rows", "/train/rows"),
        ("records", "/train"),
        ("split", "/train/data"),
    ]:
        sent = body(train=SHAPES[shape](["x", "y"], table))
        doc = problem(c.post("/v1/predict", json=sent), 413)
        assert pointers(doc) == [pointer], shape


@pytest.mark.parametrize("shape", SHAPES)
def test_the_limits_are_checked_before_the_rows_are_read(shape: str) -> None:
    """An over-limit table is a 413 whatever its rows hold (here a malformed row 50): the
    limits are checked before anything is built from the rows."""
    table: list[Any] = curve(101)
    sent = SHAPES[shape](["x", "y"], table)
    rows = sent if shape == "records" else sent["rows" if shape == "rows" else "data"]
    rows[50] = {"x": 1.0} if shape == "records" else [1.0]
    resp = create_app(SMALL).test_client().post("/v1/predict", json=body(train=sent))
    assert problem(resp, 413)["code"] == "table_too_large"


def test_a_split_request_at_the_limits_passes_the_count() -> None:
    """Each table at its row and cell limits, each with an index: the index adds one value per
    row, which the count's bound allows for (without it this body is refused)."""
    settings = Settings(max_rows=5000, max_query_rows=5000, max_cells=10_000, max_columns=2)
    train = as_split(["x", "y"], [[float(i % 97), float(i % 13)] for i in range(5000)])
    query = as_split(["x"], [[float(i % 89)] for i in range(5000)])
    doc = body("linear", train=train, query=query, params={"degree": 1})
    data = json.dumps(doc).encode()
    values, containers = json_bounds(settings)
    found = prescan.json_values_outside_strings(data)
    assert found[0] > values - 5000 - 5000 - 1000  # over the bound without the index rows
    assert prescan.json_over(data, values, containers) is None
    resp = create_app(settings).test_client().post("/v1/predict", data=data, headers=JSON)
    assert resp.status_code == 200, resp.get_data(as_text=True)


def test_row_objects_count_no_more_values_than_rows() -> None:
    """Keys are not values: a table as row objects counts as many arrays and objects as the
    rows shape, and fewer values (no column list), so the count's bound holds for it."""
    table = [[float(i), None, "a,[{"] for i in range(500)]
    as_json = {s: json.dumps(make(["x", "y", "g"], table)).encode() for s, make in SHAPES.items()}
    rows = prescan.json_values_outside_strings(as_json["rows"])
    records = prescan.json_values_outside_strings(as_json["records"])
    assert records[1] == rows[1] - 2  # the table object and its column list
    assert records[0] < rows[0]


def test_many_small_row_objects_are_refused_before_parsing() -> None:
    """Reference: the container count (prescan). 300,000 one-key objects are more arrays and
    objects than any request within these limits holds."""
    data = b'{"method":"knn","target":"a","train":[' + b",".join([b'{"a":1}'] * 300_000) + b"]}"
    resp = create_app(SMALL).test_client().post("/v1/predict", data=data, headers=JSON)
    refused = problem(resp, 413)
    assert refused["code"] == "table_too_large" and "arrays and objects" in refused["detail"]


# The parts: reading and pointers without HTTP.

LIMITS = Limits(max_rows=10, max_columns=3, max_cells=20)


def test_read_turns_row_objects_into_rows_in_column_order() -> None:
    shapes: dict[str, Shape] = {}
    table = JsonTable("records", None, [{"b": 1, "a": None}, {"a": 2.5, "b": 3}])
    parsed = read("train", table, LIMITS, shapes=shapes)
    assert parsed.table.columns == ("b", "a")
    np.testing.assert_array_equal(parsed.table.values, [[1.0, np.nan], [3.0, 2.5]])
    assert [list(r) for r in parsed.cells] == [[1, None], [3, 2.5]]
    assert shapes["train"] == Shape("records", ("b", "a"))


def test_read_a_one_column_table_of_row_objects() -> None:
    parsed = read("query", JsonTable("records", None, [{"x": 1}, {"x": 2}]), LIMITS)
    np.testing.assert_array_equal(parsed.table.values, [[1.0], [2.0]])


def test_read_refuses_a_row_that_lacks_a_key_even_with_as_many_keys() -> None:
    with pytest.raises(BadTable) as info:
        read("train", JsonTable("records", None, [{"a": 1, "b": 2}, {"a": 1, "c": 2}]), LIMITS)
    assert [w.path for w in info.value.where] == [("train", 1, "b"), ("train", 1, "c")]


@pytest.mark.parametrize(
    ("shape", "path", "want"),
    [
        (Shape(ROWS, ("x", "y")), ("train", "rows", 3, 1), ("train", "rows", 3, 1)),
        (Shape(SPLIT, ("x", "y")), ("train", "rows", 3, 1), ("train", "data", 3, 1)),
        (Shape(SPLIT, ("x", "y")), ("train", "columns", 1), ("train", "columns", 1)),
        (Shape("records", ("x", "y")), ("train", "rows", 3, 1), ("train", 3, "y")),
        (Shape("records", ("x", "y")), ("train", "rows", 3), ("train", 3)),
        (Shape("records", ("x", "y")), ("train", "rows"), ("train",)),
        (Shape("records", ("x", "y")), ("train", "columns", 0), ("train", 0, "x")),
        (Shape("records", ("x", "y")), ("train", "columns"), ("train", 0)),
        (Shape("records", ("x", "y")), ("train", 2, "rows"), ("train", 2, "rows")),
        (Shape("records", ("x", "y")), ("train",), ("train",)),
    ],
)
def test_paths_are_written_in_the_shape_sent(shape: Shape, path: tuple, want: tuple) -> None:
    assert shape.path(path) == want


# The document: a oneOf of the three shapes, each example valid against exactly one.


@pytest.mark.parametrize("schema", ["PredictRequest", "CompareRequest", "LocalityRequest"])
def test_the_document_offers_the_three_shapes(schema: str) -> None:
    """Reference: the jsonschema package's Draft 2020-12 validator (OpenAPI 3.1 schemas)."""
    jsonschema = pytest.importorskip("jsonschema")
    doc = build(create_app(Settings()))
    for name in ("train", "query"):
        field = doc["components"]["schemas"][schema]["properties"][name]
        assert len(field["oneOf"]) == 3 and len(field["examples"]) == 3
        for example in field["examples"]:
            matches = [
                jsonschema.Draft202012Validator(
                    {**branch, "components": doc["components"]}
                ).is_valid(example)
                for branch in field["oneOf"]
            ]
            assert matches.count(True) == 1, (name, example, matches)
        assert field["examples"][1] == as_records(
            ["wind_ms", "power_kw"], [[7.1, 812.0], [7.4, None]]
        )
