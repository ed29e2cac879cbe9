"""SVG answers: pick from the request what a picture needs and hand it to web.pictures."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import numpy as np
from flask import Response

from nearwise.core.compare import CompareResult
from nearwise.core.results import PredictResult
from nearwise.core.spec import Job
from nearwise.web import pictures
from nearwise.web.intake import Intake

CURVE_POINTS = 200
SVG = pictures.MEDIA_TYPE


def with_curve(job: Job) -> Job:
    """The job asking the core for the fit on an even grid (one feature only)."""
    return replace(job, curve_points=CURVE_POINTS)


def _column(intake: Intake, table: str, name: str) -> np.ndarray | None:
    parsed = intake.tables.get(table)
    if parsed is None or name not in parsed.table.columns:
        return None
    return parsed.table.values[:, parsed.table.columns.index(name)]


def _training(intake: Intake, feature: str, target: str):
    x, y = _column(intake, "train", feature), _column(intake, "train", target)
    usable = np.flatnonzero(np.isfinite(y))
    return x[usable], y[usable], usable


def predict_answer(
    result: PredictResult, intake: Intake, check: Callable[[], None] | None = None
) -> Response:
    """The SVG answer of a predict; ``check`` (the request's time budget,
    ``job.deadline.check``) is passed on to the drawing."""
    x = y = rows = query = None
    if len(result.features) == 1:
        x, y, rows = _training(intake, result.features[0], result.target)
        query = _column(intake, "query", result.features[0])
    svg = pictures.predict_svg(result, x, y, query, train_rows=rows, check=check)
    return Response(svg, content_type=f"{SVG}; charset=utf-8")


def compare_answer(
    result: CompareResult, intake: Intake, check: Callable[[], None] | None = None
) -> Response:
    """The SVG answer of a comparison; ``check`` as for :func:`predict_answer`."""
    x = y = None
    if len(result.features) == 1:
        x, y, _ = _training(intake, result.features[0], result.target)
    svg = pictures.compare_svg(result, x, y, check=check)
    return Response(svg, content_type=f"{SVG}; charset=utf-8")
