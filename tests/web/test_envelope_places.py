"""Faults of the request as a whole (its JSON syntax, method, Accept, Content-Type,
Content-Encoding, size and key) name their place in ``errors[]``, like a bad cell does.

Each answer's body is loaded by the documented ``ProblemSchema``, whose error entries refuse
unknown members, so a place the OpenAPI document does not declare fails here too.
"""

from __future__ import annotations

import json
from typing import Any

import pytest
from flask.testing import FlaskClient
from webhelpers import body, problem

from nearwise.web import framing
from nearwise.web.app import create_app
from nearwise.web.responses import ProblemSchema
from nearwise.web.settings import Settings


def _places(resp: Any, status: int, code: str) -> list[dict[str, Any]]:
    doc = problem(resp, status)
    assert doc["code"] == code, doc
    ProblemSchema().load(doc)  # every member of every entry is declared
    for entry in doc["errors"]:
        assert entry["message"], entry
    return [{k: v for k, v in e.items() if k != "message"} for e in doc["errors"]]


@pytest.mark.parametrize(
    "text",
    [
        '{"method": "knn", ',
        '{\n  "method": "knn",\n  "train": [1, 2,, 3]\n}',
        '{"method": "knn"}\n\n   x',
        '{"target": "y" "method": "knn"}',
    ],
)
def test_json_syntax_names_the_line_and_character(client: FlaskClient, text: str) -> None:
    # the place Python's own parser reports (stdlib json.JSONDecodeError.lineno / colno)
    with pytest.raises(json.JSONDecodeError) as caught:
        json.loads(text)
    resp = client.post("/v1/predict", data=text, content_type="application/json")
    where = _places(resp, 400, "unreadable_body")
    assert where == [{"line": caught.value.lineno, "character": caught.value.colno}]
    assert f"line {caught.value.lineno}, column {caught.value.colno}" in resp.get_json()["detail"]


@pytest.mark.parametrize("verb", ["put", "delete", "patch"])
def test_a_method_not_taken_names_the_method(client: FlaskClient, verb: str) -> None:
    resp = getattr(client, verb)("/v1/predict", json=body())
    assert _places(resp, 405, "method_not_allowed") == [{"method": verb.upper()}]


def test_an_accept_header_nothing_matches_names_accept(client: FlaskClient) -> None:
    resp = client.post("/v1/predict", json=body(), headers={"Accept": "image/png"})
    assert _places(resp, 406, "not_acceptable") == [{"header": "Accept"}]


@pytest.mark.parametrize("media", ["application/xml", "image/png"])
def test_a_body_type_not_read_names_content_type(client: FlaskClient, media: str) -> None:
    resp = client.post("/v1/predict", data=b"x=1", content_type=media)
    assert _places(resp, 415, "unsupported_media_type") == [{"header": "Content-Type"}]


def test_a_charset_not_read_names_content_type(client: FlaskClient) -> None:
    resp = client.post(
        "/v1/predict", data=json.dumps(body()), content_type="application/json; charset=latin-1"
    )
    assert _places(resp, 415, "unsupported_media_type") == [{"header": "Content-Type"}]


def test_a_coding_not_read_names_content_encoding(client: FlaskClient) -> None:
    resp = client.post(
        "/v1/predict",
        data=json.dumps(body()),
        content_type="application/json",
        headers={"Content-Encoding": "br"},
    )
    where = _places(resp, 415, "unsupported_content_encoding")
    assert where == [{"header": "Content-Encoding"}]


@pytest.mark.parametrize(("spare", "status"), [(0, 200), (1, 413)])
def test_a_body_over_the_cap_names_the_whole_body(spare: int, status: int) -> None:
    data = json.dumps(body()).encode()
    app = create_app(Settings(max_body_bytes=len(data) - spare))  # just inside, one byte over
    resp = app.test_client().post("/v1/predict", data=data, content_type="application/json")
    if status == 200:
        assert resp.status_code == 200, resp.get_data(as_text=True)
    else:
        # RFC 6901 section 5: the pointer "" is the whole document
        assert _places(resp, 413, "body_too_large") == [{"pointer": ""}]


@pytest.mark.parametrize(
    ("auth", "code"), [(None, "unauthorized"), ("Bearer not-a-key", "invalid_api_key")]
)
def test_a_missing_or_wrong_key_names_authorization(auth: str | None, code: str) -> None:
    client = create_app(Settings(api_keys=("k" * 32,))).test_client()
    headers = {"Authorization": auth} if auth else {}
    resp = client.post("/v1/predict", json=body(), headers=headers)
    assert _places(resp, 401, code) == [{"header": "Authorization"}]


def test_faults_with_a_place_of_their_own_keep_it(client: FlaskClient) -> None:
    # a value fault names its value, and no envelope place is added beside it
    resp = client.post("/v1/predict", json=body(tuning={"folds": 1}))
    assert _places(resp, 422, resp.get_json()["code"]) == [{"pointer": "/tuning/folds"}]


def test_a_path_with_no_endpoint_has_no_place(client: FlaskClient) -> None:
    assert _places(client.get("/v1/nowhere"), 404, "not_found") == []


@pytest.mark.parametrize(
    ("status", "code", "expected"),
    [
        (413, "body_too_large", [{"pointer": ""}]),
        (400, "malformed_request", [{"pointer": ""}]),
        (431, "header_too_large", []),
        (503, "out_of_memory", []),
    ],
)
def test_answers_from_the_read_loop_carry_the_same_places(
    status: int, code: str, expected: list[dict[str, str]]
) -> None:
    raw, _ = framing.raw_problem(status, code, "why")
    doc = json.loads(raw.split(b"\r\n\r\n", 1)[1])
    ProblemSchema().load(doc)
    assert [{k: v for k, v in e.items() if k != "message"} for e in doc["errors"]] == expected
    assert all(e["message"] == "why" for e in doc["errors"])
