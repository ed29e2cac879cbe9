"""The OpenAPI document: served, kept in openapi/, valid OpenAPI 3.1, and free of drift."""

from __future__ import annotations

import json
from pathlib import Path

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
