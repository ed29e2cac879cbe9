"""CSV everywhere: compare and locality read and answer CSV; spreadsheet dialects; text/plain."""

from __future__ import annotations

import csv
import io

import pytest
from webhelpers import curve, problem

QUERY = [[1.5], [4.0], [12.0]]


def plain_csv(rows: list[list[object]], header: str = "x,y") -> bytes:
    lines = [header] + [",".join("" if c is None else repr(c) for c in r) for r in rows]
    return ("\n".join(lines) + "\n").encode()


def semicolon_csv(rows: list[list[object]], header: str = "x;y") -> bytes:
    """The same table as a spreadsheet in a decimal-comma locale saves it."""
    cells = [[("" if c is None else repr(c).replace(".", ",")) for c in r] for r in rows]
    return ("\r\n".join([header, *(";".join(r) for r in cells)]) + "\r\n").encode()


def parts(url: str, train: bytes, query: bytes | None = None, **fields: str):
    data: dict[str, object] = {"train": (io.BytesIO(train), "train.csv", "text/csv")}
    if query is not None:
        data["query"] = (io.BytesIO(query), "query.csv", "text/csv")
    data.update(fields)
    return {"data": data, "content_type": "multipart/form-data", "path": url}


def send(client, spec: dict, **headers: str):
    return client.post(
        spec["path"], data=spec["data"], content_type=spec["content_type"], headers=headers
    )


def table(rows, columns=("x", "y")) -> dict:
    return {"columns": list(columns), "rows": rows}


def read(text: str, delimiter: str = ",") -> list[list[str]]:
    return list(csv.reader(io.StringIO(text), delimiter=delimiter))


def ok(resp):
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp


# The same request three ways: JSON, plain CSV parts, semicolon CSV with decimal commas.
ENDPOINTS = {
    "predict": ("/v1/predict", {"method": "spline", "target": "y"}),
    "compare": ("/v1/compare", {"target": "y", "methods": ["knn", "linear", "spline"]}),
    "locality": ("/v1/locality", {"k": 5, "features": ["x"]}),
}


def _json(client, name: str, **headers: str):
    url, fields = ENDPOINTS[name]
    doc = {**fields, "train": table(curve()), "query": table(QUERY, ["x"])}
    return ok(client.post(url, json=doc, headers=headers))


def _form(name: str) -> dict[str, str]:
    _, fields = ENDPOINTS[name]
    return {k: ",".join(v) if isinstance(v, list) else str(v) for k, v in fields.items()}


@pytest.mark.parametrize("name", list(ENDPOINTS))
def test_csv_in_and_json_in_give_identical_numbers(client, name: str) -> None:
    url, _ = ENDPOINTS[name]
    as_json = _json(client, name).get_json()
    as_csv = send(client, parts(url, plain_csv(curve()), plain_csv(QUERY, "x"), **_form(name)))
    assert ok(as_csv).get_json() == as_json


@pytest.mark.parametrize("name", list(ENDPOINTS))
def test_declared_semicolons_and_decimal_commas_read_as_the_plain_file(client, name: str) -> None:
    url, _ = ENDPOINTS[name]
    plain = send(client, parts(url, plain_csv(curve()), plain_csv(QUERY, "x"), **_form(name)))
    local = parts(
        url + "?delimiter=;&decimal=comma",
        semicolon_csv(curve()),
        semicolon_csv(QUERY, "x"),
        **_form(name),
    )
    assert ok(send(client, local)).get_json() == ok(plain).get_json()
    # decimal=comma alone implies semicolons; as form fields too
    local = parts(
        url, semicolon_csv(curve()), semicolon_csv(QUERY, "x"), decimal="comma", **_form(name)
    )
    assert ok(send(client, local)).get_json() == plain.get_json()


def test_undeclared_semicolons_are_refused_naming_delimiter(client) -> None:
    resp = client.post(
        "/v1/predict?method=knn&target=y", data=semicolon_csv(curve()), content_type="text/csv"
    )
    doc = problem(resp, 400)
    assert doc["code"] == "csv_format_undeclared"
    assert "delimiter=;" in doc["detail"] and "decimal=comma" in doc["detail"]
    assert doc["errors"][0] == {
        "part": "train",
        "line": 1,
        "message": "cells separated by semicolon; set delimiter",
    }


