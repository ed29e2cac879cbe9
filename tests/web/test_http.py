"""HTTP-level problems: 400, 404, 405, 406, 413, 415, 500; every one is problem+json."""

from __future__ import annotations

import http.client
import io
import json
import threading

import pytest
from webhelpers import body, curve, post_without_length, problem
from werkzeug.serving import make_server

from nearwise.web.app import create_app
from nearwise.web.settings import Settings


def test_unknown_path_is_404(client) -> None:
    assert problem(client.get("/v1/nothing"), 404)["code"] == "not_found"


@pytest.mark.parametrize(
    ("verb", "path"), [("get", "/v1/predict"), ("post", "/healthz"), ("delete", "/v1/methods")]
)
def test_wrong_method_is_405_and_keeps_allow(client, verb: str, path: str) -> None:
    resp = getattr(client, verb)(path)
    problem(resp, 405)
    assert resp.headers["Allow"]
    assert verb.upper() not in resp.headers["Allow"].split(", ")


@pytest.mark.parametrize("accept", ["text/html", "application/xml", "application/problem+json"])
def test_unsupported_accept_is_406(client, accept: str) -> None:
    resp = client.post("/v1/predict", json=body(), headers={"Accept": accept})
    assert accept in problem(resp, 406)["detail"]
    problem(client.get("/v1/methods", headers={"Accept": accept}), 406)


@pytest.mark.parametrize(
    "accept", ["*/*", "application/*", "text/csv;q=0.5, application/json", "text/*"]
)
def test_accept_patterns_that_match_are_served(client, accept: str) -> None:
    resp = client.post("/v1/predict", json=body(), headers={"Accept": accept})
    assert resp.status_code == 200
    want = "text/csv" if accept == "text/*" else "application/json"
    assert resp.mimetype == want


@pytest.mark.parametrize(
    ("data", "content_type"),
    [
        (b"{}", "application/xml"),
        (b"{}", ""),
        (b"{}", "text/html"),
        (b"{}", "application/json; charset=latin-1"),
    ],
)
def test_wrong_content_type_is_415(client, data: bytes, content_type: str) -> None:
    problem(client.post("/v1/predict", data=data, content_type=content_type), 415)


@pytest.mark.parametrize(
    "data",
    [b"", b"{", b"[1,]", b"\xff\xfe{}", b'{"a":1} x'],
    ids=["empty", "open", "trailing-comma", "not-utf8", "extra-data"],
)
def test_unreadable_json_is_400(client, data: bytes) -> None:
    problem(client.post("/v1/predict", data=data, content_type="application/json"), 400)


def test_body_not_an_object_is_422(client) -> None:
    doc = problem(client.post("/v1/predict", json=[1, 2]), 422)
    assert doc["errors"][0]["pointer"] == ""


def test_query_string_with_json_body_is_refused(client) -> None:
    doc = problem(client.post("/v1/predict?method=knn", json=body()), 422)
    assert doc["errors"] == [{"parameter": "method", "message": "not read with a JSON body"}]


def small_app(limit: int):
    return create_app(Settings(max_body_bytes=limit)).test_client()


def test_body_over_the_limit_is_413() -> None:
    data = json.dumps(body()).encode()
    resp = small_app(len(data) - 1).post("/v1/predict", data=data, content_type="application/json")
    assert problem(resp, 413)["code"] == "body_too_large"
    resp = small_app(len(data)).post("/v1/predict", data=data, content_type="application/json")
    assert resp.status_code == 200


@pytest.mark.parametrize("extra", [-1, 0])
def test_chunked_body_without_length_is_checked_too(extra: int) -> None:
    """A stream with no Content-Length is read up to the limit, never silently cut."""
    data = json.dumps(body()).encode()
    resp = post_without_length(small_app(len(data) + extra), data)
    if extra < 0:
        problem(resp, 413)
    else:
        assert resp.status_code == 200, resp.get_data(as_text=True)


