"""Reusable pieces of the OpenAPI document: problem responses and the form-field view."""

from __future__ import annotations

from typing import Any

from marshmallow import Schema, fields, validate

from nearwise.web.body import FORMATS
from nearwise.web.coding import MIN_BYTES
from nearwise.web.logs import MAX_ID_LENGTH
from nearwise.web.responses import ProblemSchema

PROBLEM_WHEN = {
    400: "Unreadable body: not JSON, not CSV, not UTF-8, a malformed multipart body, or a body "
    "that is not what its `Content-Encoding` (gzip or deflate) says.",
    401: "An API key is required (NEARWISE_API_KEYS is set) and none or a wrong one was sent: "
    "send `Authorization: Bearer <key>`.",
    404: "Nothing at this path: for `/problems/{code}`, no problem type has this code.",
    406: "The Accept header allows none of the media types this endpoint answers.",
    413: "The body is over NEARWISE_MAX_BODY_BYTES (also when sent chunked, and for a "
    "compressed body its decompressed size), or a table is "
    "over NEARWISE_MAX_ROWS (NEARWISE_MAX_QUERY_ROWS for a query), NEARWISE_MAX_COLUMNS or "
    "NEARWISE_MAX_CELLS.",
    408: "The request head was not whole within NEARWISE_HEADER_TIMEOUT_S of its first byte, "
    "or the body not within NEARWISE_BODY_TIMEOUT_S of the head (code `request_timeout`; "
    "answered by `nearwise serve` itself, which then closes the connection).",
    414: "The request line (path and query string) is over the HTTP server's limit (4094 "
    "bytes under `nearwise serve`; code `uri_too_long`, answered by the server before the "
    "service). Send long field lists as form fields or in a JSON body.",
    415: "The body's media type is not one this endpoint reads, or the body has a content "
    "coding other than gzip and deflate, or more than one (code "
    "`unsupported_content_encoding`, with `Accept-Encoding` listing the codings read).",
    431: "The request head is over the HTTP server's limits (code `header_too_large`): more "
    "than 64 KiB, more than 100 fields, or a field over 8190 bytes under `nearwise serve`.",
    422: "Readable but invalid: unknown field, method or parameter, a bad cell (pointer to "
    "its row and column), too few rows for the folds, an unsupported dimension, a request "
    "over a limit of the service (code `over_limit`: grid size, folds x repeats, methods, "
    "estimated cost; the problem names the limit), ...",
    503: "Try again later: the fit ran past NEARWISE_TIME_BUDGET_S (code "
    "`time_budget_exceeded`), or every fit slot of the service is taken (code `busy`). The "
    "`Retry-After` header gives the seconds to wait.",
}
#: Response headers of a problem, by status.
PROBLEM_HEADERS = {
    401: {
        "WWW-Authenticate": {
            "description": "How to authenticate: `Bearer` with one of the keys.",
            "schema": {"type": "string"},
        }
    },
    503: {
        "Retry-After": {
            "description": "Seconds to wait before trying again.",
            "required": True,
            "schema": {"type": "integer", "minimum": 0},
        }
    },
}


def problems(*statuses: int) -> dict[str, Any]:
    """``responses`` entries for the given problem statuses."""
    out: dict[str, Any] = {}
    for s in statuses:
        content = {"application/problem+json": {"schema": ProblemSchema}}
        entry: dict[str, Any] = {"description": PROBLEM_WHEN[s], "content": content}
        if s in PROBLEM_HEADERS:
            entry["headers"] = PROBLEM_HEADERS[s]
        out[str(s)] = entry
    return out


#: How request and answer bodies may be compressed (:mod:`nearwise.web.coding`).
REQUEST_CODING = (
    " The body may be compressed: `Content-Encoding: gzip` or `deflate` (the zlib format, or "
    "raw deflate). NEARWISE_MAX_BODY_BYTES applies to the body as sent and to its "
    "decompressed size, checked as it is decompressed (413 `body_too_large`); another "
    "coding, or two, is a 415 `unsupported_content_encoding`."
)
#: The request id, as sent by a client (kept when valid) and as answered (always).
_REQUEST_ID = {
    "type": "string",
    "minLength": 1,
    "maxLength": MAX_ID_LENGTH,
    "pattern": "^[ -~]+$",
}
REQUEST_ID_PARAMETER = {
    "name": "X-Request-ID",
    "in": "header",
    "required": False,
    "description": "An id of your own for this request (1 to "
    f"{MAX_ID_LENGTH} printable ASCII characters), returned in the answer's `X-Request-ID` "
    "and written to every log line of the request; any other value is replaced by a new id.",
    "schema": _REQUEST_ID,
}
ANSWER_HEADERS = {
    "X-Request-ID": {
        "description": "The request's id: the one sent, when valid, or a new one (32 hex "
        "digits). Quote it when reporting a problem; the logs carry it.",
        "schema": _REQUEST_ID,
    },
    "Content-Encoding": {
        "description": "`gzip` when the request's `Accept-Encoding` allows gzip and the "
        f"answer holds at least {MIN_BYTES} bytes; absent otherwise.",
        "schema": {"type": "string", "enum": ["gzip"]},
    },
    "Vary": {
        "description": "Includes `Accept-Encoding` (and `Accept` where the answer's media "
        "type is negotiated).",
        "schema": {"type": "string"},
    },
}


