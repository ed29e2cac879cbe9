"""What fuzzing found, each kept as a regression test, and the bounds the document states."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Any

import pytest

from nearwise.core.methods import METHODS
from nearwise.web.app import create_app
from nearwise.web.openapi import build
from nearwise.web.schemas import MAX_NAME
from nearwise.web.settings import Settings

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "web"))
from webhelpers import request, serving

BOUNDARY = "fuzzboundary"
DEFAULTS = Settings()


@pytest.fixture(scope="module")
def doc() -> dict[str, Any]:
    return build(create_app(Settings()))


def _problem(resp: Any, status: int) -> dict[str, Any]:
    assert resp.status_code == status, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"
    return json.loads(resp.get_data(as_text=True))


def _multipart(*parts: tuple[str, str]) -> bytes:
    out = "".join(
        f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="{name}"\r\n\r\n{value}\r\n'
        for name, value in parts
    )
    train = "x,y\r\n1,2\r\n2,3\r\n3,5\r\n4,4\r\n5,6\r\n6,8\r\n"
    return (
        out + f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="train"\r\n'
        f"Content-Type: text/csv\r\n\r\n{train}--{BOUNDARY}--\r\n"
    ).encode()


@pytest.mark.parametrize("path", ["/v1/predict", "/v1/compare", "/v1/locality"])
def test_a_multipart_part_whose_name_holds_a_line_break_is_a_400_not_a_500(client, path) -> None:
    """Found by fuzzing: a carriage return inside ``name="..."`` cuts the header, the part
    comes without a name, and the form reader failed on it."""
    body = _multipart(("target", "y"), ("method", "knn"), ("params.k\r", "3"))
    if path == "/v1/locality":
        body = _multipart(("scale", "none"), ("k\r", "3"))
    resp = client.post(path, data=body, content_type=f"multipart/form-data; boundary={BOUNDARY}")
    problem = _problem(resp, 400)
    assert problem["code"] == "unreadable_body"
    assert "no readable name" in problem["detail"]


def test_a_multipart_body_with_named_parts_is_still_read(client) -> None:
    body = _multipart(("target", "y"), ("method", "linear"))
    resp = client.post(
        "/v1/predict", data=body, content_type=f"multipart/form-data; boundary={BOUNDARY}"
    )
    assert resp.status_code == 200, resp.get_data(as_text=True)


def _schema(doc: dict[str, Any], name: str) -> dict[str, Any]:
    return doc["components"]["schemas"][name]["properties"]


def test_table_bounds_come_from_the_default_settings(doc) -> None:
    train = _schema(doc, "Table")
    assert train["rows"]["maxItems"] == DEFAULTS.max_rows
    assert train["rows"]["items"]["maxItems"] == DEFAULTS.max_columns
    assert train["columns"]["maxItems"] == DEFAULTS.max_columns
    assert train["columns"]["items"]["maxLength"] == MAX_NAME
    query = _schema(doc, "QueryTable")
    assert query["rows"]["maxItems"] == DEFAULTS.max_query_rows
    request = _schema(doc, "PredictRequest")
    refs = {k: [s.get("$ref", "") for s in request[k]["oneOf"]] for k in ("train", "query")}
    assert refs["train"][0].endswith("/Table") and refs["train"][2].endswith("/SplitTable")
    assert refs["query"][0].endswith("/QueryTable")
    assert refs["query"][2].endswith("/QuerySplitTable")
    assert request["query"]["oneOf"][1]["maxItems"] == DEFAULTS.max_query_rows  # row objects
    assert _schema(doc, "QuerySplitTable")["data"]["maxItems"] == DEFAULTS.max_query_rows


def test_grid_methods_and_tuning_bounds(doc) -> None:
    predict = _schema(doc, "PredictRequest")
    assert predict["grid"]["additionalProperties"]["maxItems"] == DEFAULTS.max_grid
    assert predict["method"]["enum"] == [*METHODS, "auto"]
    assert predict["features"]["maxItems"] == DEFAULTS.max_columns
    tuning = _schema(doc, "Tuning")
    assert tuning["folds"]["maximum"] <= DEFAULTS.max_fold_fits
    assert tuning["repeats"]["maximum"] <= DEFAULTS.max_fold_fits
    compare = doc["paths"]["/v1/compare"]["post"]["requestBody"]["content"]
    methods = compare["application/json"]["schema"]
    assert methods["$ref"].endswith("/CompareRequest")
    methods = _schema(doc, "CompareRequest")["methods"]
    assert methods["maxItems"] == DEFAULTS.max_methods
    assert methods["uniqueItems"] is True
    assert methods["items"]["enum"] == list(METHODS)


def test_query_parameters_and_form_fields_carry_the_bounds(doc) -> None:
    op = doc["paths"]["/v1/predict"]["post"]
    params = {p["name"]: p["schema"] for p in op["parameters"]}
    assert params["tuning.folds"] == {"type": "integer", "minimum": 2, "maximum": 50}
    assert params["interval.level"]["exclusiveMinimum"] == 0
    assert params["interval.adaptive"]["type"] == "boolean"
    assert params["method"]["enum"] == [*METHODS, "auto"]
    assert params["target"]["maxLength"] == MAX_NAME
    form = op["requestBody"]["content"]["multipart/form-data"]["schema"]["properties"]
    assert form["tuning.repeats"]["maximum"] == 20
    compare = doc["paths"]["/v1/compare"]["post"]
    assert {p["name"]: p["schema"] for p in compare["parameters"]}["methods"]["maxItems"] == 4


def test_every_503_documents_retry_after_and_every_401_its_challenge(doc) -> None:
    seen = set()
    for path, ops in doc["paths"].items():
        for op in ops.values():
            responses = op["responses"]
            if "503" in responses:
                seen.add(path)
                assert responses["503"]["headers"]["Retry-After"]["required"] is True
            if "401" in responses:
                assert "WWW-Authenticate" in responses["401"]["headers"]
    assert {"/v1/predict", "/v1/compare", "/v1/cell"} <= seen


def test_a_name_over_the_length_limit_is_a_422_naming_its_place(client) -> None:
    long = "c" * (MAX_NAME + 1)
    body = {
        "method": "linear",
        "target": "y",
        "train": {"columns": ["x", long], "rows": [[1, 2], [2, 3]]},
    }
    problem = _problem(client.post("/v1/predict", json=body), 422)
    assert [e["pointer"] for e in problem["errors"]] == ["/train/columns/1"]
    body["train"]["columns"][1] = "y"
    body["target"] = long
    problem = _problem(client.post("/v1/predict", json=body), 422)
    assert [e["pointer"] for e in problem["errors"]] == ["/target"]


def test_a_name_at_the_length_limit_is_read(client) -> None:
    name = "c" * MAX_NAME
    rows = [[float(i), float(2 * i + (i % 3))] for i in range(12)]
    body = {"method": "linear", "target": name, "train": {"columns": ["x", name], "rows": rows}}
    resp = client.post("/v1/predict", json=body)
    assert resp.status_code == 200, resp.get_data(as_text=True)


def test_cell_folds_state_the_bounds_they_are_checked_against(doc, client) -> None:
    folds = {p["name"]: p for p in doc["paths"]["/v1/cell"]["get"]["parameters"]}["folds"]
    assert (folds["schema"]["minimum"], folds["schema"]["maximum"]) == (2, 50)
    data = "x=1,2,3,4,5,6,7,8&y=1,2,3,4,5,6,7,9&at=4.5"
    assert client.get(f"/v1/cell?{data}&folds=51").status_code == 422
    assert client.get(f"/v1/cell?{data}&folds=1").status_code == 422
    assert client.get(f"/v1/cell?{data}&folds=2").status_code == 200


def test_an_over_long_request_line_is_a_documented_414(doc, tmp_path) -> None:
    """Found by the long run: a query string of long `features` names passed gunicorn's
    request-line limit, and its 414 (then gunicorn's own text/html page) was not in the
    document. The worker now answers it as problem+json, and the document says so."""
    for path, ops in doc["paths"].items():
        for op in ops.values():
            if any(p["in"] == "query" for p in op.get("parameters", ())):
                content = op["responses"]["414"]["content"]
                assert list(content) == ["application/problem+json"], path
    with serving(tmp_path / "server.log") as port:
        status, body = request(port, "POST", "/v1/predict?" + "&".join(["features=abcdefgh"] * 500))
    assert status == 414, body[:200]
    assert json.loads(body)["code"] == "uri_too_long"
