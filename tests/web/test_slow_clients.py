"""Slow clients hold no thread (real ``nearwise serve``, one worker with four threads).

The worker (``nearwise.web.worker``) reads heads and bodies in its main loop and hands only
whole requests to its threads, so 200 slow-header or 50 slow-body connections leave /healthz
and a normal predict answering at once; each slow connection gets a 408 problem+json at its
deadline. The deadlines are 3 s here (``NEARWISE_HEADER_TIMEOUT_S``, ``NEARWISE_BODY_TIMEOUT_S``).
With gunicorn's own gthread worker the same four threads would block on the first four slow
connections and every probe would time out.
"""

from __future__ import annotations

import http.client
import json
import resource
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
from webhelpers import body, request, serving

DEADLINE_S = 3.0
MAX_BODY = 20_000
THREADS = 4
HEALTH_GOAL_S = 0.100  # the liveness goal
PROBE_TIMEOUT_S = 1.0  # Kubernetes' default probe timeout
SECRET = "QUERYMARK7731"
SMALL = json.dumps(body()).encode()
PROBLEM_KEYS = {"type", "title", "status", "detail", "code", "errors"}


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[int, Path]]:
    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    if soft < 1024:  # 250 and more client sockets in this process
        resource.setrlimit(resource.RLIMIT_NOFILE, (min(1024, hard), hard))
    log = tmp_path_factory.mktemp("slow") / "serve.log"
    env = {
        "NEARWISE_HEADER_TIMEOUT_S": str(DEADLINE_S),
        "NEARWISE_BODY_TIMEOUT_S": str(DEADLINE_S),
        "NEARWISE_MAX_BODY_BYTES": str(MAX_BODY),
        "NEARWISE_LOG_LEVEL": "DEBUG",  # so that no debug line leaks a query string either
    }
    with serving(log, env, workers=1, threads=THREADS) as port:
        yield port, log


# ---- helpers ----


def parse(raw: bytes) -> tuple[int, dict[str, str], bytes]:
    head, _, rest = raw.partition(b"\r\n\r\n")
    lines = head.decode("latin-1").split("\r\n")
    fields = dict(line.split(": ", 1) for line in lines[1:])
    return int(lines[0].split()[1]), {k.lower(): v for k, v in fields.items()}, rest


def problem(raw: bytes, status: int) -> dict:
    got, headers, rest = parse(raw)
    assert got == status, raw[:300]
    assert headers["content-type"] == "application/problem+json", headers
    assert headers["connection"] == "close"
    doc = json.loads(rest[: int(headers["content-length"])])
    assert set(doc) == PROBLEM_KEYS and doc["status"] == status, doc
    return doc


def exchange(port: int, data: bytes, timeout: float = 5.0) -> bytes:
    """Send ``data`` on a fresh connection and read until the server closes it."""
    with socket.create_connection(("127.0.0.1", port), timeout=timeout) as s:
        s.sendall(data)
        return read_all(s)


def read_all(s: socket.socket) -> bytes:
    out = b""
    try:
        while chunk := s.recv(65536):
            out += chunk
    except (ConnectionResetError, TimeoutError):
        pass
    return out


def one_response(s: socket.socket) -> tuple[int, bytes]:
    resp = http.client.HTTPResponse(s)
    resp.begin()
    return resp.status, resp.read()


def probe(port: int, seconds: float, every: float = 0.1) -> list[float]:
    """/healthz on a fresh connection every ``every`` s; a failed probe counts as infinite."""
    out: list[float] = []
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        t0 = time.perf_counter()
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=PROBE_TIMEOUT_S)
        try:
            conn.request("GET", "/healthz")
            resp = conn.getresponse()
            ok = resp.status == 200 and resp.read() == b'{"status":"ok"}'
        except OSError:
            ok = False
        finally:
            conn.close()
        out.append(time.perf_counter() - t0 if ok else float("inf"))
        time.sleep(every)
    return out


def healthy(latencies: list[float]) -> None:
    # On a quiet machine each probe takes 1-5 ms. A shared test machine may delay one past the
    # goal: 19 in 20 must meet it, and none may come near the probe timeout.
    assert len(latencies) >= 10, latencies
    slow = [t for t in latencies if t >= HEALTH_GOAL_S]
    assert len(slow) <= len(latencies) // 20, sorted(latencies)[-5:]
    assert max(latencies) < PROBE_TIMEOUT_S / 2, sorted(latencies)[-5:]


class Trickle:
    """``n`` connections that send ``first`` at once, then one byte of ``rest`` each every
    ``every`` seconds until :meth:`stop`."""

    def __init__(self, port: int, n: int, first: bytes, rest: bytes, every: float) -> None:
        self.socks = [socket.create_connection(("127.0.0.1", port), timeout=10) for _ in range(n)]
        for s in self.socks:
            s.sendall(first)
        self.started = time.monotonic()
        self.rest, self.every = rest, every
        self.halt = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        for i in range(len(self.rest)):
            if self.halt.wait(self.every):
                return
            for s in self.socks:
                s.sendall(self.rest[i : i + 1])

    def stop(self) -> None:
        self.halt.set()
        self.thread.join(10)

    def answers(self) -> list[tuple[bytes, float]]:
        """What each connection got before the server closed it, and when (from the start);
        all within the deadline and 5 s more."""
        out = []
        end = self.started + DEADLINE_S + 5
        for s in self.socks:
            s.settimeout(max(0.1, end - time.monotonic()))
            data = read_all(s)
            out.append((data, time.monotonic() - self.started))
            s.close()
        return out


