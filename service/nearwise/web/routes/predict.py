"""Fit, tune and predict."""

from __future__ import annotations

from flask import Blueprint, Response, current_app

from nearwise.core import pipeline
from nearwise.core.spec import IntervalSpec, Job, TuningSpec
from nearwise.web import figures, serialize
from nearwise.web.body import negotiate
from nearwise.web.intake import Intake, read_request
from nearwise.web.openapi_parts import problems
from nearwise.web.predict_doc import REQUEST_BODY, RESPONSE_200, query_parameters
from nearwise.web.routes import json_response, operation
from nearwise.web.schemas import PredictFields, PredictRequest

bp = Blueprint("predict", __name__, url_prefix="/v1")
ANSWERS = ("application/json", "text/csv")
PICTURE_ANSWERS = (*ANSWERS, figures.SVG)
CSV_ANSWER = "text/csv; charset=utf-8; header=present"


@bp.post("/predict")
@operation(
    tags=["predict"],
    parameters=query_parameters(),
    requestBody=REQUEST_BODY,
    responses={"200": RESPONSE_200, **problems(400, 401, 406, 413, 414, 415, 422, 503)},
)
def predict() -> Response:
    """Fit one method to train, tune it by cross-validation and predict at query."""
    answer = negotiate(PICTURE_ANSWERS)
    intake = read_request(current_app.extensions["nearwise"], PredictRequest(), PredictFields())
    budget = current_app.extensions["nearwise"].time_budget_s
    job = build_job(intake, budget)
    if answer == figures.SVG:
        resp = figures.predict_answer(pipeline.run(figures.with_curve(job)), intake)
        resp.vary.add("Accept")
        return resp
    result = pipeline.run(job)
    if answer == "text/csv":
        rows = intake.tables.get("query") or intake.tables["train"]
        text = serialize.predict_csv(result, rows, intake.dialect)
        resp = Response(text, content_type=CSV_ANSWER)
        codes = serialize.dataset_codes(result)
        if codes:
            resp.headers["Nearwise-Warnings"] = ", ".join(codes)
    else:
        resp = json_response(serialize.predict_document(result))
    resp.vary.add("Accept")
    return resp


def build_job(intake: Intake, time_budget_s: float | None = None, method: str | None = None) -> Job:
    """The core's job from the checked fields and parsed tables."""
    f = intake.fields
    query = intake.tables.get("query")
    return Job(
        method=method or f["method"],
        methods=f.get("methods"),
        train=intake.tables["train"].table,
        target=f["target"],
        features=f.get("features"),
        query=query.table if query else None,
        params=f.get("params", {}),
        grid=f.get("grid", {}),
        tuning=TuningSpec(**f.get("tuning", {})),
        interval=IntervalSpec(**f.get("interval", {})),
        time_budget_s=time_budget_s,
    )
