"""Every problem ``type`` the service answers with: one title each, and the page served at its
URI, ``/problems/{code}`` (what it means, and how to fix the request).

Every answer of :mod:`nearwise.web.problems` and :func:`nearwise.web.framing.raw_problem`
takes its ``title`` from here, so one ``type`` always carries one title; a test checks that
every code the source can answer with is listed.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class ProblemType:
    """A problem code's status (the usual one), title, meaning and an example fix."""

    status: int
    title: str
    meaning: str
    fix: str


def _t(status: int, title: str, meaning: str, fix: str) -> ProblemType:
    return ProblemType(status, title, meaning, fix)


TYPES: dict[str, ProblemType] = {
    # -- 400: the body cannot be read --------------------------------------------------------
    "unreadable_body": _t(
        400,
        "Unreadable body",
        "The body is not readable JSON, CSV or multipart/form-data, or not what its "
        "Content-Encoding (gzip or deflate) says.",
        "Check the JSON with a validator, or send the CSV file as a part of a multipart body: "
        "curl -F train=@train.csv -F target=power_kw URL.",
    ),
    "malformed_request": _t(
        400,
        "Malformed HTTP request",
        "The request line, a header or the chunked framing is not valid HTTP/1.1.",
        "Send the request with a standard HTTP client library or curl.",
    ),
    "not_utf8": _t(
        400,
        "CSV not UTF-8",
        "A CSV table is not UTF-8 text (a legacy spreadsheet encoding, for example).",
        "Save the sheet as 'CSV UTF-8' and send it again.",
    ),
    "csv_format_undeclared": _t(
        400,
        "CSV format must be declared",
        "The CSV table's delimiter or decimal mark cannot be told from its text.",
        "Name them: delimiter=; and decimal=, as form fields or query-string parameters.",
    ),
    # -- 401, 403, 404, 405, 406 -------------------------------------------------------------
    "unauthorized": _t(
        401,
        "API key required",
        "The endpoint needs an API key and the request sent none.",
        "Add the header Authorization: Bearer <your key>.",
    ),
    "invalid_api_key": _t(
        401,
        "API key not accepted",
        "The Authorization header holds a key this service does not accept.",
        "Ask the service's operator for a valid key, and send it as Authorization: Bearer <key>.",
    ),
    "forbidden": _t(
        403,
        "Forbidden",
        "Requests through this proxy are not allowed.",
        "Send the request directly, or ask the operator to allow the proxy.",
    ),
    "not_found": _t(
        404,
        "Not found",
        "No endpoint or page answers at this path.",
        "See /openapi.json or /docs for the paths offered, such as /v1/predict.",
    ),
    "method_not_allowed": _t(
        405,
        "Method not allowed",
        "The endpoint does not answer this HTTP method (the Allow header lists those it does).",
        "Use POST for /v1/predict, /v1/compare and /v1/locality; GET for the others.",
    ),
    "not_acceptable": _t(
        406,
        "Not acceptable",
        "The Accept header allows no media type the endpoint answers with.",
        "Accept application/json (or text/csv, image/svg+xml where the endpoint offers them).",
    ),
    # -- 408, 413, 414, 415, 417, 431 ------------------------------------------------------
    "request_timeout": _t(
        408,
        "Request timeout",
        "The request's head or body did not arrive within its deadline "
        "(NEARWISE_HEADER_TIMEOUT_S, NEARWISE_BODY_TIMEOUT_S).",
        "Send the whole request at once; compress a large body (Content-Encoding: gzip).",
    ),
    "too_large": _t(
        413,
        "Too large",
        "The request is over a size limit of the service.",
        "Send fewer rows, or split the query table into several requests.",
    ),
    "body_too_large": _t(
        413,
        "Body too large",
        "The body is over NEARWISE_MAX_BODY_BYTES, as sent or once decompressed.",
        "Send fewer rows, or score the query table in chunks (nearwise.client does).",
    ),
    "table_too_large": _t(
        413,
        "Table too large",
        "A table has more rows, columns or cells than the service allows "
        "(NEARWISE_MAX_ROWS, NEARWISE_MAX_COLUMNS, NEARWISE_MAX_CELLS).",
        "Send fewer rows or columns: a random sample of the training rows, or the query in chunks.",
    ),
    "uri_too_long": _t(
        414,
        "URI too long",
        "The request line is longer than the service reads.",
        "Send the fields in the body rather than the query string.",
    ),
    "unsupported_media_type": _t(
        415,
        "Unsupported media type",
        "The body's Content-Type is not JSON, CSV or multipart/form-data.",
        "Send Content-Type: application/json (or text/csv, multipart/form-data).",
    ),
    "unsupported_content_encoding": _t(
        415,
        "Unsupported content encoding",
        "The body has a content coding other than gzip and deflate, or more than one.",
        "Send the body as it is, or gzip-compressed with Content-Encoding: gzip.",
    ),
    "expectation_failed": _t(
        417,
        "Expectation failed",
        "The Expect header asks for something other than 100-continue.",
        "Leave out the Expect header, or send Expect: 100-continue.",
    ),
    "header_too_large": _t(
        431,
        "Request header too large",
        "The request head has too many fields or too long a field.",
        "Send fewer or shorter headers.",
    ),
    # -- 422: readable but invalid -----------------------------------------------------------
    "invalid_request": _t(
        422,
        "Invalid request",
        "The request is readable but not valid: an unknown or misplaced field, a field of the "
        "wrong type, a missing required field.",
        'Move each field to the place the error names, e.g. {"tuning": {"folds": 5}} rather '
        'than {"folds": 5}, and {"params": {"k": 10}} rather than {"k": 10}.',
    ),
    "invalid_value": _t(
        422,
        "Invalid value",
        "A field holds a value outside what it accepts.",
        "Use a value in the range the error names; /v1/methods lists every parameter's range.",
    ),
    "unknown_name": _t(
        422,
        "Unknown name",
        "A name (a method, a parameter, a column) is not one the request or the service has.",
        "Check the spelling against /v1/methods and the table's own column names.",
    ),
    "bad_cell": _t(
        422,
        "Invalid table cell",
        "A cell of a table is not a number where a number is needed (text, a missing value, a "
        "value beyond 1e100).",
        "Fix or remove the row the error names, or declare its token as missing with `na`.",
    ),
    "bad_table": _t(
        422,
        "Invalid table",
        "A table's shape is not valid: rows of unequal length, repeated column names, a "
        "feature the query lacks.",
        "Give every row one cell per column, unique names, and the features in both tables.",
    ),
    "too_few_rows": _t(
        422,
        "Too few rows",
        "There are too few usable rows (or distinct values) for the method and the folds.",
        "Send more rows, use fewer folds, or a simpler method such as linear with degree 1.",
    ),
    "unsupported_dimension": _t(
        422,
        "Unsupported number of features",
        "The method does not take this many features (spline: 1 to 3).",
        "Use additive, knn or linear for more features.",
    ),
    "not_applicable": _t(
        422,
        "Option does not apply",
        "An option was given that does not apply to this method or scheme.",
        "Leave the option out, or choose the method or scheme the error names.",
    ),
    "over_limit": _t(
        422,
        "Over a service limit",
        "The request asks for more work than the service allows (NEARWISE_MAX_COST_S and "
        "the other limits); the detail says how many rows would fit.",
        "Send fewer rows, fewer folds or a smaller grid, as the detail suggests.",
    ),
    # -- 5xx ---------------------------------------------------------------------------------
    "internal_error": _t(
        500,
        "Internal error",
        "The service failed unexpectedly. This is a bug; the error is logged.",
        "Report the request id (X-Request-ID) to the operator.",
    ),
    "unsupported_transfer_coding": _t(
        501,
        "Unsupported transfer coding",
        "The body's Transfer-Encoding is not chunked.",
        "Send the body with Content-Length or Transfer-Encoding: chunked.",
    ),
    "busy": _t(
        503,
        "Busy",
        "Every fit slot is taken; nothing was computed.",
        "Try again after the seconds Retry-After names (nearwise.client does).",
    ),
    "unavailable": _t(
        503,
        "Service unavailable",
        "The service cannot answer now.",
        "Try again after the seconds Retry-After names.",
    ),
    "out_of_memory": _t(
        503,
        "Out of memory",
        "The request needed more memory than a worker may use (NEARWISE_WORKER_MEMORY_MB).",
        "Send fewer rows or query rows, or try again when the service is less busy.",
    ),
    "time_budget_exceeded": _t(
        503,
        "Time budget exceeded",
        "The fit ran past NEARWISE_TIME_BUDGET_S and was stopped.",
        "Send fewer rows, fewer folds or a smaller grid; or try again later.",
    ),
    "client_closed_request": _t(
        503,
        "Client closed the request",
        "The client closed its connection and the work was stopped.",
        "Keep the connection open until the answer arrives (raise the client's timeout).",
    ),
    "http_error": _t(
        400,
        "HTTP error",
        "An HTTP-level error not listed under its own code.",
        "See the detail and the status.",
    ),
}


