"""Core results -> JSON documents and CSV text (NaN never leaves: it becomes null)."""

from __future__ import annotations

from dataclasses import asdict
from typing import Any

import numpy as np

from nearwise.core.compare import CompareResult
from nearwise.core.results import Predictions, PredictResult
from nearwise.web.csvio import write_predictions
from nearwise.web.jsonio import jsonable
from nearwise.web.tables import Parsed

_OPTIONAL = ("residual", "cv_residual", "std_error", "lower", "upper")


def compare_document(result: CompareResult, tuning: dict[str, Any]) -> dict[str, Any]:
    """The JSON answer of ``POST /v1/compare``."""
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
        doc["prediction"] = predict_document(result.prediction)
    return doc


def _warnings(notices) -> list[dict[str, Any]]:
    return [
        {"code": n.code, "message": n.message, "rows": [int(r) for r in n.rows]} for n in notices
    ]


def predict_document(result: PredictResult) -> dict[str, Any]:
    """The JSON answer of ``POST /v1/predict``."""
    tuning = asdict(result.tuning)
    doc = {
        "method": result.method,
        "target": result.target,
        "features": list(result.features),
        "params": jsonable(result.params),
        "tuning": jsonable(tuning),
        "fit": jsonable(asdict(result.fit)),
        "model": jsonable(result.model),
        "interval": jsonable(result.interval),
        "predictions": prediction_rows(result.predictions),
        "warnings": _warnings(result.warnings),
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


def prediction_rows(preds: Predictions) -> list[dict[str, Any]]:
    """One object per row: ``value``, then the optional members present, then ``flags``."""
    n = len(preds.value)
    names = ["value", *(k for k in _OPTIONAL if getattr(preds, k) is not None)]
    cols = [_column(getattr(preds, k)) for k in names]
    flags = _flags(preds, n)
    return [
        dict([*zip(names, vals, strict=True), ("flags", f)])
        for *vals, f in zip(*cols, flags, strict=True)
    ]


def dataset_codes(result: PredictResult) -> list[str]:
    """Warning codes that concern the data set as a whole (no rows), in order, once each."""
    return list(dict.fromkeys(n.code for n in result.warnings if not n.rows))


def predict_csv(result: PredictResult, rows: Parsed) -> str:
    """The CSV answer: the rows' own columns as sent, then the prediction columns.

    ``rows`` is the query table, or the training table when there is no query; in that case
    ``residual`` and ``cv_residual`` columns follow ``prediction``.
    """
    preds = result.predictions
    n = len(preds.value)
    extra: dict[str, list[Any]] = {"prediction": _texts(preds.value, n)}
    if preds.residual is not None:
        extra["residual"] = _texts(preds.residual, n)
    if preds.cv_residual is not None:
        extra["cv_residual"] = _texts(preds.cv_residual, n)
    for k in ("std_error", "lower", "upper"):
        extra[k] = _texts(getattr(preds, k), n)
    extra["flags"] = [" ".join(f) for f in _flags(preds, n)]
    return write_predictions(rows.table.columns, rows.cells, extra)


def _texts(values: np.ndarray | None, n: int) -> list[str | None]:
    if values is None:
        return [None] * n
    return [None if v is None else repr(v) for v in _column(values)]