@pytest.mark.parametrize(
    "data",
    [
        b'x,y\n1,2\n"2,5",3\n3,4\n',  # quoted decimal comma in a comma file
        b'x,y\n1,2\n"1,500",3\n3,4\n',  # thousands separator or decimal mark? never guessed
    ],
    ids=["decimal-comma", "thousands"],
)
def test_comma_numbers_in_a_comma_file_are_refused_naming_decimal(client, data: bytes) -> None:
    resp = client.post("/v1/predict?method=knn&target=y", data=data, content_type="text/csv")
    doc = problem(resp, 400)
    assert doc["code"] == "csv_format_undeclared"
    assert "`decimal=comma`" in doc["detail"]
    assert doc["errors"][0]["part"] == "train"
    assert (doc["errors"][0]["line"], doc["errors"][0]["column"]) == (3, "x")


def test_semicolons_declared_but_decimal_commas_not_are_refused(client) -> None:
    resp = client.post(
        "/v1/predict?method=knn&target=y&delimiter=;",
        data=semicolon_csv(curve()),
        content_type="text/csv",
    )
    doc = problem(resp, 400)
    assert "`decimal=comma`" in doc["detail"] and doc["errors"][0]["line"] == 2


def test_a_point_under_decimal_comma_is_refused(client) -> None:
    data = b"x;y\r\n1;2\r\n1.500;3\r\n3;4\r\n"
    resp = client.post(
        "/v1/predict?method=knn&target=y&decimal=comma", data=data, content_type="text/csv"
    )
    doc = problem(resp, 400)
    assert "thousands" in doc["detail"] and doc["errors"][0]["line"] == 3


def test_one_comma_in_a_single_column_query_hints_at_decimal(client) -> None:
    resp = send(
        client, parts("/v1/predict", plain_csv(curve()), b"x\n1,5\n", method="knn", target="y")
    )
    doc = problem(resp, 422)
    assert "`decimal=comma`" in doc["detail"]
    assert (doc["errors"][0]["part"], doc["errors"][0]["line"]) == ("query", 2)


def test_bad_dialect_values_name_the_parameter(client) -> None:
    resp = client.post(
        "/v1/predict?method=knn&target=y&delimiter=colon",
        data=plain_csv(curve()),
        content_type="text/csv",
    )
    assert problem(resp, 422)["errors"] == [
        {"parameter": "delimiter", "message": "one of , ; tab |"}
    ]


def test_bom_crlf_quoted_numbers_and_blank_cells(client) -> None:
    rows = curve()
    lines = ['"x","y"'] + [f'"{a!r}",{b!r}' for a, b in rows]
    lines[5] = lines[5].split(",")[0] + ",  "  # a cell of spaces is missing, as null
    data = b"\xef\xbb\xbf" + ("\r\n".join(lines) + "\r\n").encode()
    as_csv = client.post("/v1/predict?method=knn&target=y", data=data, content_type="text/csv")
    json_rows = [list(r) for r in rows]
    json_rows[4][1] = None
    as_json = client.post(
        "/v1/predict", json={"method": "knn", "target": "y", "train": table(json_rows)}
    )
    assert ok(as_csv).get_json() == ok(as_json).get_json()


@pytest.mark.parametrize(
    ("data", "says"),
    [
        ("caf\u00e9,y\n1,2\n".encode("cp1252"), "line 1"),
        ("x,y\n1,2\n".encode("utf-16"), "UTF-16"),
    ],
    ids=["windows-1252", "utf-16"],
)
def test_not_utf8_says_how_to_save_as_utf8(client, data: bytes, says: str) -> None:
    resp = client.post("/v1/predict?method=knn&target=y", data=data, content_type="text/csv")
    doc = problem(resp, 400)
    assert doc["code"] == "not_utf8"
    assert "CSV UTF-8" in doc["detail"] and says in doc["detail"]
    assert doc["errors"][0]["part"] == "train"


def test_csv_answers_use_the_declared_dialect(client) -> None:
    fields = {"method": "spline", "target": "y"}
    plain = send(
        client,
        parts("/v1/predict", plain_csv(curve()), plain_csv(QUERY, "x"), **fields),
        Accept="text/csv",
    )
    local = send(
        client,
        parts(
            "/v1/predict?delimiter=;&decimal=comma",
            semicolon_csv(curve()),
            semicolon_csv(QUERY, "x"),
            **fields,
        ),
        Accept="text/csv",
    )
    a = read(ok(plain).get_data(as_text=True))
    b = read(ok(local).get_data(as_text=True), ";")
    assert a[0] == b[0]
    for ra, rb in zip(a[1:], b[1:], strict=True):
        assert [c.replace(".", ",") for c in ra[1:-1]] == rb[1:-1] and ra[-1] == rb[-1]


