"""Input edges (issue 12): limits met while parsing, before a table is held, and one way of
counting /v1/cell's items. The refusals that fit its shape are in the bad-input catalogue; here
are the checks of memory, exact thresholds and outside references (Python's json and csv).
Content codings, echoes, Location and numbers: test_answer_edges.py."""

from __future__ import annotations

import csv
import io
import json
import random
import tracemalloc
from collections.abc import Callable
from typing import Any

import pytest
from webhelpers import body, pointers, problem

from nearwise.core.errors import NearwiseError
from nearwise.web import forms, prescan
from nearwise.web.app import create_app
from nearwise.web.csvio import read_csv
from nearwise.web.intake import json_bounds
from nearwise.web.jsonio import loads_strict
from nearwise.web.problems import Problem
from nearwise.web.schemas import PredictFields
from nearwise.web.settings import Settings
from nearwise.web.tables import Limits

CSV_URL = "/v1/predict?method=knn&target=y"
JSON = {"Content-Type": "application/json"}


def client(**limits: Any):
    return create_app(Settings(**limits)).test_client()


def csv_rows(n: int, p: int = 2) -> bytes:
    head = ",".join(["y", *(f"x{j}" for j in range(1, p))]).encode() + b"\n"
    return head + b"".join(
        ",".join(str((i * 7 + j) % 13) for j in range(p)).encode() + b"\n" for i in range(n)
    )


def json_table(n: int, p: int = 2) -> dict[str, Any]:
    columns = ["y", *(f"x{j}" for j in range(1, p))]
    return {"columns": columns, "rows": [[(i * 7 + j) % 13 for j in range(p)] for i in range(n)]}


# -- exact thresholds: a table at each limit is read, one row (or column) more is refused


LIMITS = {
    "rows": ({"max_rows": 30}, 30, 2, "NEARWISE_MAX_ROWS"),
    "cells": ({"max_cells": 90}, 30, 3, "NEARWISE_MAX_CELLS"),
    "columns": ({"max_columns": 3}, 20, 3, "NEARWISE_MAX_COLUMNS"),
}


@pytest.mark.parametrize("kind", LIMITS)
@pytest.mark.parametrize("form", ["json", "csv"])
def test_a_table_at_the_limit_is_read_and_one_more_is_refused(kind: str, form: str) -> None:
    limits, n, p, var = LIMITS[kind]
    c = client(**limits)
    more_rows, more_cols = (n + 1, p) if kind != "columns" else (n, p + 1)

    def send(rows: int, cols: int):
        if form == "json":
            return c.post("/v1/predict", json=body(train=json_table(rows, cols)))
        return c.post(CSV_URL, data=csv_rows(rows, cols), content_type="text/csv")

    at_limit = send(n, p)
    assert at_limit.status_code == 200, at_limit.get_data(as_text=True)
    doc = problem(send(more_rows, more_cols), 413)
    assert doc["code"] == "table_too_large" and var in doc["detail"]


def test_query_rows_at_their_limit_are_read_and_one_more_is_refused() -> None:
    c = client(max_query_rows=4)
    for n, status in ((4, 200), (5, 413)):
        parts = {
            "train": (io.BytesIO(csv_rows(30)), "train.csv"),
            "query": (io.BytesIO(b"x1\n" + b"1\n" * n), "query.csv"),
        }
        resp = c.post(CSV_URL, data=parts)
        assert resp.status_code == status, resp.get_data(as_text=True)
    assert "NEARWISE_MAX_QUERY_ROWS" in resp.get_json()["detail"]


# -- refusing an over-limit body costs a small fraction of the memory of parsing it


def peak_bytes(work: Callable[[], Any]) -> int:
    """Peak traced memory (bytes) while ``work`` runs; a refusal is an expected outcome."""
    tracemalloc.start()
    try:
        work()
    except (Problem, NearwiseError):
        pass
    finally:
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
    return peak


TIGHT = Limits(max_rows=1000, max_columns=10, max_cells=5000, max_query_rows=1000)
ROWS_ONLY = Limits(max_rows=1000, max_columns=10, max_cells=10**9, max_query_rows=1000)
LOOSE = Limits(max_rows=10**8, max_columns=10**8, max_cells=10**9, max_query_rows=10**8)
MANY_ROWS = b"a,b\n" + b"".join(b"%d,%d\n" % (i, i) for i in range(100_000))
CSV_BOMBS = {
    "rows": (MANY_ROWS, TIGHT),  # refused by the count of cells, before reading
    "rows-under-a-loose-cell-limit": (MANY_ROWS, ROWS_ONLY),  # reading stops at the limit
    "one-wide-row": (b"a,b\n" + b",".join(b"%d" % i for i in range(200_000)) + b"\n", TIGHT),
    "blank-lines-inside": (b"a,b\n1,2\n" + b"\n" * 300_000 + b"3,4\n", ROWS_ONLY),
    "quoted-cells": (
        b'"a","b"\n' + b"".join(b'"%d","%d"\n' % (i, i) for i in range(100_000)),
        TIGHT,
    ),
}