def title_of(code: str, status: int) -> str:
    """The one title of ``code``; for an unlisted code, the status's reason phrase."""
    known = TYPES.get(code)
    if known is not None:
        return known.title
    from http import HTTPStatus

    try:
        return HTTPStatus(status).phrase
    except ValueError:
        return "Error"


# The place an envelope fault (one about the request as a whole, not about a value in it)
# puts into ``errors[]`` when the raiser named none: the header at fault, the method, or the
# whole body (the JSON Pointer ``""`` names the whole document, RFC 6901 section 5).
_HEADER_AT_FAULT = {
    "not_acceptable": "Accept",
    "unsupported_media_type": "Content-Type",
    "unsupported_content_encoding": "Content-Encoding",
    "unauthorized": "Authorization",
    "invalid_api_key": "Authorization",
}
_WHOLE_BODY = {"unreadable_body", "body_too_large", "too_large", "malformed_request"}


def envelope_place(code: str, detail: str, method: str | None = None) -> list[dict[str, str]]:
    """The ``errors[]`` entry for an envelope fault with no place of its own; ``[]`` for
    any other code (those name their own places, or have none: ``not_found``, 5xx)."""
    if code == "method_not_allowed" and method:
        return [{"method": method, "message": detail}]
    if code in _HEADER_AT_FAULT:
        return [{"header": _HEADER_AT_FAULT[code], "message": detail}]
    if code in _WHOLE_BODY:
        return [{"pointer": "", "message": detail}]
    return []
