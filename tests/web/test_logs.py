"""Request ids and JSON log lines, in one process and under gunicorn."""

from __future__ import annotations

import http.client
import io
import json
import logging
import re
from pathlib import Path

import pytest
from webhelpers import body, problem, serving

from nearwise import jsonlog
from nearwise.web.app import create_app
from nearwise.web.logs import valid_request_id
from nearwise.web.settings import Settings

HEX_ID = re.compile(r"[0-9a-f]{32}")
BASE_FIELDS = {"time", "level", "logger", "message", "request_id"}
ACCESS = {"method", "route", "path", "status", "duration_ms", "bytes"}


@pytest.mark.parametrize(
    ("text", "ok"),
    [
        ("abc-123", True),
        ("a" * 128, True),
        ("with space and ~!", True),
        ("a" * 129, False),
        ("", False),
        (None, False),
        ("caf\u00e9", False),
        ("tab\there", False),
        ("new\nline", False),
        ("\x7f", False),
    ],
)
def test_which_incoming_ids_are_kept(text, ok) -> None:
    assert valid_request_id(text) is ok


def test_the_request_id_round_trips(client) -> None:
    resp = client.get("/healthz", headers={"X-Request-ID": "client-chosen-42"})
    assert resp.headers["X-Request-ID"] == "client-chosen-42"


def test_a_missing_or_invalid_id_gets_a_new_one(client) -> None:
    a = client.get("/healthz").headers["X-Request-ID"]
    b = client.get("/healthz").headers["X-Request-ID"]
    assert HEX_ID.fullmatch(a) and HEX_ID.fullmatch(b) and a != b
    for bad in ("x" * 129, "caf\u00e9".encode().decode("latin-1"), ""):
        got = client.get("/healthz", headers={"X-Request-ID": bad}).headers["X-Request-ID"]
        assert HEX_ID.fullmatch(got), bad


def test_every_error_answer_carries_the_id() -> None:
    client = create_app(Settings(api_keys=("k",))).test_client()
    sent = {"X-Request-ID": "err-1"}
    key = {"Authorization": "Bearer k", **sent}
    answers = [
        (client.get("/v1/methods", headers=sent), 401),
        (client.get("/nowhere", headers=sent), 404),
        (client.delete("/healthz", headers=sent), 405),
        (client.post("/v1/predict", json=body(method="nope"), headers=key), 422),
        (client.post("/v1/predict", data=b"{", content_type="application/json", headers=key), 400),
    ]
    for resp, status in answers:
        problem(resp, status)
        assert resp.headers.getlist("X-Request-ID") == ["err-1"], status


@pytest.fixture
def captured():
    """The ``nearwise`` loggers' JSON lines, written to a buffer; the logger restored after."""
    logger = logging.getLogger("nearwise")
    saved = (list(logger.handlers), logger.level, logger.propagate)
    stream = io.StringIO()
    jsonlog.configure("INFO", stream)
    yield stream
    logger.handlers[:] = saved[0]
    logger.setLevel(saved[1])
    logger.propagate = saved[2]


def lines(text: str) -> list[dict]:
    return [json.loads(line) for line in text.splitlines() if line.strip()]


def test_app_log_lines_are_json_with_the_request_id(app, captured) -> None:
    @app.get("/boom")
    def boom() -> None:
        raise RuntimeError("internal detail")

    resp = app.test_client().get("/boom", headers={"X-Request-ID": "boom-7"})
    assert resp.status_code == 500 and resp.headers["X-Request-ID"] == "boom-7"
    (line,) = lines(captured.getvalue())
    assert BASE_FIELDS <= set(line)
    assert (line["level"], line["logger"], line["request_id"]) == (
        "ERROR",
        "nearwise.web",
        "boom-7",
    )
    assert "RuntimeError: internal detail" in line["exception"]


def test_the_level_setting_filters_records(captured) -> None:
    jsonlog.configure("WARNING", captured)
    log = logging.getLogger("nearwise.test")
    log.info("not shown")
    log.warning("shown")
    assert [line["message"] for line in lines(captured.getvalue())] == ["shown"]
    assert lines(captured.getvalue())[0]["request_id"] is None


