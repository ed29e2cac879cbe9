"""Small builders shared by the web tests."""

from __future__ import annotations

import http.client
import io
import os
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np


def curve(n: int = 40, seed: int = 0) -> list[list[float]]:
    """Rows ``[x, y]`` of a noisy sine: invented test data."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0.0, 10.0, n))
    y = np.sin(x) + rng.normal(0.0, 0.1, n)
    return [[float(a), float(b)] for a, b in zip(x, y, strict=True)]


def body(method: str = "knn", **more: Any) -> dict[str, Any]:
    """A valid predict request on :func:`curve`, with fields replaced or added."""
    doc: dict[str, Any] = {
        "method": method,
        "target": "y",
        "train": {"columns": ["x", "y"], "rows": curve()},
    }
    doc.update(more)
    return doc


def problem(resp: Any, status: int) -> dict[str, Any]:
    """Check ``resp`` is a problem+json answer with ``status``; return its body."""
    assert resp.status_code == status, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"
    doc = resp.get_json(force=True)
    assert set(doc) == {"type", "title", "status", "detail", "code", "errors"}
    assert doc["status"] == status
    assert "Traceback" not in resp.get_data(as_text=True)
    return doc


def pointers(doc: dict[str, Any]) -> list[str]:
    return [e.get("pointer") for e in doc["errors"]]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def request(
    port: int, method: str, path: str, body: bytes | None = None, chunked: bool = False
) -> tuple[int, bytes]:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=10)
    try:
        headers = {"Content-Type": "application/json"} if body is not None else {}
        payload = iter([body]) if chunked and body is not None else body
        conn.request(method, path, body=payload, headers=headers, encode_chunked=chunked)
        resp = conn.getresponse()
        return resp.status, resp.read()
    finally:
        conn.close()


@contextmanager
def serving(
    log_path: Path, env: dict[str, str] | None = None, workers: int = 1, threads: int = 2
) -> Iterator[int]:
    """``python -m nearwise serve`` on a free 127.0.0.1 port until the block ends; yields
    the port once /healthz answers (at most 60 s)."""
    port = free_port()
    clean = {k: v for k, v in os.environ.items() if not k.startswith("NEARWISE_")}
    with log_path.open("wb") as log:
        proc = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "nearwise",
                "serve",
                "--bind",
                f"127.0.0.1:{port}",
                "--workers",
                str(workers),
                "--threads",
                str(threads),
            ],
            stdout=log,
            stderr=subprocess.STDOUT,
            env={**clean, **(env or {})},
        )
        try:
            deadline = time.monotonic() + 60
            while True:
                try:
                    if request(port, "GET", "/healthz")[0] == 200:
                        break
                except OSError:
                    pass
                assert proc.poll() is None, log_path.read_text()
                assert time.monotonic() < deadline, "the server did not answer within 60 s"
                time.sleep(0.2)
            yield port
        finally:
            proc.terminate()
            try:
                proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(timeout=30)


def post_without_length(client: Any, data: bytes, path: str = "/v1/predict") -> Any:
    """POST ``data`` to the Flask test ``client`` as a chunked JSON body: no Content-Length."""
    from werkzeug.test import EnvironBuilder

    env = EnvironBuilder(
        path=path,
        method="POST",
        input_stream=io.BytesIO(data),
        headers={"Content-Type": "application/json", "Transfer-Encoding": "chunked"},
    ).get_environ()
    del env["CONTENT_LENGTH"]
    return client.open(env)
