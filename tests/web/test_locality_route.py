"""POST /v1/locality: the answer's shape and schema, CSV input, and errors with pointers."""

from __future__ import annotations

import io

import numpy as np
import pytest
from test_contract import response_validator
from webhelpers import pointers, problem

RNG = np.random.default_rng(1)
TRAIN = np.round(RNG.uniform(0, 10, size=(60, 2)), 3).tolist()
QUERY = [[5.0, 5.0], [12.0, 5.0], [0.5, 9.5]]


def request(**more: object) -> dict[str, object]:
    doc: dict[str, object] = {
        "train": {"columns": ["a", "b"], "rows": TRAIN},
        "query": {"columns": ["a", "b"], "rows": QUERY},
    }
    doc.update(more)
    return doc


def csv_text(rows: list[list[float]], header: str = "a,b") -> bytes:
    return ("\n".join([header] + [",".join(map(str, r)) for r in rows]) + "\n").encode()


def test_answer_shape_schema_and_determinism(client) -> None:
    first = client.post("/v1/locality", json=request(k=6))
    assert first.status_code == 200, first.get_data(as_text=True)
    assert first.mimetype == "application/json"
    assert client.post("/v1/locality", json=request(k=6)).get_data() == first.get_data()
    doc = first.get_json()
    errors = sorted(response_validator("LocalityResponse").iter_errors(doc), key=str)
    assert not errors, errors[0]
    assert (doc["n"], doc["p"], doc["scale"], doc["features"]) == (60, 2, "standard", ["a", "b"])
    assert [r["name"] for r in doc["ranges"]] == ["a", "b"]
    assert [r["fraction"] for r in doc["neighborhoods"]] == [0.01, 0.05, 0.1]
    assert [r["requested"] for r in doc["neighborhoods"]] == [False, False, True]  # 6/60
    assert len(doc["query"]) == 3
    assert doc["query"][0]["flags"] == [] and "outside_range" in doc["query"][1]["flags"]
    codes = {w["code"]: w["rows"] for w in doc["warnings"]}
    assert codes["outside_range"] == [1]


def test_without_query_or_size(client) -> None:
    doc = client.post("/v1/locality", json={"train": request()["train"]}).get_json()
    assert doc["query"] == [] and doc["warnings"] == []
    assert len(doc["neighborhoods"]) == 3
    assert not sorted(response_validator("LocalityResponse").iter_errors(doc), key=str)


def test_features_and_scale(client) -> None:
    doc = client.post(
        "/v1/locality", json=request(features=["b"], scale="range", fraction=0.5)
    ).get_json()
    assert doc["features"] == ["b"] and doc["p"] == 1 and doc["scale"] == "range"
    assert doc["neighborhoods"][-1] == {
        **doc["neighborhoods"][-1],
        "fraction": 0.5,
        "k": 30,
        "edge_fraction": 0.5,
        "requested": True,
    }


def test_csv_parts_and_form_fields_match_the_json_answer(client) -> None:
    as_json = client.post("/v1/locality", json=request(fraction=0.25)).get_json()
    as_parts = client.post(
        "/v1/locality",
        data={
            "train": (io.BytesIO(csv_text(TRAIN)), "train.csv", "text/csv"),
            "query": (io.BytesIO(csv_text(QUERY)), "query.csv", "text/csv"),
            "fraction": "0.25",
        },
        content_type="multipart/form-data",
    )
    assert as_parts.status_code == 200, as_parts.get_data(as_text=True)
    assert as_parts.get_json() == as_json


def test_text_csv_body_with_fields_in_the_query_string(client) -> None:
    resp = client.post("/v1/locality?k=5&features=a", data=csv_text(TRAIN), content_type="text/csv")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    (asked,) = [r for r in doc["neighborhoods"] if r["requested"]]
    assert doc["features"] == ["a"] and asked["k"] == 5 and asked["fraction"] == 5 / 60


def test_k_and_fraction_are_exclusive(client) -> None:
    doc = problem(client.post("/v1/locality", json=request(k=5, fraction=0.1)), 422)
    assert pointers(doc) == ["/k", "/fraction"]


@pytest.mark.parametrize(
    ("more", "where"),
    [
        ({"k": 61}, ["/k"]),
        ({"k": 0}, ["/k"]),
        ({"fraction": 0}, ["/fraction"]),
        ({"scale": "log"}, ["/scale"]),
        ({"features": ["a", "z"]}, ["/features/1"]),
        ({"method": "knn"}, ["/method"]),
    ],
)
def test_bad_fields_point_at_themselves(client, more: dict, where: list[str]) -> None:
    doc = problem(client.post("/v1/locality", json=request(**more)), 422)
    assert pointers(doc) == where


def test_bad_cells_point_at_their_row_and_column(client) -> None:
    rows = [list(r) for r in TRAIN]
    rows[7][1] = None
    doc = problem(
        client.post("/v1/locality", json=request(train={"columns": ["a", "b"], "rows": rows})), 422
    )
    assert pointers(doc) == ["/train/rows/7/1"]
    doc = problem(
        client.post("/v1/locality", json=request(query={"columns": ["a"], "rows": [[1]]})), 422
    )
    assert pointers(doc) == ["/query/columns"]


def test_csv_errors_name_part_line_and_column(client) -> None:
    rows = [list(r) for r in TRAIN]
    rows[2][0] = "oops"
    resp = client.post(
        "/v1/locality",
        data={"train": (io.BytesIO(csv_text(rows)), "train.csv", "text/csv")},
        content_type="multipart/form-data",
    )
    doc = problem(resp, 422)
    assert doc["errors"][0]["part"] == "train" and doc["errors"][0]["line"] == 4
    assert doc["errors"][0]["column"] == "a"


def test_too_few_rows_and_wrong_media_types(client) -> None:
    one = {"train": {"columns": ["a"], "rows": [[1.0]]}}
    assert pointers(problem(client.post("/v1/locality", json=one), 422)) == ["/train/rows"]
    problem(client.post("/v1/locality", json=request(), headers={"Accept": "image/png"}), 406)
    problem(client.post("/v1/locality", data=b"a=1", content_type="application/xml"), 415)
