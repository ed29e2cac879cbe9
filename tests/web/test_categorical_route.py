"""``categorical`` through the API: JSON, CSV with form and query-string fields, an unseen
level answered with the flag ``unseen_level``, compare and auto, and /v1/locality's refusal.
The numbers are checked against statsmodels in tests/reference/test_categorical_reference.py;
the 422s are in test_bad_input_catalogue.py.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from numpy.testing import assert_allclose
from webhelpers import problem

SITES = ["east", "north", "south"]


def _rows(n=60, seed=0):
    rng = np.random.default_rng(seed)
    x = np.round(rng.uniform(0, 10, n), 3)
    site = [SITES[i] for i in rng.integers(0, 3, n)]
    shift = [["day", "night"][i] for i in rng.integers(0, 2, n)]
    effect = {"east": 0.0, "north": 1.0, "south": -1.5}
    y = np.round(
        [0.5 * a + effect[s] + 0.4 * (h == "night") for a, s, h in zip(x, site, shift, strict=True)]
        + rng.normal(0, 0.3, n),
        4,
    )
    return [[float(a), s, h, float(b)] for a, s, h, b in zip(x, site, shift, y, strict=True)]


COLUMNS = ["x", "site", "shift", "y"]
QUERY = {"columns": ["x", "site", "shift"], "rows": [[2.0, "south", "day"], [5.0, "west", "night"]]}


def _body(method="linear", rows=None, **more):
    return {
        "method": method,
        "target": "y",
        "categorical": ["site", "shift"],
        "train": {"columns": COLUMNS, "rows": rows or _rows()},
        **more,
    }


def _csv(columns, rows):
    return (",".join(columns) + "\n" + "".join(",".join(map(str, r)) + "\n" for r in rows)).encode()


def test_json_answer_matches_statsmodels_and_flags_the_unseen_level(client):
    """Reference: statsmodels ``ols("y ~ x + C(site) + C(shift)")`` at the seen query row."""
    rows = _rows()
    resp = client.post("/v1/predict", json=_body(rows=rows, params={"degree": 1}, query=QUERY))
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    df = pd.DataFrame(rows, columns=COLUMNS)
    ref = smf.ols("y ~ x + C(site) + C(shift)", df).fit()
    seen = ref.get_prediction(pd.DataFrame([QUERY["rows"][0]], columns=QUERY["columns"]))
    first, second = doc["predictions"]
    # Least squares by QR against statsmodels' pinv: 1e-8 relative.
    assert_allclose(first["value"], seen.predicted_mean[0], rtol=1e-8)
    assert_allclose(first["std_error"], seen.se_mean[0], rtol=1e-8)
    assert first["flags"] == []
    assert second == {
        "value": None,
        "std_error": None,
        "lower": None,
        "upper": None,
        "flags": ["unseen_level"],
    }
    codes = {w["code"]: w["rows"] for w in doc["warnings"]}
    assert codes["unseen_level"] == [1]
    names = [t["name"] for t in doc["model"]["terms"]]
    assert names == ["intercept", "site[north]", "site[south]", "shift[night]", "x"]
    assert doc["model"]["categorical"] == [
        {"name": "site", "levels": SITES, "reference": "east"},
        {"name": "shift", "levels": ["day", "night"], "reference": "day"},
    ]
    assert doc["features"] == ["x", "site", "shift"]


def test_csv_form_fields_and_query_string_equal_json(client):
    rows = _rows(seed=1)
    as_json = client.post(
        "/v1/predict",
        json=_body(rows=rows, categorical_reference={"site": "south"}, query=QUERY),
    ).get_json()
    train = _csv(COLUMNS, rows)
    query = _csv(QUERY["columns"], QUERY["rows"])
    parts = client.post(
        "/v1/predict",
        data={
            "train": (io.BytesIO(train), "train.csv", "text/csv"),
            "query": (io.BytesIO(query), "query.csv", "text/csv"),
            "method": "linear",
            "target": "y",
            "categorical": "site,shift",
            "categorical_reference.site": "south",
        },
        content_type="multipart/form-data",
    )
    assert parts.status_code == 200, parts.get_data(as_text=True)
    assert parts.get_json()["predictions"] == as_json["predictions"]
    assert parts.get_json()["model"] == as_json["model"]
    url = (
        "/v1/predict?method=linear&target=y&categorical=site&categorical=shift"
        "&categorical_reference.site=south"
    )
    body = client.post(url, data=train, content_type="text/csv")
    assert body.status_code == 200, body.get_data(as_text=True)
    assert body.get_json()["model"] == as_json["model"]


def test_csv_answer_leaves_the_unseen_row_empty(client):
    resp = client.post("/v1/predict", json=_body(query=QUERY), headers={"Accept": "text/csv"})
    assert resp.status_code == 200, resp.get_data(as_text=True)
    lines = resp.get_data(as_text=True).splitlines()
    assert lines[0].endswith("prediction,std_error,lower,upper,flags")
    assert lines[2].endswith(",,,,unseen_level")


def test_levels_sent_as_numbers_are_one_level_however_written(client):
    """``1``, ``1.0`` and ``"1"`` name one level; the answer equals the one with text."""
    rows = _rows(seed=2)
    as_text = [[r[0], {"east": "1", "north": "2", "south": "3"}[r[1]], r[2], r[3]] for r in rows]
    forms = {"east": [1, 1.0, "1"], "north": [2, 2.0, "2"], "south": [3, 3.0, "3"]}
    as_numbers = [[r[0], forms[r[1]][i % 3], r[2], r[3]] for i, r in enumerate(rows)]
    a = client.post("/v1/predict", json=_body(rows=as_text)).get_json()
    b = client.post("/v1/predict", json=_body(rows=as_numbers)).get_json()
    assert a["model"]["categorical"][0]["levels"] == ["1", "2", "3"]
    assert a["predictions"] == b["predictions"]


def test_compare_and_auto_handle_levels(client):
    body = _body(query=QUERY)
    del body["method"]
    resp = client.post("/v1/compare", json=body)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    assert {r["method"] for r in doc["ranking"]} == {"knn", "linear", "additive"}
    skipped = [w["message"] for w in doc["warnings"] if w["code"] == "method_skipped"]
    assert len(skipped) == 1 and "spline" in skipped[0] and "additive" in skipped[0]
    knn = next(r for r in doc["ranking"] if r["method"] == "knn")
    assert knn["params"]["mismatch"] == 1.0
    named = client.post("/v1/compare", json={**body, "methods": ["knn", "spline"]})
    assert problem(named, 422)["errors"][0]["pointer"] == "/categorical"
    auto = client.post("/v1/predict", json=_body("auto", query=QUERY)).get_json()
    assert auto["predictions"][1]["flags"] == ["unseen_level"]
    assert auto["comparison"]["recommended"] == auto["method"]


@pytest.mark.parametrize("method", ["knn", "additive"])
def test_each_method_answers_with_levels(client, method):
    resp = client.post("/v1/predict", json=_body(method, query=QUERY))
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    assert doc["predictions"][0]["value"] is not None
    assert doc["predictions"][1]["value"] is None
    if method == "additive":
        assert [t["name"] for t in doc["model"]["terms"]] == [
            "site[north]",
            "site[south]",
            "shift[night]",
        ]


def test_locality_refuses_levels_clearly(client):
    rows = [[r[0], r[1]] for r in _rows()]
    body = {"train": {"columns": ["x", "site"], "rows": rows}}
    doc = problem(client.post("/v1/locality", json=body), 422)
    assert doc["errors"][0]["pointer"] == "/train/rows/0/1"
    assert "`categorical`" in doc["detail"] and "`features`" in doc["detail"]
    doc = problem(client.post("/v1/locality", json={**body, "categorical": ["site"]}), 422)
    assert doc["errors"][0]["pointer"] == "/categorical"
