"""The OpenAPI 3.1 document, generated from the schemas and the views' docstrings."""

from __future__ import annotations

import copy
import inspect
import json
import re
from typing import Any

from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin
from flask import Flask

from nearwise import __version__
from nearwise.web import openapi_parts, responses, schemas
from nearwise.web.settings import OPEN_ENDPOINT_CHOICES

_METHODS = ("get", "post", "put", "patch", "delete")
_SCHEMAS = {  # nested schemas before the schemas that hold them
    "Table": schemas.TableSchema,
    "QueryTable": schemas.QueryTableSchema,
    "SplitTable": schemas.SplitTableSchema,  # the tables' other shapes: web/table_shapes.py
    "QuerySplitTable": schemas.QuerySplitTableSchema,
    "Tuning": schemas.TuningSchema,
    "Interval": schemas.IntervalSchema,
    "PredictRequest": schemas.PredictRequest,
    "PathEntry": responses.PathEntrySchema,
    "TuningReport": responses.TuningReportSchema,
    "FitReport": responses.FitReportSchema,
    "IntervalReport": responses.IntervalReportSchema,
    "Prediction": responses.PredictionSchema,
    "Warning": responses.WarningSchema,
    "PredictResponse": responses.PredictResponse,
    "Methods": responses.MethodsResponse,
    "Status": responses.StatusSchema,
    "ErrorEntry": responses.ErrorEntrySchema,
    "Problem": responses.ProblemSchema,
}
SCHEME = "bearerAuth"
BEARER = {
    "type": "http",
    "scheme": "bearer",
    "description": "One of the keys in NEARWISE_API_KEYS, sent as `Authorization: Bearer <key>`.",
}
DESCRIPTION = (
    "Fits kNN, linear and spline models to a table, tunes their flexibility by "
    "cross-validation and returns predictions. Every error is application/problem+json "
    "(RFC 9457). When NEARWISE_API_KEYS is set, /v1 endpoints need an API key sent as "
    "`Authorization: Bearer <key>`; so do /healthz, /readyz and /metrics when left out of "
    "NEARWISE_OPEN_ENDPOINTS. Every answer carries an `X-Request-ID` header: the one sent, "
    "when it is printable ASCII of at most 128 characters, or a new one."
)


def build(app: Flask) -> dict[str, Any]:
    """The OpenAPI document of ``app`` as a dict."""
    spec = APISpec(
        title="nearwise",
        version=__version__,
        openapi_version="3.1.0",
        plugins=[MarshmallowPlugin(schema_name_resolver=_name)],
        info={"description": DESCRIPTION},
    )
    for name, schema in _SCHEMAS.items():
        spec.components.schema(name, schema=schema)
    spec.components.security_scheme(SCHEME, BEARER)
    rules = sorted(app.url_map.iter_rules(), key=lambda r: r.rule)
    for rule in rules:
        if rule.endpoint == "static" or rule.endpoint.endswith(".static"):  # files, not API
            continue
        view = app.view_functions[rule.endpoint]
        ops = {
            m.lower(): _operation(view, rule.rule)
            for m in sorted(rule.methods or ())
            if m.lower() in _METHODS
        }
        spec.path(path=_templated(rule.rule), operations=ops)
    return spec.to_dict()


def _operation(view: Any, path: str) -> dict[str, Any]:
    doc = inspect.getdoc(view) or ""
    summary, _, rest = doc.partition("\n")
    op = copy.deepcopy(getattr(view, "openapi", {}))
    op.setdefault("responses", {"200": {"description": "OK"}})
    op["summary"] = summary.strip()
    op["operationId"] = view.__name__
    if rest.strip():
        op["description"] = rest.strip()
    if path.startswith("/v1/") or path in OPEN_ENDPOINT_CHOICES:
        op["security"] = [{}, {SCHEME: []}]  # no key needed while NEARWISE_API_KEYS is unset
    return openapi_parts.common_headers(openapi_parts.answer_format(op))


def _templated(rule: str) -> str:
    """A Flask rule's path in OpenAPI's form: ``/problems/<code>`` -> ``/problems/{code}``."""
    return re.sub(r"<(?:[^:<>]+:)?([^:<>]+)>", r"{\1}", rule)


def _name(schema: Any) -> str:
    cls = schema if isinstance(schema, type) else type(schema)
    for name, known in _SCHEMAS.items():
        if known is cls:
            return name
    return cls.__name__.removesuffix("Schema")


def render(app: Flask) -> str:
    """The document as deterministic text: sorted keys, two-space indent, final newline."""
    return json.dumps(build(app), sort_keys=True, indent=2, ensure_ascii=False) + "\n"