@pytest.mark.parametrize("shape", CSV_BOMBS)
def test_an_over_limit_csv_is_refused_before_it_is_held(shape: str) -> None:
    data, limits = CSV_BOMBS[shape]
    with pytest.raises(Problem) as refused:
        read_csv("train", data, limits, {})
    assert refused.value.status == 413
    refusing = peak_bytes(lambda: read_csv("train", data, limits, {}))
    parsing = peak_bytes(lambda: read_csv("train", data, LOOSE, {}))
    assert refusing < parsing / 8, (refusing, parsing)


SMALL = Settings(max_rows=1000, max_query_rows=1000, max_cells=5000, max_columns=10)
JSON_BOMBS = {
    "arrays-of-one": b"[" + b",".join([b"[1]"] * 300_000) + b"]",
    "numbers": b"[" + b",".join([b"1.5"] * 1_000_000) + b"]",
    "empty-objects": b"[" + b",".join([b"{}"] * 300_000) + b"]",
    "short-strings": b"[" + b",".join([b'"ab"'] * 300_000) + b"]",
}


@pytest.mark.parametrize("shape", JSON_BOMBS)
def test_an_over_limit_json_body_is_refused_before_it_is_parsed(shape: str) -> None:
    data = JSON_BOMBS[shape]
    resp = create_app(SMALL).test_client().post("/v1/predict", data=data, headers=JSON)
    refused = problem(resp, 413)
    assert refused["code"] == "table_too_large" and "NEARWISE_MAX_CELLS" in refused["detail"]
    bounds = json_bounds(SMALL)
    refusing = peak_bytes(lambda: prescan.json_over(data, *bounds))
    parsing = peak_bytes(lambda: loads_strict(data))
    assert refusing < parsing / 8, (refusing, parsing)


def test_a_json_request_at_the_limits_is_never_refused_by_the_count() -> None:
    """Text cells full of commas and brackets (a group label) count for nothing: a request at
    the row and cell limits passes the count although its raw separators are over it."""
    settings = Settings(max_rows=200, max_query_rows=50, max_cells=600, max_columns=3)
    rows = [[float(i % 7), float(i % 5), ",[{" * 30 + str(i % 4)] for i in range(200)]
    query = {"columns": ["x"], "rows": [[float(i % 7)] for i in range(50)]}
    doc = body(
        train={"columns": ["x", "y", "g"], "rows": rows},
        query=query,
        features=["x"],
        tuning={"group_by": "g", "folds": 4},
    )
    data = json.dumps(doc).encode()
    values, containers = json_bounds(settings)
    assert prescan.json_values(data)[0] > values  # the raw count alone would refuse it
    assert prescan.json_over(data, values, containers) is None
    resp = create_app(settings).test_client().post("/v1/predict", data=data, headers=JSON)
    assert resp.status_code == 200, resp.get_data(as_text=True)


def test_the_counts_refuse_one_value_or_cell_over_their_bound() -> None:
    zeros = b"[" + b",".join([b"0"] * 99) + b"]"  # 100 values: the array and 99 numbers
    assert prescan.json_over(zeros, 100, 1) is None
    assert prescan.json_over(zeros, 99, 1) == (100, 1)
    assert prescan.json_over(zeros, 100, 0) == (100, 1)
    for text in ("a,b\n1,2\n3,4", '"a","b"\n"1","2"\n"3","4"'):  # 6 cells
        assert prescan.csv_cells(text.encode(), ",", 6) is None
        assert prescan.csv_cells(text.encode(), ",", 5) is not None


def test_the_json_count_bounds_what_the_parser_builds() -> None:
    """Reference: Python's json parser. On generated documents whose strings hold commas,
    brackets, quotes and backslashes, the count of arrays and objects is exact and the count
    of values is at least the number of values built."""
    rng = random.Random(12)
    alphabet = ',[]{}"\\:ab'

    def node(depth: int) -> Any:
        kind = rng.randrange(5 if depth < 4 else 3)
        if kind == 0:
            return "".join(rng.choice(alphabet) for _ in range(rng.randrange(6)))
        if kind == 1:
            return rng.choice([1, 2.5, None, True])
        if kind == 2:
            return "x"
        if kind == 3:
            return [node(depth + 1) for _ in range(rng.randrange(4))]
        return {f"k{i},[": node(depth + 1) for i in range(rng.randrange(4))}

    def walk(v: Any) -> tuple[int, int]:
        items = v.values() if isinstance(v, dict) else v if isinstance(v, list) else ()
        sub = [walk(x) for x in items]
        return 1 + sum(s[0] for s in sub), int(isinstance(v, dict | list)) + sum(s[1] for s in sub)

    for _ in range(300):
        doc = node(0)
        values, containers = walk(doc)
        found = prescan.json_values_outside_strings(json.dumps(doc).encode())
        assert found[1] == containers and found[0] >= values, (doc, found)


