"""Rank methods on the same folds and recommend one."""

from __future__ import annotations

from dataclasses import asdict

from flask import Blueprint, Response, current_app

from nearwise.core import compare as core_compare
from nearwise.core.spec import Job
from nearwise.web import figures, metrics, serialize
from nearwise.web.body import negotiate
from nearwise.web.intake import Intake, read_request
from nearwise.web.openapi_parts import problems
from nearwise.web.predict_doc import query_parameters, request_body
from nearwise.web.responses import CompareResponse
from nearwise.web.routes import json_response, operation
from nearwise.web.routes.predict import CSV_ANSWER, PICTURE_ANSWERS, build_job
from nearwise.web.schemas import CompareFields, CompareRequest
from nearwise.web.slots import fit_slot

bp = Blueprint("compare", __name__, url_prefix="/v1")


@bp.post("/compare")
@operation(
    tags=["compare"],
    parameters=query_parameters(CompareFields()),
    requestBody=request_body(CompareRequest, CompareFields(), required=()),
    responses={
        "200": {
            "description": "Every method tuned on the same folds, ranked, and the simplest "
            "adequate one recommended; with a query, its predictions. With `Accept: text/csv`: "
            "the ranking alone, one row per method, best first, with the columns `rank`, "
            "`method`, `params` (every parameter in force as compact JSON text), `error`, "
            "`error_se`, `df`, `cv_r2` (empty where undefined) and `recommended` (`true` or "
            "`false`), in the dialect of `delimiter` and `decimal`; for the recommended "
            "method's predictions as CSV, call /v1/predict with `method=auto`.",
            "headers": {
                "Nearwise-Recommended": {
                    "description": "CSV answers only: the recommended method.",
                    "schema": {"type": "string"},
                },
                "Nearwise-Warnings": {
                    "description": "CSV answers only: data-set-level warning codes, "
                    "comma-separated.",
                    "schema": {"type": "string"},
                },
            },
            "content": {
                "application/json": {"schema": CompareResponse},
                "text/csv": {
                    "schema": {"type": "string", "contentMediaType": "text/csv"},
                    "example": "rank,method,params,error,error_se,df,cv_r2,recommended\r\n"
                    '1,linear,"{""degree"":1}",0.41,0.03,2.0,0.93,true\r\n',
                },
                "image/svg+xml": {
                    "schema": {
                        "type": "string",
                        "contentMediaType": "image/svg+xml",
                        "description": "With `Accept: image/svg+xml` or `format=svg`: every "
                        "method's fitted curve on one chart (one feature) and every method's "
                        "tuning path, the recommended one marked.",
                    },
                },
            },
        },
        **problems(400, 401, 406, 408, 413, 414, 415, 422, 431, 503),
    },
)
def compare() -> Response:
    """Tune every method on the same folds, rank them and recommend the simplest adequate one."""
    answer = negotiate(PICTURE_ANSWERS)
    settings = current_app.extensions["nearwise"]
    intake = read_request(settings, CompareRequest(), CompareFields())
    job = build_job(intake, settings, method="compare")
    with fit_slot():  # taken only now: the body is read, parsed and checked
        resp = _answer(answer, job, intake)
    resp.vary.add("Accept")
    return resp


def _answer(answer: str, job: Job, intake: Intake) -> Response:
    if answer == figures.SVG:
        with metrics.fitting("compare", job.train.n_rows):
            fitted = core_compare.compare(figures.with_curve(job))
        return figures.compare_answer(fitted, intake, job.deadline.check)
    with metrics.fitting("compare", job.train.n_rows):
        result = core_compare.compare(job)
    tuning = {k: v for k, v in asdict(job.tuning).items()}
    if job.tuning.scheme not in ("kfold", "blocks"):
        tuning["folds"] = None
    if result.paths:  # the gap in force, the same for every method (chosen from the data)
        tuning["gap"] = next(iter(result.paths.values())).gap
    if answer != "text/csv":
        return json_response(serialize.compare_document(result, tuning, job.deadline.check))
    resp = Response(serialize.compare_csv(result, intake.dialect), content_type=CSV_ANSWER)
    resp.headers["Nearwise-Recommended"] = result.recommended
    codes = serialize.compare_codes(result)
    if codes:
        resp.headers["Nearwise-Warnings"] = ", ".join(codes)
    return resp
