"""Hostile single requests for ``attack.py``: raw HTTP on 127.0.0.1 and the malformed-input
cases of issue 12 (the "medium and low" list), each with the answer the issue asks for.

Every case sends one request (bounded in size and time) and returns its answer and whether it
is the expected one. Nothing here leaves the loopback interface: every connection goes to
``run_load.HOST``.
"""

from __future__ import annotations

import csv
import gzip
import http.client
import io
import json
import socket
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from urllib.parse import unquote

import numpy as np
import run_load

HOST = run_load.HOST
#: Answers larger than this to a request with a 1 MB field name mean the name was echoed.
ECHO_MAX_BYTES = 16 * 1024
#: First characters that make a spreadsheet cell a formula (OWASP "CSV injection").
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


@dataclass
class Answer:
    """One answer, or the error that took its place (``status`` 0, ``error`` its class name)."""

    status: int = 0
    headers: dict[str, str] = field(default_factory=dict)  # lower-case names
    body: bytes = b""
    seconds: float = 0.0
    error: str = ""

    @property
    def ctype(self) -> str:
        return self.headers.get("content-type", "")

    @property
    def problem(self) -> bool:
        return self.ctype.startswith("application/problem+json")

    @property
    def outcome(self) -> str:
        return self.error or run_load.outcome_of(self.status, self.body)

    def brief(self) -> str:
        kind = self.ctype.split(";")[0] or "no type"
        return f"{self.outcome} ({kind}, {len(self.body):,} bytes, {self.seconds:.2f} s)"


def _headers(msg: http.client.HTTPMessage) -> dict[str, str]:
    out: dict[str, str] = {}
    for name, value in msg.items():
        key = name.lower()
        out[key] = f"{out[key]}, {value}" if key in out else value
    return out


def call(
    port: int,
    method: str,
    path: str,
    body: bytes | None = None,
    headers: Mapping[str, str] | None = None,
    timeout: float = 30.0,
) -> Answer:
    """One request on a fresh connection (http.client; a ``Host`` given replaces its own)."""
    conn = http.client.HTTPConnection(HOST, port, timeout=timeout)
    t0 = time.monotonic()
    try:
        conn.request(method, path, body=body, headers=dict(headers or {}))
        resp = conn.getresponse()
        data = resp.read()
        return Answer(resp.status, _headers(resp.headers), data, time.monotonic() - t0)
    except (OSError, http.client.HTTPException) as exc:
        return Answer(seconds=time.monotonic() - t0, error=type(exc).__name__)
    finally:
        conn.close()


def read_answer(sock: socket.socket, t0: float) -> Answer:
    """The answer on ``sock`` (its timeout applies to every read)."""
    resp = http.client.HTTPResponse(sock, method="POST")
    try:
        resp.begin()
        data = resp.read()
        return Answer(resp.status, _headers(resp.headers), data, time.monotonic() - t0)
    except (OSError, http.client.HTTPException) as exc:
        return Answer(seconds=time.monotonic() - t0, error=type(exc).__name__)
    finally:
        resp.close()


def raw(port: int, data: bytes, timeout: float = 30.0) -> Answer:
    """Send bytes exactly as given and read the answer; a server that answers before reading
    everything (and closes) is still heard."""
    t0 = time.monotonic()
    try:
        sock = socket.create_connection((HOST, port), timeout=timeout)
    except OSError as exc:
        return Answer(error=type(exc).__name__)
    try:
        try:
            sock.sendall(data)
        except OSError:
            pass  # answered and closed early: the answer is still in the receive buffer
        return read_answer(sock, t0)
    finally:
        sock.close()


# -- bodies -----------------------------------------------------------------------------
def small_train(n: int = 40) -> dict:
    rows = [[i / n, (i / n) ** 2 + (i % 3) / 10] for i in range(n)]
    return {"columns": ["x", "y"], "rows": rows}


def sphere(rng: np.random.Generator, n: int, radius: float = 1.0) -> np.ndarray:
    v = rng.normal(size=(n, 3))
    return radius * v / np.linalg.norm(v, axis=1, keepdims=True)


