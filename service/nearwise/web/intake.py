"""One predict-style request, whatever its media type -> checked fields and parsed tables.

``application/json``: the whole request as one document. ``multipart/form-data``: CSV parts
``train`` and ``query``, the other fields as form fields or query-string parameters.
``text/csv``: the body is ``train``; the other fields come from the query string.
``text/plain`` (what a browser add-in may send without a preflight): JSON when its first
character other than spaces (and a byte-order mark) is ``{``, otherwise a ``text/csv`` body.

``delimiter`` and ``decimal`` (query string or form field; not part of the JSON document) set
the CSV dialect of the parts read and of a CSV answer; see :mod:`nearwise.web.csvio`.

Limits are checked before anything large is built: a JSON body whose commas and brackets
(outside strings) count more values or arrays than a request within the limits holds is
refused (413) before it is parsed (:func:`json_bounds`); CSV parts are checked while read
(:func:`nearwise.web.csvio.read_csv`); a list form field holds at most :func:`most_items`.
"""

from __future__ import annotations

import io
import json
from dataclasses import dataclass
from typing import Any

from flask import g, request
from marshmallow import Schema
from werkzeug.datastructures import FileStorage, MultiDict
from werkzeug.formparser import FormDataParser

from nearwise.core.errors import InvalidValue, Where, shown
from nearwise.web import csv_cells, forms, prescan, table_shapes
from nearwise.web.body import read_body, unsupported_media_type
from nearwise.web.csvio import PLAIN, CsvPart, Dialect, dialect_from, read_csv
from nearwise.web.jsonio import DuplicateKey, TooDeep, loads_strict
from nearwise.web.problems import Problem
from nearwise.web.settings import Settings
from nearwise.web.tables import Limits, Parsed
from nearwise.web.validation import load

JSON, MULTIPART, CSV, TEXT = "application/json", "multipart/form-data", "text/csv", "text/plain"
READS = (JSON, MULTIPART, CSV, TEXT)
TABLES = ("train", "query")
#: Parameters that set the CSV dialect; read beside the fields, never part of the document.
DIALECT = ("delimiter", "decimal")
#: Query-string parameters that shape the answer, not the request: read by the route.
ANSWER = ("format",)


@dataclass(frozen=True)
class Intake:
    fields: dict[str, Any]
    tables: dict[str, Parsed]
    dialect: Dialect = PLAIN


def read_request(settings: Settings, full: Schema, fields_only: Schema) -> Intake:
    """Read and check the body; ``full`` validates a JSON body, ``fields_only`` form fields."""
    mimetype = request.mimetype
    if mimetype not in READS:
        raise unsupported_media_type(READS)
    charset = request.mimetype_params.get("charset", "utf-8").lower()
    if charset not in ("utf-8", "us-ascii"):
        raise Problem(415, f"Bodies are read as UTF-8; got charset={shown(charset)}.")
    body = read_body(settings.max_body_bytes)
    limits = Limits(
        settings.max_rows, settings.max_columns, settings.max_cells, settings.max_query_rows
    )
    if mimetype == TEXT:
        mimetype = JSON if body.removeprefix(b"\xef\xbb\xbf").lstrip()[:1] == b"{" else CSV
        body = body.removeprefix(b"\xef\xbb\xbf") if mimetype == JSON else body
    if mimetype == JSON:
        _check_json_size(body, settings)
        return _json(body, limits, full)
    if mimetype == CSV:
        if request.mimetype_params.get("header", "present").lower() != "present":
            raise Problem(
                415,
                "A text/csv body must start with a header line naming the "
                "columns (header=present).",
            )
        if not body:
            raise Problem(
                400, f"The {request.mimetype} body is empty; it should hold the train table."
            )
        return _csv({"train": [body]}, MultiDict(), limits, fields_only, most_items(settings))
    files, form = _multipart(body, settings.max_body_bytes)
    form = MultiDict([*form.items(multi=True)])
    return _csv(files, form, limits, fields_only, most_items(settings))


def most_items(settings: Settings) -> int:
    """The most items a list field (``features``, ``methods``, ``grid.NAME``) of a request
    within the limits holds: more is always refused, so it is never parsed."""
    return max(settings.max_columns, settings.max_grid, settings.max_methods)


def json_bounds(settings: Settings) -> tuple[int, int]:
    """The most values and the most arrays and objects a JSON request within the limits
    holds: both tables at their cell and row limits, their column names, and room for the
    other fields (every grid at its limit for a dozen parameters, and more). A row counts
    twice: its array or object, and its entry in a split shape's `index` (row objects' keys
    are not values)."""
    query_rows = settings.max_rows if settings.max_query_rows is None else settings.max_query_rows
    containers = settings.max_rows + query_rows + 1_000
    other = 2 * settings.max_columns + 12 * settings.max_grid + 1_000
    return 2 * settings.max_cells + 2 * containers + other, containers


def _check_json_size(body: bytes, settings: Settings) -> None:
    """Refuse (413) a JSON body that holds more values, or more arrays and objects, than any
    request within the limits, before it is parsed (:mod:`nearwise.web.prescan`)."""
    values, containers = json_bounds(settings)
    found = prescan.json_over(body, values, containers)
    if found is not None:
        raise Problem(
            413,
            f"The body holds up to {found[0]} values in {found[1]} arrays and objects (by its "
            f"commas and brackets); a request within the limits holds at most {values} values "
            f"in {containers} arrays and objects (NEARWISE_MAX_ROWS, NEARWISE_MAX_QUERY_ROWS, "
            "NEARWISE_MAX_CELLS, NEARWISE_MAX_COLUMNS). Send fewer rows per request.",
            code="table_too_large",
        )


