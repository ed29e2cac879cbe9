"""``weight_by`` through the API: JSON, CSV with query-string fields, compare, and ``w`` of
/v1/cell. The numbers are checked against statsmodels' WLS and against the same request
without the zero-weight rows; the bad weights' 422s are in test_bad_input_catalogue.py.
"""

from __future__ import annotations

import io

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from webhelpers import problem


def _table(n=60, seed=0):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    w = rng.integers(1, 6, n).astype(float)
    y = 2.0 + 0.5 * x + rng.normal(0, 1.0, n) / np.sqrt(w)
    return x, y, w


def _rows(*cols):
    return [[float(v) for v in r] for r in zip(*cols, strict=True)]


def _body(x, y, w, method="linear", **more):
    return {
        "method": method,
        "target": "y",
        "weight_by": "w",
        "train": {"columns": ["x", "y", "w"], "rows": _rows(x, y, w)},
        **more,
    }


def test_weighted_linear_model_interval_equals_statsmodels_wls(client):
    """Reference: statsmodels ``WLS(y, [1, x], weights=w)``; the query rows carry their own
    weights in the `w` column (``get_prediction(..., weights=w0)``), a row without it weight 1."""
    x, y, w = _table()
    xq = np.array([1.0, 5.0, 9.5])
    w0 = np.array([1.0, 4.0, 0.5])
    doc = _body(
        x,
        y,
        w,
        params={"degree": 1},
        interval={"kind": "model", "level": 0.95},
        query={"columns": ["x", "w"], "rows": _rows(xq, w0)},
    )
    resp = client.post("/v1/predict", json=doc)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    got = resp.get_json()
    ref = sm.WLS(y, sm.add_constant(x), weights=w).fit()
    frame = ref.get_prediction(sm.add_constant(xq), weights=w0).summary_frame(alpha=0.05)
    preds = got["predictions"]
    assert_allclose([p["value"] for p in preds], frame["mean"], rtol=1e-9)
    assert_allclose([p["std_error"] for p in preds], frame["mean_se"], rtol=1e-9)
    assert_allclose([p["lower"] for p in preds], frame["obs_ci_lower"], rtol=1e-9)
    assert_allclose([p["upper"] for p in preds], frame["obs_ci_upper"], rtol=1e-9)
    assert got["fit"]["weight_by"] == "w" and got["fit"]["rows_zero_weight"] == 0
    # The weight column is not a feature.
    assert got["features"] == ["x"]


@pytest.mark.parametrize("method", ["knn", "spline", "additive", "linear"])
def test_zero_weight_rows_are_left_out_and_counted(client, method):
    x, y, w = _table(seed=1)
    w0 = w.copy()
    w0[[2, 11, 30]] = 0.0
    query = {"columns": ["x"], "rows": [[0.5], [4.0], [8.8]]}
    a = client.post("/v1/predict", json=_body(x, y, w0, method, query=query)).get_json()
    keep = w0 > 0
    b = client.post(
        "/v1/predict", json=_body(x[keep], y[keep], w[keep], method, query=query)
    ).get_json()
    assert a["fit"]["rows_zero_weight"] == 3 and b["fit"]["rows_zero_weight"] == 0
    assert a["fit"]["n_train"] == b["fit"]["n_train"] == 57
    assert a["fit"]["rows_dropped"] == 0
    assert a["predictions"] == b["predictions"]
    assert a["tuning"] == b["tuning"]


def test_weights_change_the_fit_and_the_cv_error(client):
    x, y, w = _table(seed=2)
    weighted = client.post("/v1/predict", json=_body(x, y, w, "spline")).get_json()
    plain = _body(x, y, w, "spline")
    del plain["weight_by"]
    plain["features"] = ["x"]
    unweighted = client.post("/v1/predict", json=plain).get_json()
    assert weighted["fit"]["cv_error"] != unweighted["fit"]["cv_error"]
    assert unweighted["fit"]["weight_by"] is None
    # Weights of 2 everywhere are no weights at all for the fit and the CV error.
    twice = client.post("/v1/predict", json=_body(x, y, np.full(60, 2.0), "knn")).get_json()
    once = client.post("/v1/predict", json=_body(x, y, np.ones(60), "knn")).get_json()
    assert twice["fit"]["cv_error"] == pytest.approx(once["fit"]["cv_error"], rel=1e-12)


def test_csv_with_weight_by_in_the_query_string_equals_json(client):
    x, y, w = _table(seed=3)
    csv = "x,y,w\n" + "".join(
        f"{float(a)!r},{float(b)!r},{float(c)!r}\n" for a, b, c in zip(x, y, w, strict=True)
    )
    resp = client.post(
        "/v1/predict?method=linear&target=y&weight_by=w", data=csv, content_type="text/csv"
    )
    assert resp.status_code == 200, resp.get_data(as_text=True)
    as_json = client.post("/v1/predict", json=_body(x, y, w)).get_json()
    assert resp.get_json()["predictions"] == as_json["predictions"]
    parts = client.post(
        "/v1/predict",
        data={
            "train": (io.BytesIO(csv.encode()), "train.csv", "text/csv"),
            "method": "linear",
            "target": "y",
            "weight_by": "w",
        },
        content_type="multipart/form-data",
    )
    assert parts.get_json()["predictions"] == as_json["predictions"]


def test_compare_uses_the_weights_for_every_method(client):
    x, y, w = _table(seed=4)
    doc = _body(x, y, w)
    del doc["method"]
    resp = client.post("/v1/compare", json=doc)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    ranking = {r["method"]: r for r in resp.get_json()["ranking"]}
    single = client.post("/v1/predict", json=_body(x, y, w, "knn")).get_json()
    assert ranking["knn"]["error"] == pytest.approx(single["fit"]["cv_error"], rel=1e-12)


def test_weights_with_an_ordered_scheme(client):
    """window and blocks take the weights as every other scheme does (the pilot that picks the
    default gap is unweighted)."""
    x, y, w = _table(seed=5)
    t = np.arange(60.0)
    doc = _body(x, y, w, "linear", tuning={"scheme": "blocks", "order_by": "t", "gap": 1})
    doc["train"] = {"columns": ["x", "y", "w", "t"], "rows": _rows(x, y, w, t)}
    resp = client.post("/v1/predict", json=doc)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert resp.get_json()["features"] == ["x"]


def test_cell_takes_w(client):
    x, y, w = _table(n=20, seed=6)
    q = "&".join(
        [
            "x=" + ",".join(repr(float(v)) for v in x),
            "y=" + ",".join(repr(float(v)) for v in y),
            "w=" + ",".join(repr(float(v)) for v in w),
            "at=5",
            "method=linear",
        ]
    )
    resp = client.get("/v1/cell?" + q)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    ref = sm.WLS(y, sm.add_constant(x), weights=w).fit()
    assert float(resp.get_data(as_text=True)) == pytest.approx(
        ref.predict([[1.0, 5.0]])[0], rel=1e-10
    )
    bad = q.replace("w=" + repr(float(w[0])), "w=-1")
    doc = problem(client.get("/v1/cell?" + bad), 422)
    assert doc["errors"][0]["parameter"] == "w"
    assert "item 1" in doc["errors"][0]["message"]
    short = problem(client.get("/v1/cell?" + q.replace("w=" + repr(float(w[0])) + ",", "w=")), 422)
    assert short["errors"][0]["parameter"] == "w"
