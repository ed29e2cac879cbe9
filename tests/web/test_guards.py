"""API keys (Authorization: Bearer), open endpoints, CORS and the security headers."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from webhelpers import body, problem, serving

from nearwise.web import guards
from nearwise.web.app import create_app
from nearwise.web.routes.docs import DOCS_POLICY
from nearwise.web.settings import Settings

ROOT = Path(__file__).resolve().parents[2]
ORIGIN = "https://app.example"
KEYS = ("first-key", "second-key")


def keyed(**more):
    app = create_app(Settings(api_keys=KEYS, **more))
    app.config["TESTING"] = True
    return app.test_client()


def bearer(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


@pytest.mark.parametrize(
    ("header", "token"),
    [
        ("Bearer abc", "abc"),
        ("bearer abc", "abc"),
        ("BEARER \t abc  ", "abc"),
        ("  Bearer abc", "abc"),
        ("Bearer", None),
        ("Bearer    ", None),
        ("Basic YWJjOmRlZg==", None),
        ("abc", None),
        ("", None),
        (None, None),
    ],
)
def test_bearer_token_is_read_from_the_authorization_header(header, token) -> None:
    assert guards.bearer_token(header) == token


def test_every_key_is_compared_even_after_a_match(monkeypatch) -> None:
    calls: list[tuple[bytes, bytes]] = []
    real = guards.hmac.compare_digest

    def counting(a: bytes, b: bytes) -> bool:
        calls.append((a, b))
        return real(a, b)

    monkeypatch.setattr(guards.hmac, "compare_digest", counting)
    keys = (b"one", b"two", b"three")
    assert guards.key_matches(b"one", keys)
    assert calls == [(b"one", b"one"), (b"one", b"two"), (b"one", b"three")]
    calls.clear()
    assert not guards.key_matches(b"four", keys)
    assert len(calls) == 3


def test_no_key_is_401_with_a_bearer_challenge() -> None:
    resp = keyed().get("/v1/methods")
    doc = problem(resp, 401)
    assert doc["code"] == "unauthorized"
    assert resp.headers["WWW-Authenticate"] == 'Bearer realm="nearwise"'
    assert "Authorization: Bearer" in doc["detail"]


@pytest.mark.parametrize("sent", ["Bearer wrong-key", "Bearer first-key-x", "Bearer first"])
def test_a_wrong_key_is_401_invalid_token(sent: str) -> None:
    resp = keyed().get("/v1/methods", headers={"Authorization": sent})
    assert problem(resp, 401)["code"] == "invalid_api_key"
    assert resp.headers["WWW-Authenticate"] == 'Bearer realm="nearwise", error="invalid_token"'


def test_another_scheme_or_the_old_header_is_no_key() -> None:
    client = keyed()
    for headers in ({"Authorization": "Basic Zmlyc3Qta2V5"}, {"X-API-Key": "first-key"}):
        resp = client.get("/v1/methods", headers=headers)
        assert problem(resp, 401)["code"] == "unauthorized"
        assert "error=" not in resp.headers["WWW-Authenticate"]


@pytest.mark.parametrize(
    "sent",
    ["Bearer first-key", "bearer second-key", "BEARER   second-key  ", "  Bearer\tfirst-key"],
)
def test_the_right_key_passes_whatever_the_case_of_the_scheme_and_the_spaces(sent: str) -> None:
    client = keyed()
    assert client.get("/v1/methods", headers={"Authorization": sent}).status_code == 200
    resp = client.post("/v1/predict", json=body(), headers={"Authorization": sent})
    assert resp.status_code == 200, resp.get_data(as_text=True)


def test_keys_are_not_needed_when_none_is_set(client) -> None:
    assert client.get("/v1/methods").status_code == 200


def test_every_v1_path_needs_a_key_even_one_that_does_not_exist() -> None:
    client = keyed()
    problem(client.get("/v1/no-such-endpoint"), 401)
    problem(client.post("/v1/predict", json=body()), 401)
    problem(client.get("/v1/cell?x=1,2,3&y=1,2,3&at=2"), 401)


@pytest.mark.parametrize("path", ["/healthz", "/readyz", "/metrics"])
def test_service_endpoints_are_open_by_default_and_guarded_when_removed(path: str) -> None:
    assert keyed().get(path).status_code == 200
    closed = keyed(
        open_endpoints=tuple(p for p in ("/healthz", "/readyz", "/metrics") if p != path)
    )
    problem(closed.get(path), 401)
    assert closed.get(path, headers=bearer("second-key")).status_code == 200


@pytest.mark.parametrize("path", ["/", "/docs", "/openapi.json", "/docs/assets/docs-init.js"])
def test_pages_and_the_document_stay_open(path: str) -> None:
    assert keyed(open_endpoints=()).get(path).status_code == 200


def test_cors_is_off_by_default(client) -> None:
    resp = client.get("/healthz", headers={"Origin": ORIGIN})
    assert "Access-Control-Allow-Origin" not in resp.headers
    pre = client.options(
        "/v1/predict", headers={"Origin": ORIGIN, "Access-Control-Request-Method": "POST"}
    )
    assert "Access-Control-Allow-Origin" not in pre.headers


def cors_client(**more):
    return keyed(cors_origins=(ORIGIN, "https://other.example"), **more)


def assert_cors(resp) -> None:
    assert resp.headers["Access-Control-Allow-Origin"] == ORIGIN
    exposed = {h.strip() for h in resp.headers["Access-Control-Expose-Headers"].split(",")}
    assert {"X-Request-ID", "Retry-After", "Nearwise-Warnings"} <= exposed
    assert "Origin" in resp.headers["Vary"]


def test_cors_preflight_needs_no_key() -> None:
    pre = cors_client().options(
        "/v1/predict",
        headers={
            "Origin": ORIGIN,
            "Access-Control-Request-Method": "POST",
            "Access-Control-Request-Headers": "authorization, content-type",
        },
    )
    assert pre.status_code == 200
    assert pre.headers["Access-Control-Allow-Origin"] == ORIGIN
    assert "POST" in pre.headers["Access-Control-Allow-Methods"]
    allowed = pre.headers["Access-Control-Allow-Headers"].lower()
    assert "authorization" in allowed and "content-type" in allowed


def test_cors_headers_on_a_401() -> None:
    resp = cors_client().post("/v1/predict", json=body(), headers={"Origin": ORIGIN})
    problem(resp, 401)
    assert_cors(resp)


def test_cors_headers_on_a_422_404_and_413() -> None:
    client = cors_client(max_body_bytes=300)
    headers = {"Origin": ORIGIN, **bearer("first-key")}
    small = {"method": "nope", "target": "y", "train": {"columns": ["x", "y"], "rows": []}}
    bad = client.post("/v1/predict", json=small, headers=headers)
    problem(bad, 422)
    assert_cors(bad)
    missing = client.get("/no-such-page", headers=headers)
    problem(missing, 404)
    assert_cors(missing)
    big = client.post("/v1/predict", json=body(), headers=headers)
    problem(big, 413)
    assert_cors(big)


def test_cors_answers_allowed_origins_only_and_a_wildcard_allows_any() -> None:
    client = cors_client()
    other = client.get("/healthz", headers={"Origin": "https://evil.example"})
    assert "Access-Control-Allow-Origin" not in other.headers
    assert "Access-Control-Allow-Origin" not in client.get("/healthz").headers
    anyone = create_app(Settings(cors_origins=("*",))).test_client()
    resp = anyone.get("/healthz", headers={"Origin": "https://evil.example"})
    assert resp.headers["Access-Control-Allow-Origin"] == "*"


JSON_POLICY = "default-src 'none'; frame-ancestors 'none'"


def assert_secure(resp, frame: str = "DENY") -> None:
    assert resp.headers["X-Content-Type-Options"] == "nosniff"
    assert resp.headers["Referrer-Policy"] == "no-referrer"
    assert resp.headers["X-Frame-Options"] == frame


def test_security_headers_on_v1_answers_and_errors() -> None:
    client = keyed()
    for resp in (
        client.get("/v1/methods", headers=bearer("first-key")),
        client.get("/v1/methods"),
        client.post("/v1/predict", json=body(method="nope"), headers=bearer("first-key")),
    ):
        assert_secure(resp)
        assert resp.headers["Content-Security-Policy"] == JSON_POLICY
        assert resp.headers["Cache-Control"] == "no-store"


def test_security_headers_on_service_endpoints_without_no_store(client) -> None:
    for path in ("/healthz", "/metrics", "/openapi.json", "/no-such-page"):
        resp = client.get(path)
        assert_secure(resp)
        assert resp.headers["Content-Security-Policy"] == JSON_POLICY
        assert "no-store" not in resp.headers.get("Cache-Control", "")


def test_the_docs_page_keeps_its_own_policy(client) -> None:
    resp = client.get("/docs")
    assert resp.headers["Content-Security-Policy"] == DOCS_POLICY
    assert_secure(resp, frame="SAMEORIGIN")
    home = client.get("/")
    assert "script-src" not in home.headers["Content-Security-Policy"]
    assert_secure(home, frame="SAMEORIGIN")


# The clients in samples/clients/ send NEARWISE_API_KEY as a bearer token.


@pytest.fixture(scope="module")
def keyed_server(tmp_path_factory):
    log = tmp_path_factory.mktemp("keyed") / "serve.log"
    with serving(log, env={"NEARWISE_API_KEYS": "client-key-1"}) as port:
        yield f"http://127.0.0.1:{port}"


def client_command(name: str) -> list[str]:
    if name == "python":
        return [sys.executable, str(ROOT / "samples" / "clients" / "python_client.py")]
    node = __import__("shutil").which("node")
    if node is None:
        pytest.skip("node is not installed: the Node client cannot run here")
    return [node, str(ROOT / "samples" / "clients" / "node_client.mjs")]


@pytest.mark.parametrize("name", ["python", "node"])
def test_clients_send_the_key_as_a_bearer_token(keyed_server: str, name: str) -> None:
    env = {**os.environ, "NEARWISE_URL": keyed_server}
    env.pop("NEARWISE_API_KEY", None)
    run = lambda extra: subprocess.run(  # noqa: E731
        client_command(name),
        capture_output=True,
        text=True,
        timeout=120,
        cwd=ROOT,
        env={**env, **extra},
    )
    refused = run({})
    assert refused.returncode == 1, refused.stderr
    assert "error 401" in refused.stdout
    wrong = run({"NEARWISE_API_KEY": "not-the-key"})
    assert wrong.returncode == 1 and "error 401" in wrong.stdout
    ok = run({"NEARWISE_API_KEY": "client-key-1"})
    assert ok.returncode == 0, ok.stdout + ok.stderr
    assert "method spline" in ok.stdout


def test_no_client_or_document_names_the_old_key_header() -> None:
    for path in ("python_client.py", "node_client.mjs", "r_client.R", "spreadsheet_function.gs"):
        text = (ROOT / "samples" / "clients" / path).read_text(encoding="utf-8")
        assert "NEARWISE_API_KEY" in text and "earer" in text, path
        assert "X-API-Key" not in text, path
    assert "X-API-Key" not in (ROOT / "README.md").read_text(encoding="utf-8")
