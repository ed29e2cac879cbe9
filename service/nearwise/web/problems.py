"""The one error handler: every failure becomes ``application/problem+json`` (RFC 9457).

Body members: ``type``, ``title``, ``status``, ``detail``, ``code`` and ``errors``. Each entry
of ``errors`` is ``{"pointer": RFC 6901 pointer, "message"}`` for JSON input or
``{"part", "line", "column", "message"}`` for a cell of a CSV part. No stack trace leaves.

Echoes are bounded: a name, cell or header value a message repeats is cut to
:data:`~nearwise.core.errors.ECHO_CHARS` (80) characters with its full length stated
(:func:`~nearwise.core.errors.shown`), pointer segments and CSV column names included; as a
backstop every ``detail`` is cut at :data:`DETAIL_CHARS`, every entry's text at
:data:`ENTRY_CHARS`, and ``errors`` lists at most :data:`MAX_ERRORS` entries.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Protocol
from urllib.parse import urlsplit

from flask import Flask, Response, g, request
from werkzeug.exceptions import HTTPException

from nearwise.core.errors import NearwiseError, OverBudget, Where, shown
from nearwise.web.jsonio import dumps
from nearwise.web.metrics import note_problem
from nearwise.web.problem_types import envelope_place, title_of

PROBLEM_JSON = "application/problem+json"
#: Seconds a client is asked to wait after a 503.
RETRY_AFTER_S = 10
log = logging.getLogger("nearwise.web")

#: Backstops on a problem's size, whatever a message echoes: characters of ``detail``, of each
#: text in an ``errors`` entry, and entries in ``errors``.
DETAIL_CHARS = 4000
ENTRY_CHARS = 1000
MAX_ERRORS = 100

#: Stable codes for HTTP-level problems, by status.
HTTP_CODES = {
    400: "unreadable_body",
    401: "unauthorized",
    404: "not_found",
    405: "method_not_allowed",
    406: "not_acceptable",
    413: "too_large",
    415: "unsupported_media_type",
    422: "invalid_request",
    500: "internal_error",
    503: "unavailable",
}


@dataclass
class Problem(Exception):
    """An error the web layer raises itself, already knowing its status."""

    status: int
    detail: str
    where: Sequence[Where | dict[str, Any]] = ()
    code: str = ""
    headers: Mapping[str, str] = field(default_factory=dict)

    def __post_init__(self) -> None:
        super().__init__(self.detail)


class CsvSource(Protocol):
    """What a parsed CSV part offers for turning a row index into a line of the part."""

    columns: tuple[str, ...]

    def line_of(self, row: int) -> int: ...


class JsonShape(Protocol):
    """How a JSON table was sent: turns a path in the rows shape into one in its own shape
    (:class:`nearwise.web.table_shapes.Shape`)."""

    def path(self, path: tuple[str | int, ...]) -> tuple[str | int, ...]: ...


def pointer(path: Sequence[str | int]) -> str:
    """RFC 6901 JSON Pointer for a path: ``("train", "rows", 3, 1)`` -> ``/train/rows/3/1``.

    A segment longer than ECHO_CHARS (a huge field name) is cut as :func:`shown` cuts it."""
    return "".join("/" + shown(p).replace("~", "~0").replace("/", "~1") for p in path)


def error_entry(
    where: Where, csv_parts: Mapping[str, CsvSource], json_tables: Mapping[str, JsonShape] = {}
) -> dict[str, Any]:
    """One ``errors`` entry; a place inside a CSV part is named by part, line and column, a
    place in a JSON table by its pointer in the shape the table was sent in."""
    path = where.path
    shape = json_tables.get(str(path[0])) if path else None
    if shape is not None:
        return {"pointer": pointer(shape.path(path)), "message": where.message}
    part = csv_parts.get(str(path[0])) if path else None
    if part is None:
        return {"pointer": pointer(path), "message": where.message}
    if len(path) < 2 or path[1] not in ("rows", "columns"):
        return {"part": shown(path[0]), "message": where.message}
    entry: dict[str, Any] = {"part": shown(path[0])}
    if path[1] == "columns":
        entry["line"] = 1
        col = path[2] if len(path) > 2 else None
    else:
        entry["line"] = part.line_of(int(path[2])) if len(path) > 2 else None
        col = path[3] if len(path) > 3 else None
    if isinstance(col, int) and 0 <= col < len(part.columns):
        entry["column"] = shown(part.columns[col])
    entry["message"] = where.message
    return {k: v for k, v in entry.items() if v is not None}


def problem_response(
    status: int,
    detail: str,
    code: str,
    errors: Sequence[dict[str, Any]] = (),
    headers: Mapping[str, str] | None = None,
) -> Response:
    """Build the ``application/problem+json`` response (its texts bounded, see above); the
    title is the code's one title (:mod:`nearwise.web.problem_types`)."""
    body = {
        "type": f"/problems/{code}",
        "title": title_of(code, status),
        "status": status,
        "detail": shown(detail, limit=DETAIL_CHARS),
        "code": code,
        "errors": [_bounded(e) for e in list(errors)[:MAX_ERRORS]],
    }
    note_problem(code)
    resp = Response(dumps(body), status=status, mimetype=PROBLEM_JSON)
    resp.headers.update(dict(headers or {}))
    return resp


