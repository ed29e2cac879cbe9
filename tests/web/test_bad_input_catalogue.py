"""The bad-input catalogue (issue 7, item 2): named malformed requests, each answered with its
documented status as problem+json that names the place at fault, and never with a 500.

Each case says where the fault must be named: an entry of ``errors`` (a JSON Pointer, a CSV
``part``/``line``/``column``, or a query ``parameter``), or, for faults of the HTTP envelope that
have no field (method, Accept, Content-Type, body size, JSON syntax), a phrase of ``detail``.
"""

from __future__ import annotations

import gzip
import io
import json
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import pytest
from flask.testing import FlaskClient
from webhelpers import body, curve, post_without_length, problem
from werkzeug.test import TestResponse

from nearwise.web.app import create_app
from nearwise.web.problem_types import TYPES
from nearwise.web.settings import Settings

Send = Callable[[FlaskClient], TestResponse]

XY = '"columns":["x","y"]'
ROWS = ",".join(f"[{x},{y}]" for x, y in curve(12))
CSV_HEAD = "/v1/predict?method=knn&target=y"
ANY = object()  # a key that must be present, with any value


@dataclass(frozen=True)
class Case:
    send: Send
    status: int
    entry: dict[str, Any] = field(default_factory=dict)
    detail: tuple[str, ...] = ()


def post_json(doc: Any, path: str = "/v1/predict", **headers: str) -> Send:
    return lambda c: c.post(
        path, data=json.dumps(doc), content_type="application/json", headers=headers
    )


def post_raw(
    text: str | bytes, content_type: str = "application/json", path: str = "/v1/predict"
) -> Send:
    data = text.encode() if isinstance(text, str) else text
    return lambda c: c.post(path, data=data, content_type=content_type)


def raw_train(rows: str, more: str = "", columns: str = XY) -> Send:
    """A predict body whose train table is written by hand (for literals JSON cannot hold)."""
    return post_raw(f'{{"method":"knn","target":"y"{more},"train":{{{columns},"rows":[{rows}]}}}}')


def table(columns: list[str], rows: list[list[Any]]) -> dict[str, Any]:
    return {"columns": columns, "rows": rows}


def post_csv(data: bytes, query: str = CSV_HEAD) -> Send:
    return lambda c: c.post(query, data=data, content_type="text/csv")


def post_parts(train: bytes, query: bytes, url: str = CSV_HEAD) -> Send:
    return lambda c: c.post(
        url,
        data={
            "train": (io.BytesIO(train), "train.csv", "text/csv"),
            "query": (io.BytesIO(query), "query.csv", "text/csv"),
        },
        content_type="multipart/form-data",
    )


def capped(send_with: Callable[[FlaskClient, bytes], TestResponse], spare: int) -> Send:
    """Send the default body to an app whose body cap is ``spare`` bytes short of it."""
    data = json.dumps(body()).encode()

    def send(_: FlaskClient) -> TestResponse:
        small = create_app(Settings(max_body_bytes=len(data) - spare)).test_client()
        return send_with(small, data)

    return send


def on_small(send: Send, **limits: int) -> Send:
    """Send to an app with small table limits, so that an over-limit body stays small."""
    return lambda _: send(create_app(Settings(**limits)).test_client())


SMALL = {"max_rows": 100, "max_query_rows": 100, "max_cells": 1000, "max_columns": 10}
BIG_NAME = "a" * 2**20  # a 1 MiB field name: echoed cut to 80 characters and its length


def with_length(c: FlaskClient, data: bytes) -> TestResponse:
    return c.post("/v1/predict", data=data, content_type="application/json")


def as_gzip(c: FlaskClient, data: bytes) -> TestResponse:
    """``data`` gzip-compressed: far under the cap as sent, over it once decompressed."""
    return c.post(
        "/v1/predict",
        data=gzip.compress(data),
        content_type="application/json",
        headers={"Content-Encoding": "gzip"},
    )


def as_multipart(c: FlaskClient, data: bytes) -> TestResponse:
    return c.post(CSV_HEAD, data={"train": (io.BytesIO(b"x,y\n" + b"1,2\n" * len(data)), "t.csv")})


def at(path: str) -> dict[str, str]:
    return {"pointer": path}


