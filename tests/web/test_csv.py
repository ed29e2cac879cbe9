"""CSV in (text/csv body, multipart parts) and out (Accept: text/csv)."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest
from webhelpers import curve, problem

SAMPLES = Path(__file__).resolve().parents[2] / "samples"


def table_csv(rows: list[list[object]], header: str = "x,y") -> bytes:
    lines = [header] + [",".join("" if c is None else str(c) for c in r) for r in rows]
    return ("\n".join(lines) + "\n").encode()


def post_csv(client, data: bytes, query: str, **headers: str):
    return client.post(f"/v1/predict?{query}", data=data, content_type="text/csv", headers=headers)


def post_parts(
    client, train: bytes, query: bytes | None = None, url: str = "/v1/predict", **fields: str
):
    data: dict[str, object] = {"train": (io.BytesIO(train), "train.csv", "text/csv")}
    if query is not None:
        data["query"] = (io.BytesIO(query), "query.csv", "text/csv")
    data.update(fields)
    return client.post(url, data=data, content_type="multipart/form-data")


def read(text: str) -> list[list[str]]:
    return list(csv.reader(io.StringIO(text)))


def test_text_csv_body_with_fields_in_the_query_string(client) -> None:
    resp = post_csv(client, table_csv(curve()), "method=knn&target=y&params.k=5")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    assert doc["params"]["k"] == 5 and len(doc["predictions"]) == 40


def test_multipart_parts_and_form_fields_match_the_json_answer(client) -> None:
    rows = curve()
    query = [[1.5], [4.0]]
    as_json = client.post(
        "/v1/predict",
        json={
            "method": "linear",
            "target": "y",
            "train": {"columns": ["x", "y"], "rows": rows},
            "query": {"columns": ["x"], "rows": query},
            "tuning": {"folds": 4},
            "grid": {"degree": [1, 2]},
        },
    )
    as_parts = post_parts(
        client,
        table_csv(rows),
        table_csv(query, "x"),
        method="linear",
        target="y",
        **{"tuning.folds": "4", "grid.degree": "1,2"},
    )
    assert as_parts.status_code == 200, as_parts.get_data(as_text=True)
    assert as_parts.get_json() == as_json.get_json()


def test_csv_answer_has_the_query_columns_then_the_predictions(client) -> None:
    resp = post_parts(
        client,
        table_csv(curve()),
        b"x,label\n1.50,a\n4,\n",
        method="knn",
        target="y",
        features="x",
        **{"params.k": "3"},
    )
    assert resp.status_code == 200, resp.get_data(as_text=True)
    resp = client.post(
        "/v1/predict?method=knn&target=y&features=x&params.k=3",
        data={
            "train": (io.BytesIO(table_csv(curve())), "t.csv"),
            "query": (io.BytesIO(b"x,label\n1.50,a\n4,\n"), "q.csv"),
        },
        headers={"Accept": "text/csv"},
    )
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert resp.content_type == "text/csv; charset=utf-8; header=present"
    rows = read(resp.get_data(as_text=True))
    assert rows[0] == ["x", "label", "prediction", "std_error", "lower", "upper", "flags"]
    assert [r[:2] for r in rows[1:]] == [["1.50", "a"], ["4", ""]]  # cells echoed as sent
    assert all(float(r[2]) == float(r[2]) for r in rows[1:])


def test_csv_answer_without_query_carries_residuals(client) -> None:
    resp = post_csv(client, table_csv(curve()), "method=knn&target=y", Accept="text/csv")
    rows = read(resp.get_data(as_text=True))
    head = ["x", "y", "prediction", "residual", "cv_residual", "std_error", "lower", "upper"]
    assert rows[0] == [*head, "flags"]
    assert len(rows) == 41
    for r in rows[1:]:  # every row carries finite error figures with lower <= value <= upper
        assert float(r[6]) <= float(r[2]) <= float(r[7]) and float(r[5]) > 0


def test_dataset_warnings_go_in_a_header(client) -> None:
    resp = post_csv(client, table_csv(curve()), "method=knn&target=y&grid.k=1,2", Accept="text/csv")
    assert resp.status_code == 200
    json_resp = post_csv(client, table_csv(curve()), "method=knn&target=y&grid.k=1,2")
    codes = [w["code"] for w in json_resp.get_json()["warnings"] if not w["rows"]]
    assert resp.headers.get("Nearwise-Warnings", "") == ", ".join(codes)
    assert "tuning_at_edge" in codes


@pytest.mark.parametrize("method", ["knn", "linear", "spline", "auto"])
def test_a_csv_answer_names_its_method_in_a_header(client, method: str) -> None:
    query = f"method={method}&target=y"
    resp = post_csv(client, table_csv(curve()), query, Accept="text/csv")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    json_doc = post_csv(client, table_csv(curve()), query).get_json()
    assert resp.headers["Nearwise-Method"] == json_doc["method"]  # the same fit, as JSON says
    if method == "auto":  # the chosen one, also named by the method_chosen warning
        assert json_doc["method"] in ("knn", "linear", "spline", "additive")
        assert "method_chosen" in resp.headers["Nearwise-Warnings"]
        chosen = next(w for w in json_doc["warnings"] if w["code"] == "method_chosen")
        assert f"chose {json_doc['method']}" in chosen["message"]
    else:
        assert resp.headers["Nearwise-Method"] == method


def test_samples_run_as_the_curl_script_sends_them(client) -> None:
    resp = client.post(
        "/v1/predict?method=knn&target=power_kw&features=wind_ms,air_density&tuning.folds=5",
        data={
            "train": (open(SAMPLES / "turbine_train.csv", "rb"), "turbine_train.csv"),
            "query": (open(SAMPLES / "turbine_query.csv", "rb"), "turbine_query.csv"),
        },
        headers={"Accept": "text/csv"},
    )
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert read(resp.get_data(as_text=True))[0][:3] == ["wind_ms", "air_density", "prediction"]


@pytest.mark.parametrize(
    ("data", "line", "column"),
    [
        (b"x,y\n1,2\n2,abc\n3,4\n", 3, "y"),
        (b"x,y\n1,2\nnan,2\n", 3, "x"),  # nan is a missing-value token: a missing feature
        (b"x,y\n1,2\n2,1e400\n", 3, "y"),
        (b'x,y\n1,2\n"2\n",4\n5,1_000\n', 5, "y"),
        (b"x,y\n1,2\n3\n", 3, None),
        (b"x,x\n1,2\n", 1, "x"),
    ],
    ids=["text", "nan", "overflow", "underscore-after-quoted-newline", "ragged", "dup-column"],
)
def test_csv_errors_name_part_line_and_column(
    client, data: bytes, line: int, column: str | None
) -> None:
    doc = problem(post_csv(client, data, "method=knn&target=y"), 422)
    entry = doc["errors"][0]
    assert entry["part"] == "train" and entry["line"] == line
    assert entry.get("column") == column


def test_query_part_errors_name_the_query_part(client) -> None:
    resp = post_parts(client, table_csv(curve()), b"x\n1\n\xd9\xa1\n", method="knn", target="y")
    entry = problem(resp, 422)["errors"][0]
    assert (entry["part"], entry["line"], entry["column"]) == ("query", 3, "x")


@pytest.mark.parametrize(
    "data",
    [b"", b'x,y\n"1,2\n', b"\xff\xfe,y\n1,2\n"],
    ids=["empty", "unclosed-quote", "not-utf8"],
)
def test_unreadable_csv_is_400(client, data: bytes) -> None:
    problem(post_csv(client, data, "method=knn&target=y"), 400)


@pytest.mark.parametrize(
    ("url", "fields", "pointer"),
    [
        ("/v1/predict?method=knn&target=y", {"method": "knn"}, "/method"),
        ("/v1/predict?method=knn&target=y&query=x", {}, "/query"),
        ("/v1/predict?method=knn&target=y&tuning.folds=three", {}, "/tuning/folds"),
        ("/v1/predict?method=knn&target=y&tuning.fold=3", {}, "/tuning/fold"),
        ("/v1/predict?method=knn&target=y&bogus=1", {}, "/bogus"),
        ("/v1/predict?target=y", {}, "/method"),
    ],
)
def test_field_errors_in_forms_point_at_the_field(
    client, url: str, fields: dict, pointer: str
) -> None:
    doc = problem(post_parts(client, table_csv(curve()), url=url, **fields), 422)
    assert doc["errors"][0]["pointer"] == pointer


def test_an_extra_file_part_is_refused(client) -> None:
    resp = client.post(
        "/v1/predict?method=knn&target=y",
        data={
            "train": (io.BytesIO(table_csv(curve())), "t.csv"),
            "extra": (io.BytesIO(b"a\n1\n"), "e.csv"),
        },
    )
    assert problem(resp, 422)["errors"][0]["pointer"] == "/extra"


def test_missing_train_part_is_422(client) -> None:
    resp = client.post(
        "/v1/predict?method=knn&target=y",
        data={"features": "x"},
        content_type="multipart/form-data",
    )
    assert "/train" in [e.get("pointer") for e in problem(resp, 422)["errors"]]


def test_urlencoded_forms_are_415(client) -> None:
    resp = client.post("/v1/predict?method=knn&target=y", data={"train": "x,y\n1,2\n"})
    assert problem(resp, 415)["detail"].endswith("got application/x-www-form-urlencoded.")


def test_csv_without_a_header_line_is_415(client) -> None:
    resp = client.post(
        "/v1/predict?method=knn&target=y", data=b"1,2\n", content_type="text/csv; header=absent"
    )
    problem(resp, 415)