def _bounded(entry: dict[str, Any]) -> dict[str, Any]:
    return {k: shown(v, limit=ENTRY_CHARS) if isinstance(v, str) else v for k, v in entry.items()}


def _csv_parts() -> Mapping[str, CsvSource]:
    return g.get("csv_parts", {})


def _json_tables() -> Mapping[str, JsonShape]:
    return g.get("json_tables", {})


def handle(exc: Exception) -> Response:
    """Turn any exception into a problem response; unexpected ones are logged as 500."""
    if isinstance(exc, Problem):
        errors = [
            w if isinstance(w, dict) else error_entry(w, _csv_parts(), _json_tables())
            for w in exc.where
        ]
        code = exc.code or HTTP_CODES.get(exc.status, "http_error")
        errors = errors or envelope_place(code, exc.detail, request.method)
        return problem_response(exc.status, exc.detail, code, errors, exc.headers)
    if isinstance(exc, NearwiseError):
        errors = [error_entry(w, _csv_parts(), _json_tables()) for w in exc.where]
        if isinstance(exc, OverBudget):
            headers = {"Retry-After": str(RETRY_AFTER_S)}
            return problem_response(503, exc.detail, exc.code, errors, headers)
        return problem_response(422, exc.detail, exc.code, errors)
    if isinstance(exc, HTTPException) and exc.code is not None and exc.code < 500:
        headers = {k: v for k, v in exc.get_headers() if k.lower() not in ("content-type",)}
        code = HTTP_CODES.get(exc.code, "http_error")
        detail = _http_detail(exc)
        errors = envelope_place(code, detail, request.method)
        return problem_response(exc.code, detail, code, errors, headers)
    if isinstance(exc, MemoryError):  # the worker's address-space guard (worker.py)
        log.warning("a request ran out of memory (NEARWISE_WORKER_MEMORY_MB)")
        return problem_response(
            503,
            "The request needed more memory than a worker may use; send fewer rows or query "
            "rows, or try again later.",
            "out_of_memory",
            headers={"Retry-After": str(RETRY_AFTER_S)},
        )
    log.error("unexpected error while answering a request", exc_info=exc)
    return problem_response(
        500,
        "The service failed unexpectedly; the error has been logged. Please report it.",
        "internal_error",
    )


def _http_detail(exc: HTTPException) -> str:
    if exc.code == 405:
        allowed = exc.valid_methods if hasattr(exc, "valid_methods") else None
        if allowed:
            return f"This endpoint accepts {', '.join(sorted(allowed))} only."
    if exc.code == 404:
        return "No endpoint at this path; see /openapi.json for the ones offered."
    return str(
        exc.description or title_of(HTTP_CODES.get(exc.code or 500, "http_error"), exc.code or 500)
    )


def relative_location(resp: Response) -> Response:
    """Make a redirect's ``Location`` a path on this host, never built from ``Host``.

    Werkzeug's own redirects (a path with doubled slashes, ``/v1//predict``, is sent on to
    ``/v1/predict`` with a 308) write an absolute URL from the request's ``Host`` header, which
    a client or a proxy may set to any name. The path and query are kept; the scheme and host
    are dropped (RFC 9110 section 10.2.2 allows a relative reference), leading slashes are
    folded to one (``//name`` would name another host), and the redirect's HTML body, which
    repeats the URL, is left out."""
    target = resp.headers.get("Location")
    if target is None or not 300 <= resp.status_code < 400:
        return resp
    parts = urlsplit(target)
    path = "/" + parts.path.lstrip("/")
    resp.headers["Location"] = path + (f"?{parts.query}" if parts.query else "")
    resp.set_data(b"")
    resp.headers.pop("Content-Type", None)
    return resp


def install(app: Flask) -> None:
    """Register :func:`handle` for every exception, and :func:`relative_location`."""
    app.register_error_handler(Exception, handle)
    app.after_request(relative_location)