def csv_at(line: object, column: str | None = None, part: str = "train") -> dict[str, Any]:
    where: dict[str, Any] = {"part": part, "line": line}
    if column is not None:
        where["column"] = column
    return where


XYW = '"columns":["x","y","w"]'
W_ROWS = ",".join(f"[{x},{y},1]" for x, y in curve(12))


def weighted_body(weights: list[Any]) -> dict[str, Any]:
    """A predict body on :func:`curve` with the weight column ``w`` holding ``weights``."""
    rows = [[x, y, w] for (x, y), w in zip(curve(12), weights, strict=True)]
    return {
        "method": "linear",
        "target": "y",
        "weight_by": "w",
        "train": table(["x", "y", "w"], rows),
    }


def weighted(weights: list[Any]) -> Send:
    return post_json(weighted_body(weights))


SITES = ["east", "north", "south"]
SITE_ROWS = [[x, SITES[i % 3], y] for i, (x, y) in enumerate(curve(12))]


def sited(**more: Any) -> Send:
    """A predict body whose train table has a text column ``site`` (declared categorical
    unless ``more`` says otherwise)."""
    doc = {
        "method": "linear",
        "target": "y",
        "categorical": ["site"],
        "train": table(["x", "site", "y"], SITE_ROWS),
        **more,
    }
    return post_json({k: v for k, v in doc.items() if v is not None})


def many_levels(levels: int, n: int) -> list[list[Any]]:
    return [[float(i), f"L{i % levels}", float(i % 5)] for i in range(n)]


CONSTANT_X = [[2.0, float(i % 3)] for i in range(12)]
CONSTANT_B = [[float(i), 2.0, float(i % 3)] for i in range(15)]
FOUR = [[i, i % 3, i % 5, i % 7, float(i % 4)] for i in range(20)]
RECORDS = [{"x": x, "y": y} for x, y in curve(12)]  # the curve as row objects


def records(row: int, replaced: Any) -> Send:
    """A predict body whose train table is row objects, with ``row`` replaced."""
    return post_json(body(train=[*RECORDS[:row], replaced, *RECORDS[row + 1 :]]))


def split(**parts: Any) -> Send:
    """A predict body whose train table is in pandas' split shape, with ``parts`` added."""
    return post_json(body(train={"columns": ["x", "y"], "data": curve(12), **parts}))


