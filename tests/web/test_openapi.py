"""The OpenAPI document: served, kept in openapi/, valid OpenAPI 3.1, and free of drift."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from jsonschema import Draft202012Validator
from openapi_spec_validator import validate
from openapi_spec_validator.validation import OpenAPIV31SpecValidator

from nearwise.web.app import create_app
from nearwise.web.openapi import render
from nearwise.web.settings import Settings

KEPT = Path(__file__).resolve().parents[2] / "openapi" / "openapi.json"
FIX = "run: nearwise openapi openapi/openapi.json (or python -m nearwise openapi)"


def test_kept_copy_matches_the_generated_document() -> None:
    generated = render(create_app(Settings()))
    assert KEPT.exists(), FIX
    assert KEPT.read_text(encoding="utf-8") == generated, FIX


def test_document_is_valid_openapi_3_1() -> None:
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    assert doc["openapi"] == "3.1.0"
    validate(doc, cls=OpenAPIV31SpecValidator)


def test_served_document_is_the_kept_one(client) -> None:
    resp = client.get("/openapi.json")
    assert resp.status_code == 200 and resp.mimetype == "application/json"
    assert resp.get_data(as_text=True) == KEPT.read_text(encoding="utf-8")


def test_generation_is_deterministic_and_independent_of_settings() -> None:
    a = render(create_app(Settings()))
    b = render(create_app(Settings(max_rows=5, api_keys=("k",), cors_origins=("*",))))
    assert a == b


def test_paths_summaries_and_problem_responses() -> None:
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    assert set(doc["paths"]) == {
        "/v1/predict",
        "/v1/compare",
        "/v1/locality",
        "/v1/methods",
        "/v1/cell",
        "/healthz",
        "/readyz",
        "/metrics",
        "/openapi.json",
        "/",
        "/docs",
        "/problems/{code}",
    }
    predict = doc["paths"]["/v1/predict"]["post"]
    assert predict["summary"].startswith("Fit one method")
    for status in ("400", "406", "413", "415", "422"):
        content = predict["responses"][status]["content"]
        assert content["application/problem+json"]["schema"]["$ref"].endswith("/Problem")
    bodies = predict["requestBody"]["content"]
    assert set(bodies) == {"application/json", "multipart/form-data", "text/csv", "text/plain"}
    form = bodies["multipart/form-data"]["schema"]["properties"]
    assert {"train", "query", "method", "target", "tuning.folds", "interval.level"} <= set(form)
    assert set(predict["responses"]["200"]["content"]) == {
        "application/json",
        "text/csv",
        "image/svg+xml",
    }
    for path in doc["paths"].values():
        for op in path.values():
            assert op["summary"] and "\n" not in op["summary"]


def test_request_examples_are_valid_requests(client) -> None:
    """The docs page's Try it out starts from these bodies: each must get a 200."""
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    for path in ("/v1/predict", "/v1/compare"):
        body = doc["paths"][path]["post"]["requestBody"]["content"]["application/json"]
        resp = client.post(path, json=body["example"])
        assert resp.status_code == 200, resp.get_data(as_text=True)


def test_the_predict_example_shows_a_well_tuned_fit(client) -> None:
    """The docs page's first answer: tuned inside its grid, on enough rows, and close to the
    curve the example's readings were drawn from (predict_doc._turbine_rows: a 2,000 kW
    logistic power curve with 25 kW noise); the query beyond the readings is flagged."""
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    example = doc["paths"]["/v1/predict"]["post"]["requestBody"]["content"]["application/json"]
    answer = client.post("/v1/predict", json=example["example"]).get_json()
    codes = {w["code"] for w in answer["warnings"]}
    assert not codes & {"tuning_at_edge", "few_rows", "grid_reduced"}, codes
    assert 4.0 <= answer["fit"]["df"] <= 15.0  # neither a near-line nor an interpolant
    winds = [row[0] for row in example["example"]["query"]["rows"]]
    for wind, p in zip(winds, answer["predictions"], strict=True):
        truth = 2000.0 / (1.0 + math.exp(-(wind - 9.0) / 1.3))
        assert abs(p["value"] - truth) <= 60.0, (wind, p["value"], truth)  # about 2.5 sigma
        assert p["lower"] <= truth <= p["upper"], (wind, p, truth)
    assert [p["flags"] for p in answer["predictions"]][-1] == ["outside_range"]
    assert answer["predictions"][-1]["value"] <= 2000.0 + 2 * answer["fit"]["cv_error"]


def test_bearer_scheme_guards_v1_and_metrics_is_prometheus_text() -> None:
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    assert doc["components"]["securitySchemes"] == {
        "bearerAuth": {
            "type": "http",
            "scheme": "bearer",
            "description": doc["components"]["securitySchemes"]["bearerAuth"]["description"],
        }
    }
    for path, item in doc["paths"].items():
        for op in item.values():
            keyed = path.startswith("/v1/") or path in ("/healthz", "/readyz", "/metrics")
            assert (op.get("security") == [{}, {"bearerAuth": []}]) == keyed, path
    assert "X-API-Key" not in KEPT.read_text(encoding="utf-8")
    metrics = doc["paths"]["/metrics"]["get"]
    assert list(metrics["responses"]["200"]["content"]) == [
        "text/plain; version=0.0.4; charset=utf-8"
    ]
    assert "nearwise_http_requests_total" in metrics["responses"]["200"]["description"]


