"""Schemas and OpenAPI details of POST /v1/locality: its request bodies and its answer."""

from __future__ import annotations

from typing import Any

from marshmallow import fields, validate

from nearwise.core.data import SCALES
from nearwise.web import predict_doc
from nearwise.web.fields import Number, StrictInteger
from nearwise.web.openapi_parts import FORM_RULES, form_fields
from nearwise.web.predict_doc import DIALECT_PARAMETERS
from nearwise.web.responses import WarningSchema
from nearwise.web.schemas import (
    DEFAULTS,
    CsvFields,
    QuerySplitTableSchema,
    QueryTableSchema,
    SplitTableSchema,
    Strict,
    TableSchema,
    _doc,
    _name,
    _table,
)


class LocalityFields(CsvFields):
    """Every request field except the tables (the form-field view of a request)."""

    features = fields.List(
        _name(),
        validate=validate.Length(min=1),
        metadata=_doc(
            "Columns to measure; default: every column of `train`.",
            maxItems=DEFAULTS.max_columns,
        ),
    )
    k = StrictInteger(
        validate=validate.Range(min=1),
        metadata=_doc(
            "A neighborhood of k rows (at most the training rows) to add to the table and "
            "judge for `not_local`. Not with `fraction`.",
            example=10,
            maximum=DEFAULTS.max_rows,
        ),
    )
    fraction = Number(
        validate=validate.Range(0, 1, min_inclusive=False),
        metadata=_doc(
            "The same as a fraction of the training rows, in (0, 1]. Not with `k`.",
            exclusiveMinimum=0,
            maximum=1,
        ),
    )
    scale = fields.String(
        validate=validate.OneOf(SCALES),
        metadata=_doc(
            "Feature scaling before distances: `standard` (mean 0, SD 1), `range` (0 to 1) "
            "or `none`.",
            default="standard",
        ),
    )


class LocalityRequest(LocalityFields):
    class Meta(Strict.Meta):
        exclude = ("na",)  # CSV tables only

    train = _table(
        TableSchema,
        SplitTableSchema,
        DEFAULTS.max_rows,
        required=True,
        metadata=_doc("The training table."),
    )
    query = _table(
        QueryTableSchema,
        QuerySplitTableSchema,
        DEFAULTS.max_query_rows,
        metadata=_doc("Rows to judge; holds the feature columns."),
    )


def _num(text: str, nullable: bool = False) -> fields.Float:
    return fields.Float(allow_none=nullable, metadata=_doc(text))


class LocalityRangeSchema(Strict):
    name = fields.String()
    min = _num("Training minimum.")
    max = _num("Training maximum.")
    range = _num("max - min.")
    spacing = _num(
        "Median gap between adjacent distinct values, in the feature's units; null when the "
        "feature has one value.",
        nullable=True,
    )


class LocalityThresholdsSchema(Strict):
    far_from_data = _num("`ratio` above this flags `far_from_data`: max(3, 10^(1/p)).")
    not_local = _num("`edge_fraction` above this gives the `not_local` warning.")
    hull_max_dim = fields.Integer(metadata=_doc("Above this many dimensions no hull test."))


class NeighborhoodSchema(Strict):
    fraction = _num("Fraction r of the training rows.")
    k = fields.Integer(metadata=_doc("Rows it holds: ceil(r n)."))
    edge_fraction = _num(
        "e_p(r) = r^(1/p): the fraction of each feature's range a cube holding r of evenly "
        "spread rows spans (ESL 2nd ed., section 2.5)."
    )
    radius = _num(
        "Median over training rows of the distance to their k-th nearest other row (k capped "
        "at n - 1), in scaled units: the radius that actually holds that fraction."
    )
    requested = fields.Boolean(metadata=_doc("True for the row of `k` or `fraction`."))


class LocalityQueryRowSchema(Strict):
    nearest = _num("Distance to the nearest training row, in scaled units.")
    ratio = _num(
        "`nearest` over `typical_spacing`; null when every training row coincides.",
        nullable=True,
    )
    flags = fields.List(
        fields.String(),
        metadata=_doc(
            "Codes in this order: `outside_range`, `outside_hull`, `far_from_data`, "
            "`hull_not_tested`."
        ),
    )


