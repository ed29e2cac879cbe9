"""Rank methods on the same folds and recommend one."""

from __future__ import annotations

from dataclasses import asdict

from flask import Blueprint, Response, current_app

from nearwise.core import compare as core_compare
from nearwise.web import serialize
from nearwise.web.body import negotiate
from nearwise.web.intake import read_request
from nearwise.web.openapi_parts import problems
from nearwise.web.predict_doc import query_parameters, request_body
from nearwise.web.responses import CompareResponse
from nearwise.web.routes import json_response, operation
from nearwise.web.routes.predict import build_job
from nearwise.web.schemas import CompareFields, CompareRequest

bp = Blueprint("compare", __name__, url_prefix="/v1")


@bp.post("/compare")
@operation(
    tags=["compare"],
    parameters=query_parameters(CompareFields()),
    requestBody=request_body(CompareRequest, CompareFields(), required=()),
    responses={
        "200": {
            "description": "Every method tuned on the same folds, ranked, and the simplest "
            "adequate one recommended; with a query, its predictions.",
            "content": {"application/json": {"schema": CompareResponse}},
        },
        **problems(400, 401, 406, 413, 415, 422, 503),
    },
)
def compare() -> Response:
    """Tune every method on the same folds, rank them and recommend the simplest adequate one."""
    negotiate(("application/json",))
    settings = current_app.extensions["nearwise"]
    intake = read_request(settings, CompareRequest(), CompareFields())
    job = build_job(intake, settings.time_budget_s, method="compare")
    result = core_compare.compare(job)
    tuning = {k: v for k, v in asdict(job.tuning).items()}
    if job.tuning.scheme != "kfold":
        tuning["folds"] = None
    resp = json_response(serialize.compare_document(result, tuning))
    resp.vary.add("Accept")
    return resp
