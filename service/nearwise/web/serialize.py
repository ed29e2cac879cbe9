"""Core results -> JSON documents and CSV text (NaN never leaves: it becomes null)."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict
from typing import Any
from urllib.parse import quote

import numpy as np

from nearwise.core.compare import CompareResult
from nearwise.core.results import Predictions, PredictResult
from nearwise.web.csvio import PLAIN, Dialect, neutral, texts, write_rows, write_table
from nearwise.web.jsonio import dumps, jsonable
from nearwise.web.tables import Parsed

_OPTIONAL = ("residual", "cv_residual", "std_error", "lower", "upper")
#: Rows turned into JSON objects between two checks of the time budget (about 0.03 s).
CHECK_ROWS = 4096
Check = Callable[[], None]


def compare_document(
    result: CompareResult, tuning: dict[str, Any], check: Check | None = None
) -> dict[str, Any]:
    """The JSON answer of ``POST /v1/compare`` (``check``: see :func:`predict_document`)."""
    doc = {
        "target": result.target,
        "features": list(result.features),
        "tuning": jsonable(tuning),
        "ranking": [jsonable(asdict(r)) for r in result.ranking],
        "paths": {m: jsonable(asdict(r)) for m, r in result.paths.items()},
        "recommended": result.recommended,
        "reason": result.reason,
        "warnings": _warnings(result.warnings),
    }
    if result.prediction is not None:
        doc["prediction"] = predict_document(result.prediction, check)
    return doc


def _warnings(notices) -> list[dict[str, Any]]:
    return [
        {"code": n.code, "message": n.message, "rows": [int(r) for r in n.rows]} for n in notices
    ]


def predict_document(result: PredictResult, check: Check | None = None) -> dict[str, Any]:
    """The JSON answer of ``POST /v1/predict``; ``check`` (the request's time budget,
    ``job.deadline.check``) is called between blocks of rows."""
    tuning = asdict(result.tuning)
    doc = {  # what was fit and the predictions first; the model detail after them
        "method": result.method,
        "target": result.target,
        "features": list(result.features),
        "params": jsonable(result.params),
        "predictions": prediction_rows(result.predictions, check),
        "warnings": _warnings(result.warnings),
        "tuning": jsonable(tuning),
        "fit": jsonable(asdict(result.fit)),
        "interval": jsonable(result.interval),
        "model": jsonable(result.model),
    }
    if result.comparison is not None:
        doc["comparison"] = jsonable(result.comparison)
    return doc


def _column(values: np.ndarray) -> list[float | None]:
    """Python floats, with None where the value is NaN or infinite."""
    arr = np.asarray(values, dtype=np.float64)
    out = arr.astype(object)
    out[~np.isfinite(arr)] = None
    return out.tolist()


def _flags(preds: Predictions, n: int) -> list[list[str]]:
    if not preds.flags:
        return [[] for _ in range(n)]
    return [list(f) for f in preds.flags]


def prediction_rows(preds: Predictions, check: Check | None = None) -> list[dict[str, Any]]:
    """One object per row: ``value``, then the optional members present, then ``flags``;
    ``check`` is called before every CHECK_ROWS rows."""
    n = len(preds.value)
    names = ["value", *(k for k in _OPTIONAL if getattr(preds, k) is not None)]
    cols = [_column(getattr(preds, k)) for k in names]
    flags = _flags(preds, n)
    out: list[dict[str, Any]] = []
    for start in range(0, n, CHECK_ROWS):
        if check is not None:
            check()
        at = slice(start, start + CHECK_ROWS)
        out.extend(
            dict([*zip(names, vals, strict=True), ("flags", f)])
            for *vals, f in zip(*(c[at] for c in cols), flags[at], strict=True)
        )
    return out


def dataset_codes(result: PredictResult) -> list[str]:
    """Warning codes that concern the data set as a whole (no rows), in order, once each."""
    return list(dict.fromkeys(n.code for n in result.warnings if not n.rows))


def predict_csv(
    result: PredictResult, rows: Parsed, dialect: Dialect = PLAIN, check: Check | None = None
) -> str:
    """The CSV answer: the rows' own columns as sent, then the prediction columns.

    ``rows`` is the query table, or the training table when there is no query; in that case
    ``residual`` and ``cv_residual`` columns follow ``prediction``. Numbers are written in
    ``dialect`` (delimiter and decimal mark); echoed cells as sent. ``check`` (the request's
    time budget) is called between columns and blocks of rows.
    """
    preds = result.predictions
    n = len(preds.value)
    extra: dict[str, list[Any]] = {"prediction": _texts(preds.value, n, dialect, check)}
    if preds.residual is not None:
        extra["residual"] = _texts(preds.residual, n, dialect, check)
    if preds.cv_residual is not None:
        extra["cv_residual"] = _texts(preds.cv_residual, n, dialect, check)
    for k in ("std_error", "lower", "upper"):
        extra[k] = _texts(getattr(preds, k), n, dialect, check)
    extra["flags"] = [" ".join(f) for f in _flags(preds, n)]
    return write_rows(rows.table.columns, rows.cells, extra, dialect, check)


def _texts(
    values: np.ndarray | None, n: int, dialect: Dialect, check: Check | None = None
) -> list[str | None]:
    if values is None:
        return [None] * n
    if check is not None:
        check()
    return texts(_column(values), dialect)


#: Columns of the CSV answer of ``/v1/compare``, one row per method, best first.
COMPARE_COLUMNS = ("rank", "method", "params", "error", "error_se", "df", "cv_r2", "recommended")


def compare_csv(result: CompareResult, dialect: Dialect = PLAIN) -> str:
    """The ranking as CSV: ``COMPARE_COLUMNS``; ``params`` is compact JSON text (its numbers
    always with a decimal point), ``recommended`` is ``true`` on the recommended method's row."""
    rows = []
    for i, r in enumerate(result.ranking, start=1):
        params = dumps(jsonable(r.params)).decode()
        figures = [_number(v) for v in (r.error, r.error_se, r.df, r.cv_r2)]
        rows.append([i, r.method, params, *figures, r.method == result.recommended])
    return write_table(COMPARE_COLUMNS, rows, dialect)