def sphere_body(n: int, q: int, target: bool, seed: int = 3) -> bytes:
    """Rows on the unit sphere (every row a vertex of the hull) and query rows just inside."""
    rng = np.random.default_rng(seed)
    X, Q = sphere(rng, n), sphere(rng, q, 0.99)
    doc: dict = {"query": {"columns": ["a", "b", "c"], "rows": Q.round(6).tolist()}}
    if target:
        y = X[:, 0] + 0.1 * rng.normal(size=n)
        rows = np.column_stack([X, y]).round(6).tolist()
        doc |= {
            "method": "knn",
            "target": "y",
            "train": {"columns": ["a", "b", "c", "y"], "rows": rows},
        }
    else:
        doc["train"] = {"columns": ["a", "b", "c"], "rows": X.round(6).tolist()}
    return json.dumps(doc).encode()


def as_json(doc: dict) -> bytes:
    return json.dumps(doc).encode()  # ensure_ascii: a lone surrogate is sent as \\ud800


JSON = {"Content-Type": "application/json"}


def csv_cells(text: str) -> list[str]:
    return [c for row in csv.reader(io.StringIO(text)) for c in row]


def live_formulas(cells: list[str]) -> list[str]:
    """Cells a spreadsheet would run: a formula start, and not a plain number."""
    out = []
    for c in cells:
        if c.startswith(FORMULA_STARTS):
            try:
                float(c.replace(",", "."))
            except ValueError:
                out.append(c)
    return out


# -- the cases --------------------------------------------------------------------------
@dataclass
class Case:
    key: str
    what: str  # what the issue expects
    run: Callable[[int, float, dict], tuple[Answer, str]]  # port, timeout, sizes -> answer, fault


def expect(answer: Answer, statuses: tuple[int, ...], problem: bool = True) -> str:
    """'' when the answer has one of ``statuses`` (and is problem+json when asked), else why."""
    if answer.status not in statuses:
        return f"expected {' or '.join(map(str, statuses))}, got {answer.brief()}"
    if problem and not answer.problem:
        return f"expected application/problem+json, got {answer.brief()}"
    return ""