@pytest.fixture
def small_server():
    """A real HTTP server thread on 127.0.0.1 with a 2000-byte body limit."""
    server = make_server("127.0.0.1", 0, create_app(Settings(max_body_bytes=2000)), threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield server.server_port
    server.shutdown()
    server.server_close()
    thread.join(timeout=10)


def send_chunked(port: int, data: bytes) -> tuple[int, dict]:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    try:
        conn.request(
            "POST",
            "/v1/predict",
            body=iter([data[i : i + 256] for i in range(0, len(data), 256)]),
            headers={"Content-Type": "application/json"},
            encode_chunked=True,
        )
        resp = conn.getresponse()
        return resp.status, json.loads(resp.read())
    finally:
        conn.close()


def test_chunked_over_a_real_socket(small_server: int) -> None:
    small = json.dumps(body(train={"columns": ["x", "y"], "rows": curve(20)})).encode()
    assert len(small) < 2000
    status, doc = send_chunked(small_server, small)
    assert status == 200, doc
    large = json.dumps(body(train={"columns": ["x", "y"], "rows": curve(80)})).encode()
    assert len(large) > 2000
    status, doc = send_chunked(small_server, large)
    assert (status, doc["code"]) == (413, "body_too_large")


def test_multipart_over_the_limit_is_413() -> None:
    resp = small_app(500).post(
        "/v1/predict?method=knn&target=y",
        data={"train": (io.BytesIO(b"x,y\n" + b"1,2\n" * 200), "t.csv")},
    )
    problem(resp, 413)


def test_unexpected_errors_are_500_without_a_trace(app, caplog) -> None:
    @app.get("/boom")
    def boom() -> None:
        raise RuntimeError("secret internals")

    resp = app.test_client().get("/boom")
    doc = problem(resp, 500)
    assert "secret" not in resp.get_data(as_text=True)
    assert doc["code"] == "internal_error"
    assert "secret internals" in caplog.text


def test_api_keys_guard_v1_only() -> None:
    client = create_app(Settings(api_keys=("k1", "k2"))).test_client()
    assert problem(client.get("/v1/methods"), 401)["code"] == "unauthorized"
    problem(client.get("/v1/methods", headers={"Authorization": "Bearer nope"}), 401)
    assert client.get("/v1/methods", headers={"Authorization": "Bearer k2"}).status_code == 200
    assert client.get("/healthz").status_code == 200


def test_the_old_key_header_is_not_read() -> None:
    client = create_app(Settings(api_keys=("k1",))).test_client()
    problem(client.get("/v1/methods", headers={"X-API-Key": "k1"}), 401)


def test_cors_headers_for_allowed_origins_only() -> None:
    client = create_app(Settings(cors_origins=("https://a.example",))).test_client()
    ok = client.get("/healthz", headers={"Origin": "https://a.example"})
    assert ok.headers["Access-Control-Allow-Origin"] == "https://a.example"
    other = client.get("/healthz", headers={"Origin": "https://b.example"})
    assert "Access-Control-Allow-Origin" not in other.headers
    pre = client.options(
        "/v1/predict",
        headers={"Origin": "https://a.example", "Access-Control-Request-Method": "POST"},
    )
    assert "POST" in pre.headers["Access-Control-Allow-Methods"]


def test_health_endpoints(client) -> None:
    assert client.get("/healthz").get_json() == {"status": "ok"}
    assert client.get("/readyz").get_json() == {"status": "ready"}


def test_time_budget_overrun_is_503_with_retry_after() -> None:
    from nearwise.web.app import create_app
    from nearwise.web.settings import Settings

    app = create_app(Settings(time_budget_s=1e-9))
    rows = [[x / 3.0, float(x % 5)] for x in range(24)]
    doc = {"method": "knn", "target": "y", "train": {"columns": ["x", "y"], "rows": rows}}
    resp = app.test_client().post("/v1/predict", json=doc)
    assert resp.status_code == 503
    assert resp.headers["Retry-After"] == "10"
    assert resp.mimetype == "application/problem+json"
    assert resp.get_json()["code"] == "time_budget_exceeded"