def compare_codes(result: CompareResult) -> list[str]:
    """Data-set-level warning codes of a comparison, in order, once each."""
    return list(dict.fromkeys(n.code for n in result.warnings if not n.rows))


#: Columns the CSV answer of ``/v1/locality`` adds after the query's own columns.
LOCALITY_COLUMNS = ("nearest", "ratio", "flags")


def locality_csv(
    doc: dict[str, Any], rows: Parsed, dialect: Dialect = PLAIN, check: Check | None = None
) -> str:
    """Per query row: its cells as sent, then ``nearest``, ``ratio`` and ``flags``; ``check``
    (the request's time budget) is called between blocks of rows."""
    query = doc["query"]
    extra: dict[str, list[Any]] = {
        "nearest": texts([_number(q["nearest"]) for q in query], dialect),
        "ratio": texts([_number(q["ratio"]) for q in query], dialect),
        "flags": [" ".join(q["flags"]) for q in query],
    }
    return write_rows(rows.table.columns, rows.cells, extra, dialect, check)


def locality_headers(doc: dict[str, Any], dialect: Dialect = PLAIN) -> dict[str, str]:
    """The data-set figures of a locality CSV answer, as response headers."""
    spacing = _number(doc["typical_spacing"])
    heads = {
        "Nearwise-Rows": str(doc["n"]),
        "Nearwise-Features": ",".join(header_name(f) for f in doc["features"]),
        "Nearwise-Scale": doc["scale"],
        "Nearwise-Typical-Spacing": "" if spacing is None else repr(spacing),
        "Nearwise-Far-Threshold": repr(float(doc["thresholds"]["far_from_data"])),
    }
    codes = list(dict.fromkeys(w["code"] for w in doc["warnings"] if not w["rows"]))
    if codes:
        heads["Nearwise-Warnings"] = ", ".join(codes)
    return heads


def header_name(name: str) -> str:
    """A column name in a response header: neutralized as in CSV answers, then
    percent-encoded outside printable ASCII (and for ``%`` and the separator ``,``), so that
    any name is a valid header value (RFC 3986 percent-encoding of its UTF-8 bytes)."""
    return quote(neutral(name), safe=" !\"#$&'()*+-./:;<=>?@[\\]^_`{|}~")


def _number(value: Any) -> float | None:
    """A finite float, or None."""
    if value is None:
        return None
    v = float(value)
    return v if np.isfinite(v) else None