def test_compare_answers_a_ranking_table(client) -> None:
    doc = _json(client, "compare").get_json()
    resp = _json(client, "compare", Accept="text/csv")
    assert resp.content_type == "text/csv; charset=utf-8; header=present"
    rows = read(resp.get_data(as_text=True))
    assert rows[0] == [
        "rank",
        "method",
        "params",
        "error",
        "error_se",
        "df",
        "cv_r2",
        "recommended",
    ]
    assert len(rows) == len(doc["ranking"]) + 1
    for i, (row, want) in enumerate(zip(rows[1:], doc["ranking"], strict=True), start=1):
        assert row[0] == str(i) and row[1] == want["method"]
        import json

        assert json.loads(row[2]) == want["params"]
        for col, key in zip(row[3:7], ("error", "error_se", "df", "cv_r2"), strict=True):
            assert (float(col) if col else None) == want[key]
        assert row[7] == ("true" if want["method"] == doc["recommended"] else "false")
    assert resp.headers["Nearwise-Recommended"] == doc["recommended"]
    codes = [w["code"] for w in doc["warnings"] if not w["rows"]]
    assert resp.headers.get("Nearwise-Warnings", "") == ", ".join(codes)


def test_locality_answers_one_row_per_query_row(client) -> None:
    doc = _json(client, "locality").get_json()
    resp = _json(client, "locality", Accept="text/csv")
    rows = read(resp.get_data(as_text=True))
    assert rows[0] == ["x", "nearest", "ratio", "flags"]
    for row, q, want in zip(rows[1:], QUERY, doc["query"], strict=True):
        assert float(row[0]) == q[0]
        assert (float(row[1]), float(row[2])) == (want["nearest"], want["ratio"])
        assert row[3] == " ".join(want["flags"])
    assert "outside_range" in rows[3][3]
    assert float(resp.headers["Nearwise-Typical-Spacing"]) == doc["typical_spacing"]
    assert resp.headers["Nearwise-Rows"] == str(doc["n"])
    codes = [w["code"] for w in doc["warnings"] if not w["rows"]]
    assert resp.headers.get("Nearwise-Warnings", "") == ", ".join(codes)


def test_locality_csv_answer_needs_a_query(client) -> None:
    resp = client.post(
        "/v1/locality", json={"train": table(curve())}, headers={"Accept": "text/csv"}
    )
    assert problem(resp, 422)["errors"][0]["pointer"] == "/query"


def test_text_plain_bodies_holding_json_or_csv(client) -> None:
    doc = {"method": "knn", "target": "y", "train": table(curve())}
    want = ok(client.post("/v1/predict", json=doc)).get_json()
    import json

    as_text = client.post(
        "/v1/predict", data=b"  \n" + json.dumps(doc).encode(), content_type="text/plain"
    )
    assert ok(as_text).get_json() == want
    as_csv = client.post(
        "/v1/predict?method=knn&target=y",
        data=plain_csv(curve()),
        content_type="text/plain;charset=UTF-8",
    )
    assert ok(as_csv).get_json() == want


def test_json_bodies_take_dialect_parameters_for_the_csv_answer(client) -> None:
    doc = {"method": "knn", "target": "y", "train": table(curve()), "query": table(QUERY, ["x"])}
    resp = client.post("/v1/predict?decimal=comma", json=doc, headers={"Accept": "text/csv"})
    rows = read(ok(resp).get_data(as_text=True), ";")
    assert rows[0][:2] == ["x", "prediction"] and rows[1][0] == "1,5"
    resp = client.post("/v1/predict?method=knn", json=doc)
    assert problem(resp, 422)["errors"] == [
        {"parameter": "method", "message": "not read with a JSON body"}
    ]


def test_an_unclosed_quote_is_reported_where_it_opens(client) -> None:
    text = 'x,y\n1,2\n"3,4\n5,6\n'
    resp = client.post("/v1/predict?method=knn&target=y", data=text, content_type="text/csv")
    assert resp.status_code == 400
    assert resp.get_json()["errors"][0] == {
        "part": "train",
        "line": 3,
        "message": "unexpected end of data",
    }
