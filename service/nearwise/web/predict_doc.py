"""OpenAPI details of POST /v1/predict: its three request bodies and two answers."""

from __future__ import annotations

from typing import Any

import numpy as np

from nearwise.web.openapi_parts import FORM_RULES, form_fields
from nearwise.web.responses import PredictResponse
from nearwise.web.schemas import PredictFields, PredictRequest

_CSV_TABLE = {"type": "string", "contentMediaType": "text/csv"}
_EXAMPLE_CSV = "wind_ms,air_density,power_kw\r\n7.1,1.21,812.0\r\n7.4,1.19,860.5\r\n"


def _multipart_schema(fields_schema=None, required=("method",)) -> dict[str, Any]:
    props = {
        k: v for k, v in form_fields(fields_schema or PredictFields()).items() if ".NAME" not in k
    }
    return {
        "type": "object",
        "description": FORM_RULES,
        "properties": {
            "train": {**_CSV_TABLE, "description": "The training table as CSV."},
            "query": {**_CSV_TABLE, "description": "The rows to predict at, as CSV."},
            **props,
            **_DIALECT_FIELDS,
        },
        "patternProperties": {
            r"^params\.[^.]+$": {
                "type": ["string", "number", "boolean"],
                "description": "A fixed parameter, e.g. `params.k=10`.",
            },
            r"^grid\.[^.]+$": {
                "type": "array",
                "items": {"type": "number"},
                "description": "Candidates, e.g. `grid.k=1,3,5,9`.",
            },
        },
        "required": ["train", *required, "target"],
    }


DIALECT_PARAMETERS: list[dict[str, Any]] = [
    {
        "name": "delimiter",
        "in": "query",
        "required": False,
        "description": "CSV cell separator of the parts read and of a CSV answer: `,` (comma), "
        "`;` (semicolon), `tab` or `|`. Default `,`, or `;` with `decimal=comma`. Also a "
        "form field.",
        "schema": {"type": "string", "enum": [",", "comma", ";", "semicolon", "tab", "|"]},
    },
    {
        "name": "decimal",
        "in": "query",
        "required": False,
        "description": "Decimal mark of CSV numbers read and written: `point` (default) or "
        "`comma`. Never guessed. Also a form field.",
        "schema": {"type": "string", "enum": ["point", "comma"]},
    },
]
_DIALECT_FIELDS = {
    p["name"]: {**p["schema"], "description": p["description"]} for p in DIALECT_PARAMETERS
}
_PLAIN = {
    "schema": {
        "type": "string",
        "description": "JSON (first character other than spaces `{`) or a CSV train table.",
    }
}


def request_body(json_schema, fields_schema, required=("method",)) -> dict[str, Any]:
    """The request bodies (JSON, multipart CSV parts, a text/csv train table, text/plain)."""
    return {
        "required": True,
        "description": "The request as JSON; or CSV tables as multipart parts `train` and "
        "`query` with the other fields as form fields or query-string parameters; or the "
        "train table alone as a text/csv body with the other fields in the query string. "
        + FORM_RULES,
        "content": {
            "application/json": {"schema": json_schema, "example": example(required)},
            "multipart/form-data": {
                "schema": _multipart_schema(fields_schema, required),
                "encoding": {
                    "train": {"contentType": "text/csv"},
                    "query": {"contentType": "text/csv"},
                },
            },
            "text/csv": {
                "schema": {**_CSV_TABLE, "description": "The train table."},
                "example": _EXAMPLE_CSV,
            },
            "text/plain": _PLAIN,
        },
    }


def _turbine_rows(n: int = 30, seed: int = 2026) -> list[list[float]]:
    """Invented turbine readings for the docs page, from a seeded script: a 2,000 kW machine
    whose power follows 2000 / (1 + exp(-(wind - 9) / 1.3)) kW, read at n winds from 3 to
    20 m/s (jittered by up to 0.2 m/s), with N(0, 25 kW) noise, rounded and kept in 0-2,000."""
    rng = np.random.default_rng(seed)
    wind = np.sort(np.round(np.linspace(3.0, 20.0, n) + rng.uniform(-0.2, 0.2, n), 1))
    curve = 2000.0 / (1.0 + np.exp(-(wind - 9.0) / 1.3))
    power = np.clip(np.round(curve + rng.normal(0.0, 25.0, n)), 0.0, 2000.0)
    return [[float(w), float(p)] for w, p in zip(wind, power, strict=True)]


def example(required=("method",)) -> dict[str, Any]:
    """A small valid request for the docs page's Try it out: 30 readings of a power curve,
    answered with a well-tuned fit (about 9 degrees of freedom), and three query winds, the
    last beyond the readings (flagged `outside_range`)."""
    doc: dict[str, Any] = {
        "target": "power_kw",
        "train": {"columns": ["wind_ms", "power_kw"], "rows": _turbine_rows()},
        "query": {"columns": ["wind_ms"], "rows": [[6.0], [12.0], [22.0]]},
        "tuning": {"folds": 5, "seed": 0},
    }
    if "method" in required:
        doc = {"method": "spline", **doc}
    return doc


REQUEST_BODY: dict[str, Any] = request_body(PredictRequest, PredictFields())

RESPONSE_200: dict[str, Any] = {
    "description": "The tuned fit and its predictions. With `Accept: text/csv`: the query's "
    "columns as sent (the train table's when there is no query), then "
    "`prediction` (then `residual` when there is no query), `std_error`, "
    "`lower`, `upper` and `flags` (codes separated by spaces); data-set-level "
    "warning codes go in the `Nearwise-Warnings` header.",
    "headers": {
        "Nearwise-Warnings": {
            "description": "CSV answers only: data-set-level warning codes, comma-separated.",
            "schema": {"type": "string"},
        },
        "Nearwise-Method": {
            "description": "CSV answers only: the method that made the predictions (with "
            "`method: auto`, the one it chose; JSON answers carry it as `method`).",
            "schema": {"type": "string"},
        },
    },
    "content": {
        "application/json": {"schema": PredictResponse},
        "text/csv": {"schema": {"type": "string", "contentMediaType": "text/csv"}},
        "image/svg+xml": {
            "schema": {
                "type": "string",
                "contentMediaType": "image/svg+xml",
                "description": "With `Accept: image/svg+xml` or `format=svg`: a picture of the fit "
                "(one feature: the data, the fitted curve, its interval band and the query points, "
                "flagged ones marked) and of the tuning path (error +/- SE against df, best and "
                "chosen marked).",
            },
        },
    },
}


def query_parameters(fields_schema=None) -> list[dict[str, Any]]:
    """The fields as query-string parameters (read with CSV and multipart bodies only)."""
    return [
        *(
            {
                "name": name,
                "in": "query",
                "required": False,
                "description": "Only with a text/csv, text/plain CSV or multipart/form-data "
                "body. " + spec.pop("description", ""),
                "schema": spec,
                **({"style": "form", "explode": True} if spec.get("type") == "array" else {}),
            }
            for name, spec in form_fields(fields_schema or PredictFields()).items()
            if ".NAME" not in name
        ),
        *DIALECT_PARAMETERS,
    ]