def _json(body: bytes, limits: Limits, schema: Schema) -> Intake:
    try:
        parsed = loads_strict(body)
    except UnicodeDecodeError as exc:
        raise Problem(400, f"The body is not UTF-8: {exc.reason} at byte {exc.start}.") from None
    except TooDeep as exc:
        raise Problem(400, f"The body is not readable: {exc}.") from None
    except json.JSONDecodeError as exc:
        detail = f"The body is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}."
        place = {"line": exc.lineno, "character": exc.colno, "message": exc.msg}
        raise Problem(400, detail, [place]) from None
    except DuplicateKey as exc:
        raise InvalidValue(f"The body is ambiguous: {exc}.", [Where(exc.path, str(exc))]) from None
    extra = [k for k in request.args if k not in DIALECT and k not in ANSWER]
    if extra:
        raise Problem(
            422,
            "With a JSON body every field goes in the body; query-string parameters are not read "
            "(except `delimiter` and `decimal`, for a CSV answer, and `format`).",
            [{"parameter": shown(k), "message": "not read with a JSON body"} for k in extra],
            code="invalid_request",
        )
    dialect = _dialect(request.args, MultiDict())
    if isinstance(parsed.doc, dict) and "na" in parsed.doc:
        raise csv_cells.na_in_json()
    data = load(schema, parsed.doc)
    shapes: dict[str, table_shapes.Shape] = {}
    g.json_tables = shapes  # how each table was sent, for the pointers of later errors
    tables = {
        name: table_shapes.read(name, data[name], limits, parsed.saw_constant, shapes)
        for name in TABLES
        if name in data
    }
    return Intake({k: v for k, v in data.items() if k not in TABLES}, tables, dialect)


def _dialect(args: MultiDict, form: MultiDict) -> Dialect:
    """The CSV dialect from the query string or form fields, each parameter given once."""
    values = {}
    for name in DIALECT:
        sent = [*args.getlist(name), *form.getlist(name)]
        if len(sent) > 1:
            raise forms.twice(name)
        if sent:
            values[name] = sent[0]
    return dialect_from(values)


def _multipart(body: bytes, limit: int) -> tuple[dict[str, list[bytes]], MultiDict]:
    parser = FormDataParser(
        max_form_memory_size=limit, max_content_length=limit, max_form_parts=1000, silent=False
    )
    try:
        _, form, files = parser.parse(
            io.BytesIO(body), MULTIPART, len(body), dict(request.mimetype_params)
        )
    except ValueError as exc:
        raise Problem(400, f"The multipart body is not readable: {exc}.") from None
    try:
        return _split_parts([*files.items(multi=True), *form.items(multi=True)])
    finally:
        for item in files.values():
            item.close()


def _split_parts(items: list[tuple[str, Any]]) -> tuple[dict[str, list[bytes]], MultiDict]:
    parts: dict[str, list[bytes]] = {}
    rest = MultiDict()
    for name, item in items:
        if not name:
            raise Problem(
                400,
                "A multipart part has no readable name: its Content-Disposition header needs "
                'name="..." (train, query or a field name) on one line.',
            )
        if name in TABLES:
            data = item.read() if isinstance(item, FileStorage) else item.encode()
            parts.setdefault(name, []).append(data)
        elif isinstance(item, FileStorage):
            raise InvalidValue(
                f"A file part named `{shown(name)}` was sent; only `train` and `query` are read "
                "as files.",
                [Where((name,), "unknown part")],
            )
        else:
            rest.add(name, item)
    return parts, rest


def _csv(
    parts: dict[str, list[bytes]], form: MultiDict, limits: Limits, schema: Schema, items: int
) -> Intake:
    dialect = _dialect(request.args, form)
    merged = MultiDict(
        [(k, v) for k, v in form.items(multi=True) if k not in DIALECT and k not in ANSWER]
    )
    for name in request.args:
        if name in DIALECT or name in ANSWER:
            continue
        if name in TABLES:
            raise InvalidValue(
                f"`{name}` is a table: send it as a CSV part of a multipart/form-data body.",
                [Where((name,), "not a table")],
            )
        if name in merged:
            raise forms.twice(name)
        merged.setlist(name, request.args.getlist(name))
    doc = forms.collect(((k, merged.getlist(k)) for k in merged), schema, items)
    data = load(schema, doc)
    missing = csv_cells.missing_from(data.pop("na", None))
    csv_parts: dict[str, CsvPart] = {}
    g.csv_parts = csv_parts
    tables: dict[str, Parsed] = {}
    for name in TABLES:
        sent = parts.get(name, [])
        if len(sent) > 1:
            raise forms.twice(name)
        if sent:
            tables[name] = read_csv(name, sent[0], limits, csv_parts, dialect, missing)
    if "train" not in tables:
        raise InvalidValue(
            "The `train` table is missing: send it as a CSV part named train.",
            [Where(("train",), "Missing data for required field.")],
        )
    return Intake(data, tables, dialect)