CASES: dict[str, Case] = {
    # malformed JSON
    "json-unclosed-object": Case(post_raw('{"method":"knn"'), 400, detail=("line 1",)),
    "json-trailing-comma": Case(post_raw('{"method":"knn",}'), 400, detail=("line 1",)),
    "json-single-quotes": Case(post_raw("{'method':'knn'}"), 400, detail=("column 2",)),
    "json-not-utf8": Case(post_raw(b'{"method":"kn\xff"}'), 400, detail=("UTF-8",)),
    "json-body-an-array": Case(post_json([1, 2]), 422, at("")),
    # NaN, Infinity and overflow literals
    "nan-literal-in-feature": Case(raw_train(f"{ROWS},[NaN,1]"), 422, at("/train/rows/12/0")),
    "nan-literal-in-target": Case(raw_train(f"[1,NaN],{ROWS}"), 422, at("/train/rows/0/1")),
    "infinity-literal": Case(raw_train(f"{ROWS},[Infinity,1]"), 422, at("/train/rows/12/0")),
    "minus-infinity-literal": Case(raw_train(f"[2,-Infinity],{ROWS}"), 422, at("/train/rows/0/1")),
    "overflow-1e400": Case(raw_train(f"{ROWS},[1e400,1]"), 422, at("/train/rows/12/0")),
    "overflow-huge-integer": Case(
        raw_train(f"{ROWS},[{'9' * 400},1]"), 422, at("/train/rows/12/0")
    ),
    "nan-literal-in-query": Case(
        post_raw(
            '{"method":"knn","target":"y","train":{' + XY + ',"rows":[' + ROWS + "]},"
            '"query":{"columns":["x"],"rows":[[1],[NaN]]}}'
        ),
        422,
        at("/query/rows/1/0"),
    ),
    "nan-literal-in-interval-level": Case(
        raw_train(ROWS, ',"interval":{"level":NaN}'), 422, at("/interval/level")
    ),
    "infinity-literal-in-grid": Case(
        raw_train(ROWS, ',"grid":{"k":[1,Infinity]}'), 422, at("/grid/k/1")
    ),
    # duplicate keys
    "duplicate-key-in-tuning": Case(
        raw_train(ROWS, ',"tuning":{"folds":3,"folds":4}'), 422, at("/tuning/folds")
    ),
    "duplicate-key-at-top": Case(
        post_raw(
            '{"method":"knn","method":"linear","target":"y","train":{'
            + XY
            + ',"rows":['
            + ROWS
            + "]}}"
        ),
        422,
        at("/method"),
    ),
    # form-encoded and XML bodies
    "form-urlencoded": Case(
        lambda c: c.post(CSV_HEAD, data={"train": "x,y\n1,2\n"}),
        415,
        detail=("application/x-www-form-urlencoded",),
    ),
    "xml-body": Case(
        post_raw("<predict><method>knn</method></predict>", "application/xml"),
        415,
        detail=("application/xml",),
    ),
    "text-xml-body": Case(post_raw("<a/>", "text/xml"), 415, detail=("text/xml",)),
    # a missing or unknown field
    "missing-method": Case(
        post_json({k: v for k, v in body().items() if k != "method"}), 422, at("/method")
    ),
    "missing-target": Case(
        post_json({k: v for k, v in body().items() if k != "target"}), 422, at("/target")
    ),
    "missing-train": Case(post_json({"method": "knn", "target": "y"}), 422, at("/train")),
    "missing-rows": Case(post_json(body(train={"columns": ["x", "y"]})), 422, at("/train/rows")),
    "unknown-top-field": Case(post_json(body(bogus=1)), 422, at("/bogus")),
    "unknown-tuning-field": Case(post_json(body(tuning={"fold": 3})), 422, at("/tuning/fold")),
    "unknown-method": Case(post_json(body("lasso")), 422, at("/method")),
    "compare-unknown-method": Case(
        post_json(
            {"methods": ["knn", "lasso"], "target": "y", "train": body()["train"]}, "/v1/compare"
        ),
        422,
        at("/methods/1"),
    ),
    "target-also-a-feature": Case(post_json(body(features=["y"])), 422, at("/features/0")),
    "target-not-a-column": Case(post_json(body(target="z")), 422, at("/target")),
    "feature-not-a-column": Case(post_json(body(features=["w"])), 422, at("/features/0")),
    # a text or boolean cell
    "text-cell-in-target": Case(raw_train(f'{ROWS},[1,"a"]'), 422, at("/train/rows/12/1")),
    "text-cell-in-feature": Case(raw_train(f'{ROWS},["abc",1]'), 422, at("/train/rows/12/0")),
    "text-nan-cell": Case(raw_train(f'{ROWS},[1,"NaN"]'), 422, at("/train/rows/12/1")),
    "boolean-cell": Case(raw_train(f"{ROWS},[true,1]"), 422, at("/train/rows/12/0")),
    "nested-list-cell": Case(raw_train(f"{ROWS},[[1],1]"), 422, at("/train/rows/12/0")),
    # ragged rows and duplicate column names
    "ragged-short-row": Case(raw_train(f"{ROWS},[1]"), 422, at("/train/rows/12")),
    "ragged-long-row": Case(raw_train(f"{ROWS},[1,2,3]"), 422, at("/train/rows/12")),
    "row-not-a-list": Case(raw_train(f"{ROWS},7"), 422, at("/train/rows/12")),
    "duplicate-column": Case(
        raw_train(ROWS, columns='"columns":["y","y"]'), 422, at("/train/columns/1")
    ),
    # row objects and pandas' split shape
    "records-missing-key": Case(records(5, {"x": 1.0}), 422, at("/train/5/y")),
    "records-extra-key": Case(records(5, {"x": 1.0, "y": 2.0, "z": 3.0}), 422, at("/train/5/z")),
    "records-other-key": Case(records(3, {"x": 1.0, "Y": 2.0}), 422, at("/train/3/Y")),
    "records-row-not-an-object": Case(records(7, [1.0, 2.0]), 422, at("/train/7")),
    "records-first-row-not-an-object": Case(records(0, 4), 422, at("/train/0")),
    "records-boolean-cell": Case(records(4, {"x": True, "y": 1.0}), 422, at("/train/4/x")),
    "records-text-in-target": Case(records(2, {"x": 1.0, "y": "a"}), 422, at("/train/2/y")),
    "records-empty-list": Case(post_json(body(train=[])), 422, at("/train")),
    "records-duplicate-key": Case(
        post_raw('{"method":"knn","target":"y","train":[{"x":1,"y":2,"x":3}]}'),
        422,
        at("/train/0/x"),
    ),
    "records-over-the-row-limit": Case(
        on_small(post_json(body(train=[{"x": 1.0, "y": 2.0}] * 101)), **SMALL),
        413,
        at("/train"),
        ("NEARWISE_MAX_ROWS",),
    ),
    "split-index-wrong-length": Case(split(index=list(range(11))), 422, at("/train/index")),
    "split-index-not-a-list": Case(split(index=7), 422, at("/train/index")),
    "split-rows-and-data": Case(split(rows=curve(12)), 422, at("/train/data")),
    "split-data-missing": Case(
        post_json(body(train={"columns": ["x", "y"], "index": [0]})), 422, at("/train/data")
    ),
    "split-boolean-cell": Case(
        post_json(body(train={"columns": ["x", "y"], "data": [[1, 2], [False, 3]]})),
        422,
        at("/train/data/1/0"),
    ),
    "table-a-number": Case(post_json(body(train=5)), 422, at("/train")),
    # empty tables and a single row
    "empty-rows": Case(post_json(body(train=table(["x", "y"], []))), 422, at("/train/rows")),
    "empty-columns": Case(post_json(body(train=table([], []))), 422, at("/train/columns")),
    "single-row": Case(
        post_json(body(train=table(["x", "y"], [[1.0, 2.0]]))), 422, at("/tuning/folds")
    ),
    # fewer rows than folds
    "three-rows-five-folds": Case(
        post_json(body(train=table(["x", "y"], curve(3)))), 422, at("/tuning/folds")
    ),
    "ten-rows-twenty-folds": Case(
        post_json(body(tuning={"folds": 20}, train=table(["x", "y"], curve(10)))),
        422,
        at("/tuning/folds"),
    ),
    # parameters out of range, of the wrong type, or unknown
    "k-zero": Case(post_json(body(params={"k": 0})), 422, at("/params/k")),
    "k-negative": Case(post_json(body(params={"k": -3})), 422, at("/params/k")),
    "k-fractional": Case(post_json(body(params={"k": 2.5})), 422, at("/params/k")),
    "k-a-string": Case(post_json(body(params={"k": "five"})), 422, at("/params/k")),
    "degree-six": Case(post_json(body("linear", params={"degree": 6})), 422, at("/params/degree")),
    "weights-unknown": Case(
        post_json(body(params={"weights": "cosine"})), 422, at("/params/weights")
    ),
    "unknown-parameter": Case(
        post_json(body(params={"smoothing": 1.0})), 422, at("/params/smoothing")
    ),
    "k-beyond-the-fold-size": Case(post_json(body(params={"k": 1000})), 422, at("/params/k")),
    "k-fixed-and-tuned": Case(
        post_json(body(params={"k": 3}, grid={"k": [1, 2]})), 422, at("/grid/k")
    ),
    "gcv-for-knn": Case(post_json(body(tuning={"scheme": "gcv"})), 422, at("/tuning/scheme")),
    "folds-one": Case(post_json(body(tuning={"folds": 1})), 422, at("/tuning/folds")),
    "folds-a-string": Case(post_json(body(tuning={"folds": "5"})), 422, at("/tuning/folds")),
    "folds-boolean": Case(post_json(body(tuning={"folds": True})), 422, at("/tuning/folds")),
    "repeats-zero": Case(post_json(body(tuning={"repeats": 0})), 422, at("/tuning/repeats")),
    "seed-negative": Case(post_json(body(tuning={"seed": -1})), 422, at("/tuning/seed")),
    "scheme-unknown": Case(
        post_json(body(tuning={"scheme": "bootstrap"})), 422, at("/tuning/scheme")
    ),
    "level-one": Case(post_json(body(interval={"level": 1.0})), 422, at("/interval/level")),
    "level-a-string": Case(post_json(body(interval={"level": "90%"})), 422, at("/interval/level")),
    "group-by-unknown-column": Case(
        post_json(body(tuning={"group_by": "g"})), 422, at("/tuning/group_by")
    ),
    "cell-parameter-out-of-range": Case(
        lambda c: c.get("/v1/cell?x=1,2,3,4,5,6&y=1,2,3,4,5,6&at=2&level=7"),
        422,
        {"parameter": "level"},
    ),
    # empty and enormous grids
    "grid-empty": Case(post_json(body(grid={"k": []})), 422, at("/grid/k")),
    "grid-enormous": Case(post_json(body(grid={"k": list(range(1, 1002))})), 422, at("/grid/k")),
    "grid-unknown-parameter": Case(
        post_json(body(grid={"degree": [1, 2]})), 422, at("/grid/degree")
    ),
    "grid-text-values": Case(post_json(body(grid={"k": ["a", "b"]})), 422, at("/grid/k/0")),
    # a query with the wrong columns
    "query-missing-feature": Case(
        post_json(body(query=table(["w"], [[1.0]]))), 422, at("/query/columns")
    ),
    "query-duplicate-column": Case(
        post_json(body(query=table(["x", "x"], [[1.0, 2.0]]))), 422, at("/query/columns/1")
    ),
    "query-ragged": Case(
        post_json(body(query=table(["x"], [[1.0], [1.0, 2.0]]))), 422, at("/query/rows/1")
    ),
    # spline: too many features, or x values all the same
    "spline-four-features": Case(
        post_json(body("spline", train=table(["a", "b", "c", "d", "y"], FOUR))),
        422,
        at("/features"),
    ),
    "spline-constant-x": Case(
        post_json(body("spline", train=table(["x", "y"], CONSTANT_X))), 422, at("/train/rows")
    ),
    "spline-two-features-one-constant": Case(
        post_json(body("spline", train=table(["a", "b", "y"], CONSTANT_B))), 422, at("/features")
    ),
    "compare-spline-constant-x": Case(
        post_json(
            {"methods": ["knn", "spline"], "target": "y", "train": table(["x", "y"], CONSTANT_X)},
            "/v1/compare",
        ),
        422,
        at("/train/rows"),
    ),
    # wrong HTTP method and unsupported Accept
    "get-predict": Case(lambda c: c.get("/v1/predict"), 405, detail=("POST",)),
    "put-compare": Case(lambda c: c.put("/v1/compare", json=body()), 405, detail=("POST",)),
    "delete-locality": Case(lambda c: c.delete("/v1/locality"), 405, detail=("POST",)),
    "post-methods": Case(lambda c: c.post("/v1/methods", json={}), 405, detail=("GET",)),
    "accept-html": Case(post_json(body(), Accept="text/html"), 406, detail=("text/html",)),
    "accept-xml": Case(
        post_json(body(), Accept="application/xml"), 406, detail=("application/xml",)
    ),
    "accept-csv-on-methods": Case(
        lambda c: c.get("/v1/methods", headers={"Accept": "text/csv"}), 406, detail=("text/csv",)
    ),
    # bodies over the cap
    "over-cap-with-length": Case(capped(with_length, 1), 413, detail=("NEARWISE_MAX_BODY_BYTES",)),
    "over-cap-without-length": Case(
        capped(post_without_length, 1), 413, detail=("NEARWISE_MAX_BODY_BYTES",)
    ),
    "over-cap-multipart": Case(capped(as_multipart, 1), 413, detail=("NEARWISE_MAX_BODY_BYTES",)),
    # content codings: gzip and deflate are read, others refused (415 naming the header)
    **{
        f"content-encoding-{coding}": Case(
            post_json(body(), **{"Content-Encoding": coding}), 415, detail=("Content-Encoding",)
        )
        for coding in ("br", "x-unheard-of", "gzip, gzip")
    },
    # a body that is not what its coding says: 400 naming the coding
    **{
        f"content-encoding-{coding}-not-compressed": Case(
            post_json(body(), **{"Content-Encoding": coding}),
            400,
            detail=(f"Content-Encoding: {coding}",),
        )
        for coding in ("gzip", "deflate")
    },
    # a gzip body that inflates past the cap (the cap applies to the decompressed size)
    "gzip-inflates-over-cap": Case(capped(as_gzip, 1), 413, detail=("NEARWISE_MAX_BODY_BYTES",)),
    # limits met while parsing, before the table is held
    "json-values-over-any-table": Case(
        on_small(post_raw("[" + ",".join(["[]"] * 3000) + "]"), **SMALL),
        413,
        detail=("NEARWISE_MAX_CELLS",),
    ),
    "csv-rows-over-the-limit": Case(
        on_small(post_csv(b"x,y\n" + b"1,2\n" * 101), **SMALL),
        413,
        {"part": "train"},
        ("NEARWISE_MAX_ROWS",),
    ),
    "csv-one-wide-row": Case(
        on_small(post_csv(b"x,y\n" + b"1," * 2000 + b"1\n"), **SMALL),
        413,
        {"part": "train"},
        ("NEARWISE_MAX_CELLS",),
    ),
    "csv-blank-line-inside": Case(post_csv(b"x,y\n1,2\n\n3,4\n"), 422, csv_at(3)),
    "form-list-over-any-limit": Case(
        lambda c: c.post(
            CSV_HEAD,
            data={
                "train": (io.BytesIO(b"x,y\n1,2\n"), "t.csv"),
                "grid.k": ",".join(map(str, range(1, 300))),
            },
        ),
        422,
        at("/grid/k"),
    ),
    # echoes are cut: the place is still named
    "unknown-field-of-1-mib": Case(
        post_json(body(**{BIG_NAME: 1})), 422, at(f"/{'a' * 80}… (1048576 characters)")
    ),
    "unknown-field-lone-surrogate": Case(
        post_raw('{"\\ud800":1,"method":"knn","target":"y"}'), 422, at("/\\ud800")
    ),
    # numbers at the edges: range errors before the cost estimate; subnormal cells
    "k-2-to-the-70": Case(post_json(body(params={"k": 2**70})), 422, at("/params/k")),
    "grid-k-2-to-the-70": Case(post_json(body(grid={"k": [1, 2**70]})), 422, at("/grid/k/1")),
    "subnormal-feature-cell": Case(raw_train(f"{ROWS},[1e-310,1]"), 422, at("/train/rows/12/0")),
    # CSV with a broken encoding or quoting
    "csv-latin1": Case(post_csv("x,y\n1,2\n2,3\ncaf\xe9,4\n".encode("latin-1")), 400, csv_at(4)),
    "csv-utf16": Case(post_csv("x,y\n1,2\n".encode("utf-16")), 400, detail=("UTF-8",)),
    "csv-unclosed-quote": Case(post_csv(b'x,y\n1,2\n"3,4\n5,6\n'), 400, csv_at(ANY)),
    "csv-stray-quote": Case(post_csv(b'x,y\n1,2\n3,4"x"\n'), 422, csv_at(3, "y")),
    "csv-text-cell": Case(post_csv(b"x,y\n1,2\n2,abc\n3,4\n"), 422, csv_at(3, "y")),
    "csv-nan-cell": Case(post_csv(b"x,y\n1,2\nnan,3\n3,4\n"), 422, csv_at(3, "x")),
    "csv-ragged": Case(post_csv(b"x,y\n1,2\n3\n4,5\n"), 422, csv_at(3)),
    "csv-duplicate-column": Case(post_csv(b"x,x\n1,2\n"), 422, csv_at(1, "x")),
    "csv-query-part-text": Case(
        post_parts(b"x,y\n" + b"".join(b"%d,%d\n" % (i, i % 3) for i in range(12)), b"x\n1\nabc\n"),
        422,
        csv_at(3, "x", "query"),
    ),
    # row weights (weight_by): each bad weight is named at its cell
    "weight-negative": Case(weighted([1.0] * 11 + [-1.0]), 422, at("/train/rows/11/2")),
    "weight-nan-literal": Case(
        raw_train(f"{W_ROWS},[5,1,NaN]", ',"weight_by":"w"', XYW), 422, at("/train/rows/12/2")
    ),
    "weight-missing": Case(weighted([1.0] * 5 + [None] + [1.0] * 6), 422, at("/train/rows/5/2")),
    "weight-infinite": Case(
        raw_train(f"{W_ROWS},[5,1,Infinity]", ',"weight_by":"w"', XYW), 422, at("/train/rows/12/2")
    ),
    "weight-text": Case(weighted([1.0] * 3 + ["heavy"] + [1.0] * 8), 422, at("/train/rows/3/2")),
    "weight-all-zero": Case(weighted([0.0] * 12), 422, at("/weight_by")),
    "weight-unknown-column": Case(post_json(body(weight_by="n_readings")), 422, at("/weight_by")),
    "weight-is-the-target": Case(post_json(body(weight_by="y")), 422, at("/weight_by")),
    "weight-listed-as-feature": Case(
        post_json({**weighted_body([1.0] * 12), "features": ["x", "w"]}), 422, at("/features/1")
    ),
    "weight-zero-in-query": Case(
        post_json(
            {
                **weighted_body([1.0] * 12),
                "query": {"columns": ["x", "w"], "rows": [[1.0, 2.0], [2.0, 0.0]]},
            }
        ),
        422,
        at("/query/rows/1/1"),
    ),
    "weight-csv-negative": Case(
        post_csv(
            b"x,y,w\n" + b"".join(b"%d,%d,1\n" % (i, i % 3) for i in range(11)) + b"11,2,-3\n",
            CSV_HEAD + "&weight_by=w",
        ),
        422,
        csv_at(13, "w"),
    ),
    "weight-cell-text": Case(
        lambda c: c.get("/v1/cell?x=1,2,3,4,5,6&y=1,2,3,4,5,7&w=1,1,a,1,1,1&at=2"),
        422,
        {"parameter": "w"},
    ),
    # categorical features (issue 13): undeclared text names both ways out; declarations are
    # checked; a missing level is named at its cell (an unseen level is answered 200 with the
    # flag unseen_level: tests/web/test_categorical_route.py)
    "categorical-undeclared-text": Case(
        sited(categorical=None), 422, at("/train/rows/0/1"), ("`categorical`", "`features`")
    ),
    "categorical-unknown-column": Case(sited(categorical=["sites"]), 422, at("/categorical/0")),
    "categorical-is-the-target": Case(sited(categorical=["site", "y"]), 422, at("/categorical/1")),
    "categorical-not-a-feature": Case(sited(features=["x"]), 422, at("/categorical/0")),
    "categorical-missing-level": Case(
        sited(train=table(["x", "site", "y"], [*SITE_ROWS[:4], [9.0, None, 1.0]])),
        422,
        at("/train/rows/4/1"),
    ),
    "categorical-csv-missing-level": Case(
        post_csv(
            b"x,site,y\n"
            + b"".join(b"%d,s%d,%d\n" % (i, i % 3, i % 4) for i in range(11))
            + b"11,,2\n",
            CSV_HEAD + "&categorical=site",
        ),
        422,
        csv_at(13, "site"),
    ),
    "categorical-too-many-levels": Case(
        sited(train=table(["x", "site", "y"], many_levels(201, 402))), 422, at("/categorical/0")
    ),
    "categorical-over-cells": Case(
        on_small(sited(train=table(["x", "site", "y"], many_levels(10, 100))), **SMALL),
        422,
        at("/categorical"),
        ("NEARWISE_MAX_CELLS",),
    ),
    "categorical-query-missing-column": Case(
        sited(query=table(["x"], [[1.0]])), 422, at("/query/columns")
    ),
    "categorical-reference-not-a-level": Case(
        sited(categorical_reference={"site": "west"}), 422, at("/categorical_reference/site")
    ),
    "categorical-reference-undeclared": Case(
        sited(categorical_reference={"x": 1}), 422, at("/categorical_reference/x")
    ),
    "categorical-with-spline": Case(sited(method="spline"), 422, at("/categorical")),
    "categorical-with-adaptive": Case(
        sited(interval={"adaptive": True}), 422, at("/interval/adaptive")
    ),
    "mismatch-without-categorical": Case(
        post_json(body(params={"mismatch": 2.0})), 422, at("/params/mismatch")
    ),
    "categorical-at-locality": Case(
        post_json(
            {"categorical": ["site"], "train": table(["x", "site"], [[1, "a"]])}, "/v1/locality"
        ),
        422,
        at("/categorical"),
    ),
    # missing-value tokens (issue 13): a token in a feature is a missing feature; `na` is for
    # CSV tables only; with `na` given, the default tokens are text again
    "csv-na-token-in-feature": Case(post_csv(b"x,y\n1,2\nNA,3\n3,4\n"), 422, csv_at(3, "x")),
    "na-in-json-body": Case(post_json(body(na=["NA"])), 422, at("/na")),
    "na-token-too-long": Case(
        post_csv(b"x,y\n1,2\n", CSV_HEAD + "&na=" + "n" * 300), 422, at("/na/0")
    ),
    "csv-default-token-outside-na": Case(
        post_csv(b"x,y\n1,2\n2,NA\n3,4\n", CSV_HEAD + "&na=-999"), 422, csv_at(3, "y")
    ),
    # a saved index (issue 13): an unnamed column used by default as a feature
    "csv-unnamed-index-column": Case(
        post_csv(b",x,y\n" + b"".join(b"%d,%d,%d\n" % (i, i, i % 3) for i in range(12))),
        422,
        csv_at(1, ""),
        ("index=False",),
    ),
    "json-unnamed-column": Case(
        post_json(body(train=table(["", "x", "y"], [[i, *r] for i, r in enumerate(curve(12))]))),
        422,
        at("/train/columns/0"),
        ("index=False",),
    ),
}