def _blank_csv(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    body = b"x,y\n" + b"\n" * (sizes["blank_bytes"] - 4)
    a = call(
        port, "POST", "/v1/predict?method=knn&target=y", body, {"Content-Type": "text/csv"}, timeout
    )
    return a, expect(a, (400, 413, 422))


def _over_rows_csv(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    body = b"x,y\n" + b"1,2\n" * sizes["over_rows"]
    a = call(
        port, "POST", "/v1/predict?method=knn&target=y", body, {"Content-Type": "text/csv"}, timeout
    )
    fault = expect(a, (413,))
    if not fault and b"table_too_large" not in a.body:
        fault = f"expected code table_too_large, got {a.body[:200]!r}"
    return a, fault


def _long_field(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    doc = {"method": "knn", "target": "y", "train": small_train(), "f" * 1_000_000: 1}
    a = call(port, "POST", "/v1/predict", as_json(doc), JSON, timeout)
    fault = expect(a, (422,))
    if not fault and len(a.body) > ECHO_MAX_BYTES:
        fault = f"the 1 MB name is echoed: the answer has {len(a.body):,} bytes"
    return a, fault


def _formula_doc() -> dict:
    rows = [
        [f"=HYPERLINK({i % 8})" if i % 8 else "@SUM(A1)", i / 40, (i / 40) ** 2] for i in range(40)
    ]
    return {
        "method": "knn",
        "target": "+y",
        "features": ["-x"],
        "train": {"columns": ["=site", "-x", "+y"], "rows": rows},
        "query": {"columns": ["=site", "-x"], "rows": [["=1+2", 0.5], ["@A1", -0.25]]},
        "tuning": {"group_by": "=site"},
    }


def _formula_predict(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    a = call(
        port,
        "POST",
        "/v1/predict",
        as_json(_formula_doc()),
        {**JSON, "Accept": "text/csv"},
        timeout,
    )
    fault = expect(a, (200,), problem=False)
    if not fault:
        live = live_formulas(csv_cells(a.body.decode()))
        fault = f"formula cells in the CSV answer: {live[:5]}" if live else ""
    return a, fault


def _locality_csv(names: list[str], port: int, timeout: float) -> Answer:
    doc = {
        "train": {"columns": names, "rows": [[i / 30, (i * 7 % 30) / 30] for i in range(30)]},
        "query": {"columns": names, "rows": [[0.5, 0.5], [2.0, 2.0]]},
    }
    return call(port, "POST", "/v1/locality", as_json(doc), {**JSON, "Accept": "text/csv"}, timeout)


def _formula_locality(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    a = _locality_csv(["=cmd|' /C calc'!A0", "température"], port, timeout)
    fault = expect(a, (200,), problem=False)
    if not fault:
        live = live_formulas(csv_cells(a.body.decode()))
        feats = a.headers.get("nearwise-features", "")
        names = [unquote(n) for n in feats.split(",")]
        if live:
            fault = f"formula cells in the CSV answer: {live[:5]}"
        elif not feats.isascii() or live_formulas(names):
            fault = f"Nearwise-Features is not ASCII-safe and neutral: {feats!r}"
    return a, fault


def _name_refused(name: str) -> Callable[[int, float, dict], tuple[Answer, str]]:
    def run(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
        a = _locality_csv([name, "b"], port, timeout)
        fault = expect(a, (422,))
        if not fault and b"/train/columns/0" not in a.body:
            fault = f"the error does not point at /train/columns/0: {a.body[:300]!r}"
        return a, fault

    return run


def _encoding(coding: str, statuses: tuple[int, ...]) -> Callable[..., tuple[Answer, str]]:
    def run(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
        body = as_json({"method": "knn", "target": "y", "train": small_train()})
        if coding == "gzip":
            body = gzip.compress(body)
        a = call(port, "POST", "/v1/predict", body, {**JSON, "Content-Encoding": coding}, timeout)
        return a, expect(a, statuses, problem=415 in statuses and len(statuses) == 1)

    return run


def _host_redirect(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    a = call(port, "GET", "/v1//methods", headers={"Host": "evil.example"}, timeout=timeout)
    where = a.headers.get("location", "")
    fault = expect(a, (301, 308), problem=False)
    if not fault and (not where.startswith("/") or where.startswith("//") or "evil" in where):
        fault = f"Location is not relative: {where!r}"
    return a, fault


def _long_url(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    a = call(port, "GET", "/v1/methods?pad=" + "a" * 5000, timeout=timeout)
    return a, expect(a, (414,))


def _big_header(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    a = call(port, "GET", "/v1/methods", headers={"X-Pad": "a" * 100_000}, timeout=timeout)
    return a, expect(a, (400, 431))


def _double_length(port: int, timeout: float, sizes: dict) -> tuple[Answer, str]:
    body = as_json({"method": "knn", "target": "y", "train": small_train()})
    head = (
        f"POST /v1/predict HTTP/1.1\r\nHost: {HOST}\r\nContent-Type: application/json\r\n"
        f"Content-Length: {len(body)}\r\nContent-Length: {len(body) + 1}\r\n"
        "Connection: close\r\n\r\n"
    )
    a = raw(port, head.encode() + body, timeout)
    return a, expect(a, (400,))


CASES = [
    Case("blank_csv", "a CSV of blank lines near the body limit: 400/413/422 problem", _blank_csv),
    Case("over_rows_csv", "a CSV over the row limit: 413 table_too_large", _over_rows_csv),
    Case("long_field", "a 1 MB unknown field name: 422, echo truncated", _long_field),
    Case(
        "formula_predict",
        "formula cells and names in a predict CSV answer are neutral",
        _formula_predict,
    ),
    Case(
        "formula_locality",
        "formula and non-ASCII names in a locality CSV answer and "
        "Nearwise-Features are neutral and ASCII",
        _formula_locality,
    ),
    Case(
        "control_name",
        "a control character in a column name: 422 at the column",
        _name_refused("a\x01b"),
    ),
    Case("newline_name", "a newline in a column name: 422 at the column", _name_refused("a\nb")),
    Case(
        "surrogate_name",
        "a lone surrogate as a column name: 422 at the column",
        _name_refused("\ud800"),
    ),
    Case(
        "gzip",
        "Content-Encoding gzip: decoded (200), never read as plain",
        _encoding("gzip", (200,)),
    ),
    Case("br", "Content-Encoding br: 415 problem", _encoding("br", (415,))),
    Case(
        "host_redirect",
        "the 308 on /v1//methods with Host: evil.example has a relative Location",
        _host_redirect,
    ),
    Case("long_url", "a URL over 4,094 bytes: 414 problem+json", _long_url),
    Case("big_header", "a 100 KB header: 400/431 problem+json", _big_header),
    Case("double_length", "two Content-Length headers: 400 problem+json", _double_length),
]
