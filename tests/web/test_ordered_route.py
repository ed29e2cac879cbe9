"""`tuning.order_by`, `window` and `blocks` over HTTP: answers, order invariance, refusals."""

from __future__ import annotations

import json

import numpy as np
import pytest


def _series(n: int = 120, seed: int = 0, dates: bool = False) -> dict:
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    e = np.zeros(n)
    for i in range(1, n):
        e[i] = 0.7 * e[i - 1] + rng.normal(0, 0.3)
    y = np.sin(x) + e
    if dates:
        t = [f"2026-{1 + i // 28:02d}-{1 + i % 28:02d}" for i in range(n)]
    else:
        t = [float(i) for i in range(n)]
    rows = [[ti, float(a), float(b)] for ti, a, b in zip(t, x, y, strict=True)]
    return {"columns": ["day", "x", "y"], "rows": rows}


def _body(method: str, scheme: str | None, train: dict, **tuning) -> dict:
    spec = {"order_by": "day", **tuning}
    if scheme:
        spec["scheme"] = scheme
    return {
        "method": method,
        "target": "y",
        "train": train,
        "query": {"columns": ["x"], "rows": [[1.0], [4.5], [9.0]]},
        "tuning": spec,
    }


@pytest.mark.parametrize("method", ["knn", "spline", "linear", "additive"])
@pytest.mark.parametrize("scheme", ["window", "blocks", None])
def test_shuffling_the_rows_sent_changes_no_byte(client, method, scheme) -> None:
    train = _series(dates=True)
    first = client.post("/v1/predict", json=_body(method, scheme, train))
    assert first.status_code == 200, first.get_json()
    answer = first.get_json()
    assert answer["features"] == ["x"]  # order_by is not a feature by default
    assert answer["tuning"]["order_by"] == "day"
    assert answer["tuning"]["dependence"]["order"] == "order_by"
    if scheme:
        assert answer["tuning"]["gap_source"] == "data" and answer["tuning"]["gap"] >= 0
    perm = np.random.default_rng(1).permutation(len(train["rows"]))
    shuffled = {**train, "rows": [train["rows"][i] for i in perm]}
    again = client.post("/v1/predict", json=_body(method, scheme, shuffled))
    assert again.get_data() == first.get_data()


def test_window_answer_describes_its_intervals(client) -> None:
    answer = client.post("/v1/predict", json=_body("spline", "window", _series())).get_json()
    assert answer["interval"]["construction"] == "jackknife"
    assert answer["tuning"]["gap_rule"].startswith("pilot estimate")
    assert "no finite-sample guarantee" in answer["interval"]["guarantee"]
    assert answer["tuning"]["folds"] is None
    blocks = client.post("/v1/predict", json=_body("knn", "blocks", _series(), gap=2)).get_json()
    assert blocks["interval"]["construction"] == "cv_plus"
    assert blocks["tuning"]["gap"] == 2 and blocks["tuning"]["gap_source"] == "caller"
    assert blocks["tuning"]["folds"] == 5
    assert "new periods" in blocks["interval"]["guarantee"]


def test_serial_dependence_without_order_by_and_not_with_window(client) -> None:
    train = _series(200, 2)
    body = {"method": "knn", "target": "y", "features": ["x"], "train": train}
    plain = client.post("/v1/predict", json=body).get_json()
    codes = [w["code"] for w in plain["warnings"]]
    assert "serial_dependence" in codes
    message = next(w["message"] for w in plain["warnings"] if w["code"] == "serial_dependence")
    assert "tuning.order_by" in message and "window" in message and "blocks" in message
    assert plain["tuning"]["dependence"]["order"] == "arrival"
    windowed = client.post(
        "/v1/predict", json={**body, "tuning": {"order_by": "day", "scheme": "window"}}
    ).get_json()
    assert "serial_dependence" not in [w["code"] for w in windowed["warnings"]]
    kfold = client.post("/v1/predict", json={**body, "tuning": {"order_by": "day"}}).get_json()
    assert "serial_dependence" in [w["code"] for w in kfold["warnings"]]


def test_compare_uses_one_scheme_and_gap_for_every_method(client) -> None:
    body = _body("knn", "window", _series())
    del body["method"]
    body["methods"] = ["knn", "spline", "linear"]
    answer = client.post("/v1/compare", json=body).get_json()
    gaps = {m: p["gap"] for m, p in answer["paths"].items()}
    assert len(set(gaps.values())) == 1 and answer["tuning"]["gap"] == gaps["knn"]
    assert all(p["scheme"] == "window" for p in answer["paths"].values())
    assert all(p["dependence"]["order"] == "order_by" for p in answer["paths"].values())


def test_csv_with_iso_date_times(client) -> None:
    rng = np.random.default_rng(3)
    lines = ["time,x,y"] + [
        f"2026-01-{1 + i // 24:02d}T{i % 24:02d}:00:00Z,{rng.uniform():.4f},{rng.normal():.4f}"
        for i in range(72)
    ]
    resp = client.post(
        "/v1/predict?method=knn&target=y&tuning.order_by=time&tuning.scheme=blocks&tuning.folds=3",
        data="\n".join(lines) + "\n",
        headers={"Content-Type": "text/csv"},
    )
    assert resp.status_code == 200, resp.get_json()
    assert resp.get_json()["tuning"]["scheme"] == "blocks"


def _problem(client, body) -> tuple[int, dict]:
    resp = client.post("/v1/predict", json=body)
    assert resp.content_type == "application/problem+json"
    return resp.status_code, resp.get_json()