def test_service_endpoints_document_the_problems_they_answer(client) -> None:
    doc = client.get("/openapi.json").get_json()
    for path in ("/healthz", "/readyz", "/v1/methods"):
        documented = set(doc["paths"][path]["get"]["responses"])
        assert client.get(path, headers={"Accept": "image/png"}).status_code == 406
        assert client.get(path + "?format=xml").status_code == 422
        assert {"200", "406", "422"} <= documented, path


def _format_requests(doc: dict) -> dict[tuple[str, str], dict | None]:
    """Each operation that declares ``format``, with a body it answers (the documented example;
    for /v1/locality, which has none, a small one)."""
    out: dict[tuple[str, str], dict | None] = {}
    for path, item in doc["paths"].items():
        for verb, op in item.items():
            if any(p["name"] == "format" for p in op.get("parameters", [])):
                content = op.get("requestBody", {}).get("content", {}).get("application/json")
                out[(verb, path)] = content.get("example") if content else None
    locality = {
        "train": {"columns": ["x"], "rows": [[float(i)] for i in range(20)]},
        "query": {"columns": ["x"], "rows": [[3.5], [40.0]]},
    }
    out[("post", "/v1/locality")] = out[("post", "/v1/locality")] or locality
    return out


def test_format_is_declared_with_exactly_the_values_taken(client) -> None:
    """Every value of the declared enum gets that media type; a value outside it is a 422
    whose detail lists the same values (the parameter is read by body.negotiate)."""
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    requests = _format_requests(doc)
    assert set(requests) == {
        ("get", "/healthz"),
        ("get", "/readyz"),
        ("get", "/v1/methods"),
        ("post", "/v1/predict"),
        ("post", "/v1/compare"),
        ("post", "/v1/locality"),
    }
    media = {"json": "application/json", "csv": "text/csv", "svg": "image/svg+xml"}
    answered = 0
    for (verb, path), body in requests.items():
        op = doc["paths"][path][verb]
        (param,) = [p for p in op["parameters"] if p["name"] == "format"]
        names = param["schema"]["enum"]
        assert [media[n] for n in names] == [
            m for m in media.values() if m in op["responses"]["200"]["content"]
        ]
        send = getattr(client, verb)
        for name in [*names, *(n for n in media if n not in names)]:
            resp = send(f"{path}?format={name}", **({"json": body} if body is not None else {}))
            if name in names:
                assert resp.status_code == 200, (path, name, resp.get_data(as_text=True))
                assert resp.mimetype == media[name], (path, name)
                answered += 1
            else:
                assert resp.status_code == 422, (path, name)
                assert f"must be one of {', '.join(names)} here" in resp.get_json()["detail"]
    assert answered == 11  # 3 single-format GETs, predict and compare 3 each, locality 2


def test_problem_and_warning_codes_are_declared_as_enums() -> None:
    """A client can generate its code lists from the document: the Problem schema's `code`
    lists every problem type with a page, the Warning schema's every catalogued warning."""
    from nearwise.core.catalogue import describe
    from nearwise.web.problem_types import TYPES

    schemas = json.loads(KEPT.read_text(encoding="utf-8"))["components"]["schemas"]
    assert schemas["Problem"]["properties"]["code"]["enum"] == sorted(TYPES)
    catalogued = [w["code"] for w in describe()["warnings"]]
    assert schemas["Warning"]["properties"]["code"]["enum"] == catalogued
    assert len(catalogued) == len(set(catalogued)) >= 20


@pytest.mark.parametrize(
    ("sent", "kept"),
    [
        ("job-42", True),
        ("a" * 128, True),  # the longest kept
        ("a" * 129, False),  # one over
        (" ~", True),  # the ends of printable ASCII
        ("bad\x7f", False),
        ("caf\u00e9", False),
    ],
)
def test_request_id_is_declared_as_the_service_keeps_it(client, sent: str, kept: bool) -> None:
    """Every operation takes `X-Request-ID` and every answer returns one; the declared schema
    accepts exactly the ids the service keeps (nearwise.web.logs.valid_request_id)."""
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    for path, item in doc["paths"].items():
        for op in item.values():
            (param,) = [p for p in op["parameters"] if p["name"] == "X-Request-ID"]
            assert param["in"] == "header" and not param["required"], path
            for status, answer in op["responses"].items():
                assert answer["headers"]["X-Request-ID"]["schema"] == param["schema"], (
                    path,
                    status,
                )
    schema = Draft202012Validator(param["schema"])
    assert schema.is_valid(sent) == kept
    if sent.isascii():  # a header value the test client can send
        got = client.get("/healthz", headers={"X-Request-ID": sent}).headers["X-Request-ID"]
        assert (got == sent) == kept
        assert schema.is_valid(got)


def test_query_parameter_examples_together_get_an_answer(client) -> None:
    """The docs page fills every parameter that has an example when Try it out is pressed:
    those values together must be a request the service answers."""
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    tried = []
    for path, item in doc["paths"].items():
        for verb, op in item.items():
            filled = {
                p["name"]: p["example"]
                for p in op.get("parameters", [])
                if p["in"] == "query" and "example" in p
            }
            if verb == "get" and filled:
                resp = client.get(path, query_string=filled)
                assert resp.status_code == 200, (path, resp.get_data(as_text=True))
                tried.append(path)
    assert tried == ["/v1/cell"]
