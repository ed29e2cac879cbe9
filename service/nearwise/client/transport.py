"""HTTP for the client: the standard library's ``urllib``, gzip both ways, bounded retries.

A request body of at least :data:`GZIP_MIN_BYTES` is sent gzip-compressed (the service applies
its body cap to the decompressed size); answers are asked for with ``Accept-Encoding: gzip``
and decompressed here. A ``503`` with ``Retry-After`` (the service is busy, or a fit ran past
its time budget) is tried again after the seconds it names, at most ``retries`` times and
``max_wait`` seconds in all; any other refusal raises :class:`ProblemError`.
"""

from __future__ import annotations

import gzip
import json
import time
import urllib.error
import urllib.request
from collections.abc import Callable, Mapping
from typing import Any

#: Request bodies at least this long are sent gzip-compressed.
GZIP_MIN_BYTES = 16 * 1024


class ProblemError(Exception):
    """The service refused a request: an RFC 9457 problem (or a non-problem error answer,
    e.g. from a proxy, with ``code`` empty and the start of its body as ``detail``).

    Attributes: ``status`` (HTTP status), ``code`` (the service's stable snake_case code),
    ``title``, ``detail`` (what is wrong and how to fix it), ``errors`` (the places at fault:
    ``pointer`` for JSON, ``part``/``line``/``column`` for CSV), ``problem`` (the whole
    document) and ``headers``.
    """

    def __init__(
        self,
        status: int,
        code: str,
        detail: str,
        errors: list[dict[str, Any]] | None = None,
        title: str = "",
        problem: dict[str, Any] | None = None,
        headers: Mapping[str, str] | None = None,
    ) -> None:
        self.status = status
        self.code = code
        self.detail = detail
        self.errors = list(errors or [])
        self.title = title
        self.problem = dict(problem or {})
        self.headers = dict(headers or {})
        places = "; ".join(_place(e) for e in self.errors[:5])
        super().__init__(f"{status} {code or title}: {detail}" + (f" [{places}]" if places else ""))


def _place(entry: Mapping[str, Any]) -> str:
    if "pointer" in entry:
        where = entry["pointer"]
    elif "part" in entry:
        where = f"{entry.get('part')} line {entry.get('line')}, column {entry.get('column')}"
    else:
        where = ", ".join(f"{k} {v}" for k, v in entry.items() if k != "message")
    return f"{where}: {entry.get('message', '')}"


class Transport:
    """Sends one request and returns the decoded JSON answer, retrying 503 as documented."""

    def __init__(
        self,
        url: str,
        key: str | None,
        timeout: float,
        retries: int,
        max_wait: float,
        sleep: Callable[[float], None] = time.sleep,
    ) -> None:
        self.url = url.rstrip("/")
        self.key = key
        self.timeout = timeout
        self.retries = retries
        self.max_wait = max_wait
        self.sleep = sleep
        self.attempts = 0  # requests sent, retries included (for tests and logs)

    def send(self, method: str, path: str, body: bytes | None = None, ctype: str = "") -> Any:
        headers = {"Accept": "application/json", "Accept-Encoding": "gzip"}
        if self.key:
            headers["Authorization"] = f"Bearer {self.key}"
        if body is not None:
            headers["Content-Type"] = ctype
            if len(body) >= GZIP_MIN_BYTES:
                body = gzip.compress(body, mtime=0)
                headers["Content-Encoding"] = "gzip"
        waited = 0.0
        for attempt in range(self.retries + 1):
            status, answer_headers, data = self._once(method, path, body, headers)
            if status < 400:
                return json.loads(data)
            error = _problem(status, answer_headers, data)
            wait = _retry_after(answer_headers) if status == 503 else None
            if wait is None or attempt == self.retries or waited + wait > self.max_wait:
                raise error
            self.sleep(wait)
            waited += wait
        raise AssertionError("unreachable")  # pragma: no cover

    def _once(
        self, method: str, path: str, body: bytes | None, headers: dict[str, str]
    ) -> tuple[int, dict[str, str], bytes]:
        self.attempts += 1
        req = urllib.request.Request(self.url + path, data=body, headers=headers, method=method)
        try:
            with urllib.request.urlopen(req, timeout=self.timeout) as resp:
                return resp.status, _lower(resp.headers), _decoded(resp.headers, resp.read())
        except urllib.error.HTTPError as err:
            with err:
                return err.code, _lower(err.headers), _decoded(err.headers, err.read())


def _lower(headers: Any) -> dict[str, str]:
    return {k.lower(): v for k, v in headers.items()}


def _decoded(headers: Any, data: bytes) -> bytes:
    coding = (headers.get("Content-Encoding") or "").strip().lower()
    return gzip.decompress(data) if coding == "gzip" else data


def _retry_after(headers: Mapping[str, str]) -> float | None:
    """Seconds from ``Retry-After`` (its delay-seconds form, RFC 9110 section 10.2.3)."""
    value = headers.get("retry-after", "").strip()
    return float(value) if value.isdigit() else None


def _problem(status: int, headers: Mapping[str, str], data: bytes) -> ProblemError:
    try:
        doc = json.loads(data)
    except ValueError:
        doc = None
    if not isinstance(doc, dict) or "problem+json" not in headers.get("content-type", ""):
        text = data[:300].decode("utf-8", "replace")
        return ProblemError(status, "", text or f"HTTP {status}", headers=headers)
    return ProblemError(
        status,
        str(doc.get("code", "")),
        str(doc.get("detail", "")),
        doc.get("errors") or [],
        str(doc.get("title", "")),
        doc,
        headers,
    )