def test_refusals_point_at_the_field_or_cell(client) -> None:
    train = _series(40, dates=True)
    status, p = _problem(client, _body("knn", "window", train, order_by="when"))
    assert status == 422 and p["errors"][0]["pointer"] == "/tuning/order_by"
    bad = json.loads(json.dumps(train))
    bad["rows"][7][0] = "07/03/2026"
    status, p = _problem(client, _body("knn", "window", bad))
    assert status == 422 and p["errors"][0]["pointer"] == "/train/rows/7/0"
    assert "ISO 8601" in p["detail"]
    mixed = json.loads(json.dumps(train))
    mixed["rows"][5][0] = "2026-01-06T00:00:00"
    status, p = _problem(client, _body("knn", "blocks", mixed))
    assert status == 422 and p["errors"][0]["pointer"] == "/train/rows/5/0"
    assert "mixes forms" in p["detail"]
    status, p = _problem(client, _body("knn", "window", train, gap=20))
    assert status == 422 and p["errors"][0]["pointer"] == "/tuning/gap"
    assert p["code"] == "too_few_rows"
    body = _body("knn", "window", train)
    del body["tuning"]["order_by"]
    status, p = _problem(client, body)
    assert status == 422 and p["errors"][0]["pointer"] == "/tuning/order_by"
    status, p = _problem(
        client, {**_body("spline", "window", train), "interval": {"kind": "model"}}
    )
    assert status == 422 and p["errors"][0]["pointer"] == "/interval/kind"
    status, p = _problem(client, _body("knn", "kfold", train, gap=3))
    assert status == 422 and p["errors"][0]["pointer"] == "/tuning/gap"
    status, p = _problem(client, _body("knn", "window", train, gap=-1))
    assert status == 422 and p["errors"][0]["pointer"] == "/tuning/gap"


def _cell_lists(n: int = 60) -> tuple[str, str, str]:
    rng = np.random.default_rng(4)
    x = rng.uniform(0, 10, n)
    e = np.zeros(n)
    for i in range(1, n):
        e[i] = 0.7 * e[i - 1] + rng.normal(0, 0.3)
    y = np.sin(x) + e

    def text(v):
        return ",".join(f"{a:.4f}" for a in v)

    return text(x), text(y), ",".join(str(i) for i in range(n))


def test_cell_takes_t_and_answers_like_predict(client) -> None:
    x, y, t = _cell_lists()
    resp = client.get(f"/v1/cell?x={x}&y={y}&t={t}&at=2.5&scheme=window&gap=2")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    rows = [
        [float(i), float(a), float(b)]
        for i, a, b in zip(t.split(","), x.split(","), y.split(","), strict=True)
    ]
    body = {
        "method": "spline",
        "target": "y",
        "features": ["x"],
        "train": {"columns": ["t", "x", "y"], "rows": rows},
        "query": {"columns": ["x"], "rows": [[2.5]]},
        "tuning": {"order_by": "t", "scheme": "window", "gap": 2},
    }
    answer = client.post("/v1/predict", json=body).get_json()
    assert float(resp.get_data(as_text=True)) == answer["predictions"][0]["value"]


def test_cell_refusals_name_t(client) -> None:
    x, y, t = _cell_lists()
    resp = client.get(f"/v1/cell?x={x}&y={y}&t=1,2&at=2.5")
    assert resp.status_code == 422
    assert resp.get_json()["errors"][0]["parameter"] == "t"
    resp = client.get(f"/v1/cell?x={x}&y={y}&at=2.5&scheme=window")
    assert resp.status_code == 422
    assert resp.get_json()["errors"][0]["parameter"] == "t"
    missing = t.replace(",5,", ",,", 1)
    resp = client.get(f"/v1/cell?x={x}&y={y}&t={missing}&at=2.5")
    assert resp.status_code == 422
    assert resp.get_json()["errors"][0] == {
        "parameter": "t",
        "message": "item 6: missing order_by value",
    }
    resp = client.get(f"/v1/cell?x={x}&y={y}&t={t}&at=2.5&scheme=window&gap=-1")
    assert resp.status_code == 422 and resp.get_json()["errors"][0]["parameter"] == "gap"


def test_refusals_at_the_edges_say_what_to_do(client) -> None:
    train = _series(30, dates=True)
    same = json.loads(json.dumps(train))
    for row in same["rows"]:
        row[0] = "2026-01-01"
    status, p = _problem(client, _body("knn", "window", same))
    assert status == 422 and p["errors"][0]["pointer"] == "/tuning/order_by"
    assert "at least 2 distinct" in p["detail"]
    status, p = _problem(client, {**_body("knn", "window", train), "features": ["x", "day"]})
    assert status == 422 and p["errors"][0]["pointer"] == "/features/1"
    assert "holds dates" in p["detail"]
    numbers = _series(30)
    status, p = _problem(client, {**_body("knn", "window", numbers, gap=3), "params": {"k": 24}})
    assert status == 422 and "windows of 3 steps" in p["detail"]
    body = {**_body("knn", "window", numbers), "features": ["x", "day"]}
    body["query"] = {"columns": ["x", "day"], "rows": [[1.0, 10.0]]}
    ok = client.post("/v1/predict", json=body)
    assert ok.status_code == 200 and ok.get_json()["features"] == ["x", "day"]


def test_order_by_is_not_the_target_and_auto_leaves_out_bands_it_cannot_give(client) -> None:
    train = _series(60)
    status, p = _problem(client, _body("knn", "window", train, order_by="y"))
    assert status == 422 and p["errors"][0]["pointer"] == "/tuning/order_by"
    body = {**_body("auto", "window", train), "interval": {"kind": "model"}}
    answer = client.post("/v1/predict", json=body).get_json()
    assert answer["method"] == "linear"  # the one method with a model interval here
    skipped = [w["message"] for w in answer["warnings"] if w["code"] == "method_skipped"]
    assert any(m.startswith("spline") for m in skipped)
    assert any(m.startswith("additive") for m in skipped)