def test_configure_twice_keeps_one_handler(captured) -> None:
    jsonlog.configure("INFO", captured)
    logging.getLogger("nearwise.test").info("once")
    assert len(lines(captured.getvalue())) == 1


# Under gunicorn: the whole standard output is JSON lines.

KEY = "sk-live-do-not-log-9d8c"
WRONG = "sk-wrong-do-not-log-1f2e"
MARKER = "marker_column_do_not_log"


def send(port: int, method: str, path: str, headers: dict, data: bytes | None = None):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    try:
        conn.request(method, path, body=data, headers=headers)
        resp = conn.getresponse()
        resp.read()
        return resp.status, resp.getheader("X-Request-ID")
    finally:
        conn.close()


def server_lines(log: Path) -> list[dict]:
    out = []
    for raw in log.read_text(encoding="utf-8").splitlines():
        if raw.strip():
            out.append(json.loads(raw))  # every line is JSON: this fails on any other
    return out


def wait_for_access(log: Path, request_id: str) -> dict:
    import time

    deadline = time.monotonic() + 10
    while time.monotonic() < deadline:
        for line in server_lines(log):
            if line["logger"] == "gunicorn.access" and line["request_id"] == request_id:
                return line
        time.sleep(0.05)
    raise AssertionError(f"no access line for {request_id}")


def test_gunicorn_writes_json_access_lines_and_never_keys_or_bodies(tmp_path: Path) -> None:
    log = tmp_path / "serve.log"
    doc = body()
    doc["train"]["columns"] = ["x", MARKER]
    doc["target"] = MARKER
    data = json.dumps(doc).encode()
    json_type = {"Content-Type": "application/json"}
    with serving(log, env={"NEARWISE_API_KEYS": KEY}) as port:
        ok = send(port, "POST", "/v1/predict", {**json_type, "Authorization": f"Bearer {KEY}",
                  "X-Request-ID": "fit-1"}, data)  # fmt: skip
        wrong = send(port, "POST", "/v1/predict", {**json_type, "Authorization": f"Bearer {WRONG}",
                     "X-Request-ID": "fit-2"}, data)  # fmt: skip
        # an unknown parameter (422) holding the key: query strings are not logged either
        cell = send(port, "GET", f"/v1/cell?x=1,2,3,4,5,6&y=1,2,3,4,5,7&at=2&note={KEY}",
                    {"Authorization": f"Bearer {KEY}"})  # fmt: skip
        missing = send(port, "GET", "/no/such/page", {})
        assert (ok[0], wrong[0], cell[0], missing[0]) == (200, 401, 422, 404)
        fit = wait_for_access(log, "fit-1")
        refused = wait_for_access(log, "fit-2")
        by_cell = wait_for_access(log, cell[1])
        lost = wait_for_access(log, missing[1])

    all_lines = server_lines(log)
    for line in all_lines:
        assert BASE_FIELDS <= set(line), line
    assert fit["method"] == "POST" and fit["route"] == "/v1/predict" and fit["status"] == 200
    assert ACCESS <= set(fit)
    assert fit["bytes"] > 1000 and fit["duration_ms"] > 0
    assert refused["status"] == 401 and refused["route"] == "/v1/predict"
    assert (by_cell["path"], by_cell["route"], by_cell["status"]) == ("/v1/cell", "/v1/cell", 422)
    assert lost["route"] is None and lost["path"] == "/no/such/page" and lost["status"] == 404
    assert HEX_ID.fullmatch(lost["request_id"])
    started = [line for line in all_lines if line["logger"] == "gunicorn.error"]
    assert any("Listening at" in line["message"] for line in started)
    text = log.read_text(encoding="utf-8")
    assert KEY not in text and WRONG not in text and MARKER not in text


def test_log_level_warning_hides_gunicorn_info_lines(tmp_path: Path) -> None:
    log = tmp_path / "serve.log"
    with serving(log, env={"NEARWISE_LOG_LEVEL": "WARNING"}) as port:
        _, rid = send(port, "GET", "/healthz", {})
        access = wait_for_access(log, rid)
    assert access["status"] == 200
    levels = {(line["logger"], line["level"]) for line in server_lines(log)}
    assert ("gunicorn.error", "INFO") not in levels
