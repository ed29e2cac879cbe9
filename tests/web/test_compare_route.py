"""POST /v1/compare and method auto over HTTP: shapes valid against the OpenAPI document."""

from __future__ import annotations

import json
from pathlib import Path

from jsonschema import Draft202012Validator
from webhelpers import body, curve, problem

KEPT = Path(__file__).resolve().parents[2] / "openapi" / "openapi.json"


def validator(name: str) -> Draft202012Validator:
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    return Draft202012Validator(
        {"$ref": f"#/components/schemas/{name}", "components": doc["components"]}
    )


def test_compare_answers_a_ranking_valid_against_the_schema(client) -> None:
    request = body(query={"columns": ["x"], "rows": [[1.0], [5.0]]})
    request.pop("method")
    resp = client.post("/v1/compare", json=request)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    errors = sorted(validator("CompareResponse").iter_errors(doc), key=str)
    assert not errors, errors[0]
    assert {r["method"] for r in doc["ranking"]} == {"knn", "linear", "spline"} | (
        {"additive"} if "additive" in doc["paths"] else set()
    )
    assert doc["recommended"] in doc["paths"] and doc["reason"]
    assert doc["prediction"]["method"] == doc["recommended"]
    assert len(doc["prediction"]["predictions"]) == 2
    again = client.post("/v1/compare", json=request)
    assert again.get_data() == resp.get_data()  # deterministic to the byte


def test_compare_with_csv_and_named_methods(client) -> None:
    csv = "x,y\n" + "".join(f"{x},{y}\n" for x, y in curve())
    resp = client.post("/v1/compare?target=y&methods=knn,linear", data=csv, content_type="text/csv")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert {r["method"] for r in resp.get_json()["ranking"]} == {"knn", "linear"}


def test_compare_errors_point_at_the_field(client) -> None:
    request = body()
    request.pop("method")
    doc = problem(client.post("/v1/compare", json={**request, "methods": ["knn", "forest"]}), 422)
    assert doc["errors"][0]["pointer"] == "/methods/1"
    doc = problem(client.post("/v1/compare", json={**request, "method": "knn"}), 422)
    assert doc["errors"][0]["pointer"] == "/method"


def test_auto_answers_like_predict_with_the_comparison(client) -> None:
    resp = client.post("/v1/predict", json=body("auto"))
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    errors = sorted(validator("PredictResponse").iter_errors(doc), key=str)
    assert not errors, errors[0]
    assert doc["method"] == doc["comparison"]["recommended"]
    assert doc["warnings"][0]["code"] == "method_chosen"


def test_the_readme_comparison_on_the_turbine_sample(client) -> None:
    """README.md shows this answer; keep the two in step."""
    sample = Path(__file__).resolve().parents[2] / "samples" / "compare_turbine.json"
    doc = client.post(
        "/v1/compare", data=sample.read_bytes(), content_type="application/json"
    ).get_json()
    assert [r["method"] for r in doc["ranking"]] == ["additive", "spline", "knn", "linear"]
    assert doc["recommended"] == "additive"
    assert round(doc["ranking"][0]["error"], 2) == 47.89
    one = json.loads(sample.read_text())
    one["features"] = ["wind_ms"]
    doc = client.post("/v1/compare", json=one).get_json()
    assert doc["ranking"][0]["method"] == "spline" and doc["recommended"] == "additive"