def attacked(port: int, trickle: Trickle, seconds: float) -> list[float]:
    """Probe /healthz while ``trickle`` runs, and check a normal predict is answered."""
    latencies = probe(port, seconds)
    status, data = request(port, "POST", "/v1/predict", SMALL)
    assert status == 200, data[:300]
    trickle.stop()  # before the deadline: the server, not the client, ends each connection
    return latencies


def timed_out(answers: list[tuple[bytes, float]], where: str) -> None:
    for raw, when in answers:
        doc = problem(raw, 408)
        assert doc["code"] == "request_timeout" and where in doc["detail"], doc
        # the deadline is checked every 0.2 s inside a poll of at most 1 s
        assert DEADLINE_S - 0.2 < when < DEADLINE_S + 2.5, when


# ---- slow senders ----


def test_200_slow_header_connections_hold_no_thread(server) -> None:
    port, _ = server
    head = b"GET /healthz HTTP/1.1\r\nHost: x\r\nX-Pad: " + b"a" * 64 + b"\r\n\r\n"
    trickle = Trickle(port, 200, head[:1], head[1:], every=0.5)
    latencies = attacked(port, trickle, seconds=DEADLINE_S - 0.6)
    healthy(latencies)
    timed_out(trickle.answers(), "head")


def test_50_slow_body_connections_hold_no_thread(server) -> None:
    port, _ = server
    head = (
        b"POST /v1/predict HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
        b"Content-Length: 1000\r\n\r\n"
    )
    trickle = Trickle(port, 50, head + SMALL[:1], SMALL[1:1000], every=0.5)
    latencies = attacked(port, trickle, seconds=DEADLINE_S - 0.6)
    healthy(latencies)
    timed_out(trickle.answers(), "body")


def test_a_slow_second_request_on_a_kept_alive_connection_holds_no_thread(server) -> None:
    port, _ = server
    get = b"GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n"
    socks = [socket.create_connection(("127.0.0.1", port), timeout=5) for _ in range(2 * THREADS)]
    try:
        for s in socks:
            s.sendall(get)
            assert one_response(s) == (200, b'{"status":"ok"}')
        for s in socks:
            s.sendall(get[:9])  # the next request starts, and stalls, on every connection
        healthy(probe(port, seconds=2.0))
        for s in socks:  # finished inside the header deadline: answered on the same connection
            s.sendall(get[9:])
            assert one_response(s) == (200, b'{"status":"ok"}')
    finally:
        for s in socks:
            s.close()


def test_pipelined_requests_are_all_answered(server) -> None:
    port, _ = server
    get = b"GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n"
    last = b"GET /healthz HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n"
    raw = exchange(port, get + get + last)
    assert raw.count(b"HTTP/1.1 200 OK") == 3, raw[:500]


# ---- sizes ----


def test_an_oversized_content_length_is_refused_before_the_body(server) -> None:
    port, _ = server
    head = (
        "POST /v1/predict HTTP/1.1\r\nContent-Type: application/json\r\nContent-Length: {}\r\n\r\n"
    )
    doc = problem(exchange(port, head.format(MAX_BODY + 1).encode()), 413)
    assert doc["code"] == "body_too_large" and str(MAX_BODY) in doc["detail"]
    padded = SMALL + b" " * (MAX_BODY - len(SMALL))  # exactly at the limit: read and answered
    status, _, rest = parse(exchange(port, head.format(MAX_BODY).encode() + padded))
    assert status == 200, rest[:300]


def test_chunked_bodies_are_read_and_counted(server) -> None:
    port, _ = server
    status, data = request(port, "POST", "/v1/predict", SMALL, chunked=True)
    assert status == 200, data[:300]
    head = b"POST /v1/predict HTTP/1.1\r\nContent-Type: application/json\r\n"
    head += b"Transfer-Encoding: chunked\r\nConnection: close\r\n\r\n"
    # one chunk announced one byte over the limit: refused before its data is sent
    doc = problem(exchange(port, head + b"%x\r\n" % (MAX_BODY + 1)), 413)
    assert doc["code"] == "body_too_large"
    exact = SMALL + b" " * (MAX_BODY - len(SMALL))  # at the limit, in two chunks: answered
    framed = b"%x\r\n%s\r\n%x\r\n%s\r\n0\r\n\r\n" % (
        100,
        exact[:100],
        len(exact) - 100,
        exact[100:],
    )
    status, _, rest = parse(exchange(port, head + framed))
    assert status == 200, rest[:300]
    broken = problem(exchange(port, head + b"zz\r\n"), 400)
    assert broken["code"] == "malformed_request"


