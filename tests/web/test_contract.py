"""One contract test over every method: the answer has the documented shape, is valid against
the OpenAPI schema, is byte-for-byte deterministic, and agrees between JSON and CSV."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest
from jsonschema import Draft202012Validator
from webhelpers import body, curve

KEPT = Path(__file__).resolve().parents[2] / "openapi" / "openapi.json"
METHODS = ["knn", "linear", "spline", "additive"]


def response_validator(name: str = "PredictResponse") -> Draft202012Validator:
    doc = json.loads(KEPT.read_text(encoding="utf-8"))
    schema = {"$ref": f"#/components/schemas/{name}", **{"components": doc["components"]}}
    return Draft202012Validator(schema)


@pytest.mark.parametrize("method", METHODS)
def test_predict_contract(client, method: str) -> None:
    query = {"columns": ["x"], "rows": [[0.5], [5.0], [9.5]]}
    request = body(method, query=query, tuning={"folds": 5, "seed": 3})
    first = client.post("/v1/predict", json=request)
    assert first.status_code == 200, first.get_data(as_text=True)
    assert first.mimetype == "application/json"
    again = client.post("/v1/predict", json=request)
    assert again.get_data() == first.get_data()  # deterministic to the byte

    doc = first.get_json()
    # the members in the order written: what was fit and the predictions before the detail
    order = list(json.loads(first.get_data(as_text=True)))
    assert order[:6] == ["method", "target", "features", "params", "predictions", "warnings"]
    assert set(order[6:]) == {"tuning", "fit", "interval", "model"}
    errors = sorted(response_validator().iter_errors(doc), key=str)
    assert not errors, errors[0]
    assert doc["method"] == method and doc["target"] == "y" and doc["features"] == ["x"]
    assert len(doc["predictions"]) == 3
    assert all("residual" not in p and isinstance(p["value"], float) for p in doc["predictions"])
    path = doc["tuning"]["path"]
    assert path and all({"params", "error", "error_se", "df"} <= set(e) for e in path)
    assert doc["fit"]["n_train"] == 40 and doc["fit"]["rows_dropped"] == 0
    assert set(doc["params"]) >= set(doc["tuning"]["best"])
    assert "NaN" not in first.get_data(as_text=True)
    for p in doc["predictions"]:
        assert p["lower"] <= p["value"] <= p["upper"] and p["std_error"] >= 0
    assert doc["interval"]["level"] == 0.9 and doc["interval"]["construction"] == "cv_plus"

    as_csv = client.post("/v1/predict", json=request, headers={"Accept": "text/csv"})
    rows = list(csv.reader(io.StringIO(as_csv.get_data(as_text=True))))
    assert [float(r[1]) for r in rows[1:]] == [p["value"] for p in doc["predictions"]]


@pytest.mark.parametrize("method", METHODS)
def test_fitted_values_carry_residuals(client, method: str) -> None:
    rows = curve()
    doc = client.post("/v1/predict", json=body(method)).get_json()
    assert len(doc["predictions"]) == len(rows)
    for (_, y), p in zip(rows, doc["predictions"], strict=True):
        assert p["residual"] == pytest.approx(y - p["value"], abs=1e-12)  # one subtraction


def test_methods_catalogue(client) -> None:
    resp = client.get("/v1/methods")
    assert resp.status_code == 200
    doc = resp.get_json()
    errors = sorted(response_validator("Methods").iter_errors(doc), key=str)
    assert not errors, errors[0]
    names = [m["name"] for m in doc["methods"]]
    assert set(METHODS) <= set(names)
    for m in doc["methods"]:
        assert m["default_grid"] and m["std_error"] and m["references"]
        tuned = [p for p in m["parameters"] if p["tunable"]]
        # `tuned` is the default; a method may tune another one under some settings
        # (linear tunes `alpha` with a penalty).
        assert m["tuned"] in [p["name"] for p in tuned]
        assert all(p["simpler"] for p in tuned)