class LocalityResponse(Strict):
    n = fields.Integer(metadata=_doc("Training rows."))
    p = fields.Integer(metadata=_doc("Features."))
    scale = fields.String(metadata=_doc("Scaling of the distances."))
    features = fields.List(fields.String(), metadata=_doc("Feature names, in order."))
    ranges = fields.List(fields.Nested(LocalityRangeSchema), metadata=_doc("Per feature."))
    typical_spacing = _num(
        "Median distance from a training row to its nearest distinct row, in scaled units."
    )
    thresholds = fields.Nested(LocalityThresholdsSchema)
    neighborhoods = fields.List(
        fields.Nested(NeighborhoodSchema),
        metadata=_doc("Fractions 1 %, 5 %, 10 % and the one asked for, in increasing order."),
    )
    query = fields.List(
        fields.Nested(LocalityQueryRowSchema),
        metadata=_doc("One per query row; empty without a query."),
    )
    warnings = fields.List(fields.Nested(WarningSchema))


_CSV_TABLE = {"type": "string", "contentMediaType": "text/csv"}

REQUEST_BODY: dict[str, Any] = {
    "required": True,
    "description": "The request as JSON; or CSV tables as multipart parts `train` and `query` "
    "with the other fields as form fields or query-string parameters; or the train table "
    "alone as a text/csv body. " + FORM_RULES,
    "content": {
        "application/json": {"schema": LocalityRequest},
        "multipart/form-data": {
            "schema": {
                "type": "object",
                "description": FORM_RULES,
                "properties": {
                    "train": {**_CSV_TABLE, "description": "The training table as CSV."},
                    "query": {**_CSV_TABLE, "description": "The rows to judge, as CSV."},
                    **form_fields(LocalityFields()),
                    **{
                        p["name"]: {**p["schema"], "description": p["description"]}
                        for p in DIALECT_PARAMETERS
                    },
                },
                "required": ["train"],
            },
            "encoding": {
                "train": {"contentType": "text/csv"},
                "query": {"contentType": "text/csv"},
            },
        },
        "text/csv": {"schema": {**_CSV_TABLE, "description": "The train table."}},
        "text/plain": {
            "schema": {
                "type": "string",
                "description": "JSON (first character other than spaces `{`) or a CSV train table.",
            }
        },
    },
}

_FIGURE_HEADERS = {
    "Nearwise-Rows": ("Training rows (`n`).", "integer"),
    "Nearwise-Features": ("Feature names, comma-separated (`features`).", "string"),
    "Nearwise-Scale": ("Scaling of the distances (`scale`).", "string"),
    "Nearwise-Typical-Spacing": ("`typical_spacing`, in scaled units.", "number"),
    "Nearwise-Far-Threshold": ("`thresholds.far_from_data`.", "number"),
    "Nearwise-Warnings": ("Data-set-level warning codes (`not_local`), comma-separated.", "string"),
}

RESPONSE_200: dict[str, Any] = {
    "description": "The diagnostics. Distances and radii are in scaled units (see `scale`). "
    "With `Accept: text/csv` (a `query` is then required): one row per query row, its "
    "columns as sent, then `nearest`, `ratio` and `flags` (codes separated by spaces), in "
    "the dialect of `delimiter` and `decimal`; the data-set figures go in the headers "
    "(CSV answers only).",
    "headers": {
        name: {"description": "CSV answers only. " + text, "schema": {"type": kind}}
        for name, (text, kind) in _FIGURE_HEADERS.items()
    },
    "content": {
        "application/json": {"schema": LocalityResponse},
        "text/csv": {"schema": {"type": "string", "contentMediaType": "text/csv"}},
    },
}


def query_parameters() -> list[dict[str, Any]]:
    """The fields as query-string parameters (read with CSV and multipart bodies only)."""
    return predict_doc.query_parameters(LocalityFields())