def entry_matches(entry: dict[str, Any], want: dict[str, Any]) -> bool:
    return all(key in entry and value in (ANY, entry[key]) for key, value in want.items())


@pytest.mark.parametrize("name", CASES, ids=list(CASES))
def test_bad_input_names_its_place(client: FlaskClient, name: str) -> None:
    case = CASES[name]
    resp = case.send(client)
    assert resp.status_code != 500, resp.get_data(as_text=True)
    doc = problem(resp, case.status)
    assert doc["detail"] and doc["title"] and doc["type"]
    # One title per problem type, and a page at its URI (tests/web/test_problem_pages.py).
    assert doc["type"] == f"/problems/{doc['code']}" and doc["code"] in TYPES, doc
    assert doc["title"] == TYPES[doc["code"]].title, doc
    if case.entry:
        assert any(entry_matches(e, case.entry) for e in doc["errors"]), doc
    for phrase in case.detail:
        assert phrase in doc["detail"], doc
    assert all("message" in e for e in doc["errors"])


def test_the_catalogue_is_large_enough() -> None:
    assert len(CASES) >= 40


# No value is silently altered: each non-finite cell is refused, and the same body with a plain
# number in that cell fits, so the refusal is caused by the cell alone.
NON_FINITE = ["NaN", "Infinity", "-Infinity", "1e400", '"NaN"', '"nan"', "true"]


@pytest.mark.parametrize("literal", NON_FINITE)
def test_a_non_finite_cell_is_refused_never_fitted(client: FlaskClient, literal: str) -> None:
    bad = raw_train(f"{ROWS},[{literal},1]")(client)
    doc = problem(bad, 422)
    assert "/train/rows/12/0" in [e.get("pointer") for e in doc["errors"]]
    assert "predictions" not in bad.get_data(as_text=True)
    good = raw_train(f"{ROWS},[0,1]")(client)
    assert good.status_code == 200, good.get_data(as_text=True)
    assert good.get_json()["fit"]["rows_dropped"] == 0


@pytest.mark.parametrize("cell", [b"nan", b"NaN", b"inf", b"-Infinity", b"1e999"])
def test_a_non_finite_csv_cell_is_refused_never_fitted(client: FlaskClient, cell: bytes) -> None:
    head = b"x,y\n" + b"".join(b"%d,%d\n" % (i, i % 3) for i in range(12))
    doc = problem(post_csv(head + cell + b",1\n")(client), 422)
    assert any(entry_matches(e, csv_at(14, "x")) for e in doc["errors"]), doc
    assert post_csv(head + b"0,1\n")(client).status_code == 200