def test_expect_100_continue_is_answered_once_before_the_body(server) -> None:
    port, _ = server
    head = b"POST /v1/predict HTTP/1.1\r\nContent-Type: application/json\r\nConnection: close\r\n"
    head += b"Expect: 100-continue\r\nContent-Length: %d\r\n\r\n" % len(SMALL)
    with socket.create_connection(("127.0.0.1", port), timeout=5) as s:
        s.sendall(head)
        assert s.recv(100) == b"HTTP/1.1 100 Continue\r\n\r\n"
        s.sendall(SMALL)
        raw = read_all(s)
    assert parse(raw)[0] == 200 and b"100 Continue" not in raw, raw[:300]


# ---- errors gunicorn's parser finds, as problem+json ----


def test_a_request_line_over_the_limit_is_414_problem_json(server) -> None:
    port, _ = server
    line = f"GET /v1/cell?at={SECRET}{'1' * 4100} HTTP/1.1\r\n\r\n".encode()
    raw = exchange(port, line)
    assert problem(raw, 414)["code"] == "uri_too_long"
    assert SECRET.encode() not in raw


def test_an_oversized_header_is_431_problem_json(server) -> None:
    port, _ = server
    # one field over gunicorn's 8190 bytes: found by its parser
    raw = exchange(port, b"GET /healthz HTTP/1.1\r\nX-Big: " + b"a" * 9_000 + b"\r\n\r\n")
    assert problem(raw, 431)["code"] == "header_too_large"
    assert b"aaaa" not in raw
    # fields each within gunicorn's limits, over 64 KiB in all: refused before the head ends
    fields = b"".join(b"X-F%d: %s\r\n" % (i, b"a" * 800) for i in range(90))
    doc = problem(exchange(port, b"GET /healthz HTTP/1.1\r\n" + fields + b"\r\n"), 431)
    assert "65536" in doc["detail"]
    fields = b"".join(b"X-F%d: %s\r\n" % (i, b"a" * 800) for i in range(70))  # 56 KiB: read
    raw = exchange(port, b"GET /healthz HTTP/1.1\r\nConnection: close\r\n" + fields + b"\r\n")
    assert parse(raw)[0] == 200, raw[:300]


def test_malformed_requests_are_400_problem_json_without_echo(server) -> None:
    port, _ = server
    twice = b"POST /v1/predict HTTP/1.1\r\nContent-Length: 2\r\nContent-Length: 2\r\n\r\n{}"
    assert "CONTENT-LENGTH" in problem(exchange(port, twice), 400)["detail"]
    bad_line = f"GET /v1/cell?at={SECRET}\x7f HTTP/1.1\r\n\r\n".encode()  # a control byte
    raw = exchange(port, bad_line)
    assert problem(raw, 400)["code"] == "malformed_request"
    assert SECRET.encode() not in raw


def test_the_log_never_holds_a_query_string(server) -> None:
    port, log = server
    exchange(port, f"GET /v1/cell?at={SECRET}\x7f HTTP/1.1\r\n\r\n".encode())
    exchange(port, f"GET /v1/cell?at={SECRET}{'1' * 4100} HTTP/1.1\r\n\r\n".encode())
    request(port, "GET", f"/v1/cell?at={SECRET}")
    time.sleep(0.3)
    text = log.read_text(encoding="utf-8")
    assert "Invalid request from ip=127.0.0.1" in text  # the lines were written
    assert SECRET not in text


def test_the_json_log_scrubs_query_strings_and_request_bytes() -> None:
    import io
    import logging

    from nearwise import jsonlog

    stream = io.StringIO()
    log = logging.getLogger("gunicorn.error.scrub-test")
    log.addHandler(jsonlog.json_handler(stream))
    log.propagate = False
    log.setLevel(logging.DEBUG)
    try:
        # the lines gunicorn itself writes for a bad request and a client that went away
        log.warning(
            f"Invalid request from ip=1.2.3.4: Invalid HTTP request line: "
            f"'GET /v1/cell?at={SECRET} HTTP/1.1'"
        )
        log.debug(
            "Ignored premature client disconnection. %s",
            f"No more data after: {(b'GET /x HTTP/1.1' + SECRET.encode())!r}",
        )
        try:
            raise ValueError(f"bad target /v1/cell?at={SECRET}")
        except ValueError:
            log.exception("Error handling request")
        log.warning("Is it ready? GET /v1/predict 200")
    finally:
        log.handlers.clear()
    lines = [json.loads(line) for line in stream.getvalue().splitlines()]
    assert len(lines) == 4 and SECRET not in stream.getvalue()
    assert lines[0]["message"].endswith("'GET /v1/cell?[query removed] HTTP/1.1'")
    assert "?[query removed]" in lines[2]["exception"]
    assert lines[3]["message"] == "Is it ready? GET /v1/predict 200"  # no query: unchanged