def answer_format(op: dict[str, Any]) -> dict[str, Any]:
    """``op`` with its ``format`` query parameter declared (:func:`nearwise.web.body.negotiate`
    reads it on every endpoint): the names of the media types its 200 answer offers."""
    offered = op.get("responses", {}).get("200", {}).get("content", {})
    names = [name for name, media in FORMATS.items() if media in offered]
    if names:
        op.setdefault("parameters", []).append(
            {
                "name": "format",
                "in": "query",
                "required": False,
                "description": "The answer's media type by name, for clients that cannot set "
                "`Accept` (a spreadsheet's web query, a link): it overrides the Accept header. "
                "Another value is a 422 naming the parameter and the values taken here.",
                "schema": {"type": "string", "enum": names},
            }
        )
        # a value outside the list is a 422; a query string too long for the server a 414
        responses = op.setdefault("responses", {})
        for status, entry in problems(414, 422).items():
            responses.setdefault(status, entry)
    return op


def common_headers(op: dict[str, Any]) -> dict[str, Any]:
    """``op`` with what every operation shares: it takes an ``X-Request-ID`` of the client's
    own; its request body's description says which content codings the body may have; every
    answer lists ``Content-Encoding``, ``Vary`` and ``X-Request-ID`` among its headers."""
    op.setdefault("parameters", []).append(dict(REQUEST_ID_PARAMETER))
    body = op.get("requestBody")
    if body is not None:
        body["description"] = body.get("description", "").rstrip() + REQUEST_CODING
        body["description"] = body["description"].strip()
    for answer in op.get("responses", {}).values():
        answer["headers"] = {**ANSWER_HEADERS, **answer.get("headers", {})}
    return op


def _kind(field: fields.Field) -> dict[str, Any]:
    """The JSON Schema of a form field or query parameter, with the field's bounds."""
    if isinstance(field, fields.String):
        out: dict[str, Any] = {"type": "string"}
    elif isinstance(field, fields.Integer):
        out = {"type": "integer"}
    elif isinstance(field, fields.Number):
        out = {"type": "number"}
    elif isinstance(field, fields.Boolean):
        out = {"type": "boolean"}
    elif isinstance(field, fields.List):
        out = {"type": "array", "items": _kind(field.inner)}
    else:
        out = {"type": ["string", "number", "boolean"]}
    array = out["type"] == "array"
    for v in field.validators:
        if isinstance(v, validate.Range):
            if v.min is not None:
                out["minimum" if v.min_inclusive else "exclusiveMinimum"] = v.min
            if v.max is not None:
                out["maximum" if v.max_inclusive else "exclusiveMaximum"] = v.max
        elif isinstance(v, validate.Length):
            low, high = ("minItems", "maxItems") if array else ("minLength", "maxLength")
            if v.min is not None:
                out[low] = v.min
            if v.max is not None:
                out[high] = v.max
        elif isinstance(v, validate.OneOf):
            out["enum"] = list(v.choices)
    out.update({k: field.metadata[k] for k in _BOUNDS if k in field.metadata})
    return out


_BOUNDS = (
    "enum",
    "minimum",
    "maximum",
    "exclusiveMinimum",
    "exclusiveMaximum",
    "minItems",
    "maxItems",
    "uniqueItems",
    "minLength",
    "maxLength",
)


def form_fields(schema: Schema) -> dict[str, dict[str, Any]]:
    """Dotted form-field names (``tuning.folds``) with their JSON Schema, from a schema."""
    out: dict[str, dict[str, Any]] = {}
    for name, field in schema.fields.items():
        text = field.metadata.get("description", "")
        if isinstance(field, fields.Nested):
            for sub, inner in form_fields(field.schema).items():
                out[f"{name}.{sub}"] = inner
        elif isinstance(field, fields.Dict):
            out[f"{name}.NAME"] = {**_kind(field.value_field), "description": text}
        else:
            out[name] = {**_kind(field), "description": text}
    return out


FORM_RULES = (
    "Fields other than the tables are named by their path in the JSON body with dots: "
    "`method`, `target`, `features`, `tuning.folds`, `interval.level`, `params.k`, `grid.k`. "
    "They may be sent as form fields or as query-string parameters, each name once. Text "
    "fields are taken as sent; numbers and booleans are read as JSON literals (`5`, `0.25`, "
    "`true`). A list (`features`, `grid.NAME`) is one field per item, or one field holding "
    "a JSON array or comma-separated items. CSV tables: UTF-8 (a byte-order mark is "
    "skipped), comma-separated, a header line naming the columns, one row per line (LF or "
    "CRLF); quoted cells and quoted numbers are read as usual; an empty cell, or one holding "
    "only spaces, is a missing value (as JSON null), and so is a missing-value token: by "
    "default pandas read_csv's (`NA`, `N/A`, `NULL`, `NaN`, `nan`, ...; see `na`, which "
    "replaces them); blank lines at the end are ignored. "
    "`delimiter` (`,` default, `;`, `tab`, `|`) and `decimal` (`point` default, `comma`; "
    "`decimal=comma` alone implies `delimiter=;`) read spreadsheet exports from "
    "decimal-comma locales, and set the dialect of a CSV answer; they go in the query string "
    "or as form fields (with a JSON body, in the query string, for the CSV answer only). "
    "Nothing is guessed: a header split by semicolons or tabs while commas are in force, or "
    "a number such as `1,5` or `1,500` under `decimal=point` (or `1.500` under "
    "`decimal=comma`), is a 400 with code `csv_format_undeclared` naming the parameters to "
    "set. A file that is not UTF-8 is a 400 (code `not_utf8`) saying how to save it as UTF-8. "
    "A `text/plain` body (a browser's simple request) is read as JSON when its first "
    "character other than spaces is `{`, and otherwise as a `text/csv` body. Errors inside a "
    "CSV part name its `part`, `line` (the header is line 1) and `column`; errors in other "
    "fields carry a `pointer` (`tuning.folds` is `/tuning/folds`)."
)