def test_the_csv_count_is_the_csv_readers_count() -> None:
    """Reference: Python's csv reader, on generated text with quoted cells holding separators,
    doubled quotes and line breaks, and quotes inside unquoted cells."""
    rng = random.Random(7)
    pieces = ["a", "1", '"x,y"', '"q""q"', '"two\nlines"', 'b"c', ""]
    for _ in range(300):
        lines = [",".join(rng.choice(pieces) for _ in range(rng.randrange(1, 5))) for _ in range(6)]
        text = "\n".join(lines)
        rows = list(csv.reader(io.StringIO(text), strict=True))
        cells = sum(map(len, rows)) + rows.count([])  # a blank line counts as one cell
        data = text.encode()
        assert prescan.csv_cells(data, ",", cells - 1) is not None, (text, cells)
        assert prescan.csv_cells(data, ",", cells) is None, (text, cells)


def test_blank_lines_at_the_end_cost_nothing_and_inside_count_as_rows() -> None:
    table = csv_rows(30)
    c = client(max_rows=30)
    resp = c.post(CSV_URL, data=table + b"\r\n" * 500_000, content_type="text/csv")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    inside = table[:-1] + b"\n" * 5 + b"\n1,2\n"
    doc = problem(c.post(CSV_URL, data=inside, content_type="text/csv"), 413)
    assert "NEARWISE_MAX_ROWS" in doc["detail"]
    doc = problem(client().post(CSV_URL, data=inside, content_type="text/csv"), 422)
    assert doc["errors"][0]["line"] == 32  # the first blank line: a row of no cells


def test_a_form_field_is_never_parsed_as_a_large_array() -> None:
    bomb = "[" + ",".join(["[]"] * 1_000_000) + "]"
    with pytest.raises(NearwiseError):
        forms.collect([("features", [bomb])], PredictFields(), 200)
    refusing = peak_bytes(lambda: forms.collect([("features", [bomb])], PredictFields(), 200))
    assert refusing < peak_bytes(lambda: json.loads(bomb)) / 8
    # over HTTP, a smaller one (the test client spools a body over 500 KB to a file it leaves open)
    bomb = "[" + ",".join(["[]"] * 30_000) + "]"
    train = (io.BytesIO(csv_rows(30)), "t.csv")
    c = client()
    doc = problem(c.post(CSV_URL, data={"train": train, "features": bomb}), 422)
    assert doc["code"] == "over_limit" and pointers(doc) == ["/features"]
    train = (io.BytesIO(csv_rows(30)), "t.csv")
    doc = problem(c.post(CSV_URL, data={"train": train, "tuning.folds": bomb}), 422)
    assert pointers(doc) == ["/tuning/folds"]
    for items, code in ((200, "invalid_value"), (201, "over_limit")):  # the grid limit: 200
        train = (io.BytesIO(csv_rows(30)), "t.csv")
        grid = ",".join(map(str, range(1, items + 1)))
        doc = problem(c.post(CSV_URL, data={"train": train, "grid.k": grid}), 422)
        assert doc["code"] == code and pointers(doc)[0].startswith("/grid/k"), doc


# -- /v1/cell counts the items of a list once, against the tables' limits

SIX = "1,2,3,4,5,6"


def test_cell_counts_items_once_before_reading_them() -> None:
    c = client(max_rows=6, max_query_rows=3, max_cells=12)
    ok = c.get(f"/v1/cell?x={SIX}&y={SIX}&at=1,2,3&method=linear")
    assert ok.status_code == 200, ok.get_data(as_text=True)
    for query, name, var in (
        (f"x={SIX},abc&y={SIX},1&at=1", "x", "NEARWISE_MAX_ROWS"),  # counted, not read
        (f"x={SIX},&y={SIX},&at=1", "x", "NEARWISE_MAX_ROWS"),  # an empty item is an item
        (f"x={SIX.replace(',', ';')};7&y={SIX}&at=1", "x", "NEARWISE_MAX_ROWS"),
        (f"x={SIX}&y={SIX}&at=1,2,3,4", "at", "NEARWISE_MAX_QUERY_ROWS"),
    ):
        doc = problem(c.get("/v1/cell?" + query), 413)
        assert doc["errors"] == [{"parameter": name, "message": "too long"}], doc
        assert var in doc["detail"], doc


def test_cell_lists_with_t_are_a_table_of_three_columns() -> None:
    c = client(max_rows=10, max_cells=24)  # 8 rows of x, y and t
    eight = "1,2,3,4,5,6,7,8"
    ok = c.get(f"/v1/cell?x={eight}&y={eight}&t={eight}&at=1&method=linear")
    assert ok.status_code == 200, ok.get_data(as_text=True)
    doc = problem(c.get(f"/v1/cell?x={eight},9&y={eight},9&t={eight},9&at=1"), 413)
    assert "NEARWISE_MAX_CELLS" in doc["detail"], doc
    assert c.get(f"/v1/cell?x={eight},9&y={eight},9&at=1&method=linear").status_code == 200
