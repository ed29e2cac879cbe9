"""Answer edges (issue 12): content codings other than gzip and deflate refused, echoes cut to
a documented length, a relative Location, and numbers at the edges of doubles (tiny features,
range errors before the cost estimate), checked against scikit-learn where it applies."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.neighbors import KNeighborsRegressor
from sklearn.preprocessing import MinMaxScaler, StandardScaler
from webhelpers import body, curve, pointers, problem

from nearwise.core.data import Scaler
from nearwise.core.errors import shown
from nearwise.web.app import create_app
from nearwise.web.settings import Settings

CSV_URL = "/v1/predict?method=knn&target=y"


def client(**limits: Any):
    return create_app(Settings(**limits)).test_client()


# -- content codings


@pytest.mark.parametrize("coding", ["br", "compress", "zstd", "br, identity", "gzip, deflate"])
def test_a_body_with_a_content_coding_not_read_is_415_naming_the_header(coding: str) -> None:
    # gzip and deflate are read (tests/web/test_compression.py); other codings, or two at once
    resp = client().post("/v1/predict", json=body(), headers={"Content-Encoding": coding})
    doc = problem(resp, 415)
    assert doc["code"] == "unsupported_content_encoding"
    assert "Content-Encoding" in doc["detail"] and coding.split(",")[0] in doc["detail"]
    assert resp.headers["Accept-Encoding"] == "gzip, deflate, identity"


def test_identity_is_no_coding_at_all() -> None:
    resp = client().post("/v1/predict", json=body(), headers={"Content-Encoding": "identity"})
    assert resp.status_code == 200, resp.get_data(as_text=True)


# -- echoes are cut to 80 characters with their length stated

MIB = 2**20
CUT = "… (1048576 characters)"


def test_an_echo_is_cut_past_80_characters() -> None:
    assert shown("e" * 80) == "e" * 80
    assert shown("e" * 81) == "e" * 80 + "… (81 characters)"
    assert shown("e" * 81, quoted=True) == "'" + "e" * 80 + "…' (81 characters)"


def small_answer(resp: Any, status: int) -> dict[str, Any]:
    assert len(resp.get_data()) < 2_000, len(resp.get_data())
    return problem(resp, status)


def test_a_1_mib_field_name_is_named_cut_in_a_small_answer() -> None:
    doc = small_answer(client().post("/v1/predict", json=body(**{"f" * MIB: 1})), 422)
    assert pointers(doc) == ["/" + "f" * 80 + CUT]
    assert "f" * 80 + CUT in doc["detail"]


def test_a_1_mib_column_name_is_refused_at_its_place_in_a_small_answer() -> None:
    train = {"columns": ["x", "c" * MIB], "rows": [[1.0, 2.0]]}
    doc = small_answer(client().post("/v1/predict", json=body(train=train)), 422)
    assert pointers(doc) == ["/train/columns/1"]


def test_long_csv_column_names_are_echoed_cut() -> None:
    name = "n" * 100_000  # the csv reader's longest cell is 131,072 characters
    data = f"{name},{name}\n1,2\n".encode()
    resp = client().post(CSV_URL, data=data, content_type="text/csv")
    doc = small_answer(resp, 422)
    assert doc["errors"][0]["column"] == "n" * 80 + "… (100000 characters)"
    assert "n" * 80 + "… (100000 characters)" in doc["detail"]


@pytest.mark.parametrize(
    "request_",
    [
        lambda c: c.post("/v1/predict", json=body(method="m" * MIB)),
        lambda c: c.post("/v1/predict", json=body(params={"weights": "w" * MIB})),
        lambda c: c.post("/v1/predict", json=body(params={"p" * MIB: 1})),
        lambda c: c.post("/v1/predict", json=body(target="t" * MIB)),
        lambda c: c.post(
            "/v1/locality", json={"train": {"columns": ["x"], "rows": [[1], [2], ["z" * MIB]]}}
        ),
        lambda c: c.get("/v1/cell?" + "q" * 100_000 + "=1&x=1&y=1&at=1"),
        lambda c: c.get("/v1/cell?x=1,2&y=1,2&at=1&part=" + "p" * 100_000),
        lambda c: c.post("/v1/predict", json=body(), headers={"Accept": "a/" + "b" * 100_000}),
        lambda c: c.post("/v1/predict", data=b"{}", content_type="application/" + "j" * 100_000),
    ],
    ids=[
        "method",
        "param-value",
        "param-name",
        "target",
        "locality-cell",
        "cell-name",
        "cell-part",
        "accept",
        "ctype",
    ],
)
def test_every_echo_is_bounded(request_: Callable[[Any], Any]) -> None:
    resp = request_(client())
    assert resp.status_code in (406, 415, 422), resp.status_code
    small_answer(resp, resp.status_code)


def test_a_message_echoing_past_the_helper_is_cut_by_the_backstop() -> None:
    """An echo no message cut (a date label of 1 MiB in tuning.order_by) still leaves a small
    answer: every detail is cut at 4,000 characters."""
    rows = [[x, y, f"2024-01-{i + 1:02d}"] for i, (x, y) in enumerate(curve(20))]
    rows[5][2] = "d" * MIB
    train = {"columns": ["x", "y", "t"], "rows": rows}
    resp = client().post("/v1/predict", json=body(train=train, tuning={"order_by": "t"}))
    assert len(resp.get_data()) < 4_500, len(resp.get_data())
    assert problem(resp, 422)["detail"].endswith("characters)")


# -- a redirect's Location is a path on this host, whatever Host says


@pytest.mark.parametrize(
    ("method", "path", "location"),
    [
        ("POST", "/v1//predict", "/v1/predict"),
        ("GET", "/v1//methods?format=json", "/v1/methods?format=json"),
        ("GET", "/v1//cell?x=1,2&y=3,4&at=1", "/v1/cell?x=1,2&y=3,4&at=1"),
    ],
)
def test_the_location_of_a_redirect_is_relative(method: str, path: str, location: str) -> None:
    resp = client().open(path, method=method, headers={"Host": "evil.example"})
    assert resp.status_code == 308
    assert resp.headers["Location"] == location
    assert b"evil" not in resp.get_data()


# -- numbers at the edges of doubles

TWO = 2.0**-1000  # about 9.3e-302; multiplying by a power of two is exact


def test_a_tiny_column_is_scaled_as_scikit_learn_scales_it_in_other_units() -> None:
    rng = np.random.default_rng(3)
    X = rng.normal(size=(50, 3)) * [1.0, 1.0, 5.0] + [0.0, 2.0, -1.0]
    tiny = X * [1.0, TWO, TWO]
    for kind, reference in (("standard", StandardScaler()), ("range", MinMaxScaler())):
        ours = Scaler.fit(tiny, kind).transform(tiny)
        assert_allclose(ours, reference.fit_transform(X), rtol=1e-12, atol=1e-12)


def test_knn_on_a_tiny_feature_equals_scikit_learn_on_it_in_other_units() -> None:
    rng = np.random.default_rng(4)
    X, Xq = rng.uniform(0, 1, (80, 2)), rng.uniform(0, 1, (6, 2))
    y = 10.0 * (X[:, 1] > 0.5) + X[:, 0]
    doc = {
        "method": "knn",
        "target": "y",
        "params": {"k": 5},
        "train": {"columns": ["a", "b", "y"], "rows": np.column_stack([X * [1, TWO], y]).tolist()},
        "query": {"columns": ["a", "b"], "rows": (Xq * [1, TWO]).tolist()},
    }
    resp = client().post("/v1/predict", json=doc)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    ours = [p["value"] for p in resp.get_json()["predictions"]]
    scaler = StandardScaler().fit(X)
    reference = KNeighborsRegressor(5).fit(scaler.transform(X), y).predict(scaler.transform(Xq))
    assert_allclose(ours, reference, rtol=1e-12)


@pytest.mark.parametrize(("method", "params"), [("knn", {}), ("spline", {}), ("linear", {})])
def test_a_feature_with_a_range_of_1e_300_separates_rows(method: str, params: dict) -> None:
    """y follows only the tiny feature b: the predictions at its two ends differ as y does
    (they were both the mean of y, or a refusal naming collinear features)."""
    rng = np.random.default_rng(5)
    a, b = rng.uniform(0, 1, 60), rng.uniform(0, 1, 60)
    y = np.where(b > 0.5, 10.0, 0.0) + 0.01 * a
    rows = np.column_stack([a, b * 1e-300, y]).tolist()
    query = {"columns": ["a", "b"], "rows": [[0.5, 0.95e-300], [0.5, 0.05e-300]]}
    doc = body(method, params=params, train={"columns": ["a", "b", "y"], "rows": rows})
    resp = client().post("/v1/predict", json={**doc, "query": query})
    assert resp.status_code == 200, resp.get_data(as_text=True)
    high, low = (p["value"] for p in resp.get_json()["predictions"])
    assert high - low > 7, (high, low)


def test_a_query_far_outside_a_tiny_column_is_answered() -> None:
    rows = [[float(i), i * 1e-300, float(i % 3)] for i in range(30)]
    query = {"columns": ["a", "b"], "rows": [[3.0, 1.0], [3.0, -1e100]]}
    doc = body(train={"columns": ["a", "b", "y"], "rows": rows}, query=query)
    resp = client().post("/v1/predict", json=doc)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert all(np.isfinite(p["value"]) for p in resp.get_json()["predictions"])


def test_range_errors_come_before_the_cost_estimate() -> None:
    c = client(max_cost_s=1e-9)  # every fit is over this limit
    compare = {"methods": ["knn", "linear"], "target": "y", "train": body()["train"]}
    for path, doc, where in (
        ("/v1/predict", body(params={"k": 2**70}), "/params/k"),
        ("/v1/predict", body(grid={"k": [1, 2**70]}), "/grid/k/1"),
        ("/v1/predict", body(params={"k": 10**6}), "/params/k"),
        ("/v1/compare", {**compare, "params": {"k": 2**70}}, "/params/k"),
    ):
        refused = problem(c.post(path, json=doc), 422)
        assert refused["code"] == "invalid_value" and pointers(refused) == [where], refused
    assert problem(c.post("/v1/predict", json=body(params={"k": 3})), 422)["code"] == "over_limit"
