"""Fit, tune and predict."""

from __future__ import annotations

from flask import Blueprint, Response, current_app, has_request_context, request

from nearwise.core import pipeline
from nearwise.core.budget import Deadline
from nearwise.core.spec import Caps, IntervalSpec, Job, TuningSpec
from nearwise.web import abandon, figures, metrics, serialize
from nearwise.web.body import negotiate
from nearwise.web.intake import Intake, read_request
from nearwise.web.openapi_parts import problems
from nearwise.web.predict_doc import REQUEST_BODY, RESPONSE_200, query_parameters
from nearwise.web.routes import json_response, operation
from nearwise.web.schemas import PredictFields, PredictRequest
from nearwise.web.settings import Settings
from nearwise.web.slots import fit_slot

bp = Blueprint("predict", __name__, url_prefix="/v1")
ANSWERS = ("application/json", "text/csv")
PICTURE_ANSWERS = (*ANSWERS, figures.SVG)
CSV_ANSWER = "text/csv; charset=utf-8; header=present"


@bp.post("/predict")
@operation(
    tags=["predict"],
    parameters=query_parameters(),
    requestBody=REQUEST_BODY,
    responses={"200": RESPONSE_200, **problems(400, 401, 406, 408, 413, 414, 415, 422, 431, 503)},
)
def predict() -> Response:
    """Fit one method to train, tune it by cross-validation and predict at query."""
    answer = negotiate(PICTURE_ANSWERS)
    intake = read_request(current_app.extensions["nearwise"], PredictRequest(), PredictFields())
    job = build_job(intake, current_app.extensions["nearwise"])
    with fit_slot():  # taken only now: the body is read, parsed and checked
        resp = _answer(answer, job, intake)
    resp.vary.add("Accept")
    return resp


def _answer(answer: str, job: Job, intake: Intake) -> Response:
    if answer == figures.SVG:
        with metrics.fitting(job.method, job.train.n_rows):
            fitted = pipeline.run(figures.with_curve(job))
        return figures.predict_answer(fitted, intake, job.deadline.check)
    with metrics.fitting(job.method, job.train.n_rows):
        result = pipeline.run(job)
    check = job.deadline.check  # writing a large answer is work within the budget too
    if answer != "text/csv":
        return json_response(serialize.predict_document(result, check))
    rows = intake.tables.get("query") or intake.tables["train"]
    text = serialize.predict_csv(result, rows, intake.dialect, check)
    resp = Response(text, content_type=CSV_ANSWER)
    resp.headers["Nearwise-Method"] = result.method  # with `auto`, the method it chose
    codes = serialize.dataset_codes(result)
    if codes:
        resp.headers["Nearwise-Warnings"] = ", ".join(codes)
    return resp


def caps(settings: Settings) -> Caps:
    """The work limits the core checks before fitting, named by their variables."""
    limits = ("grid", "fold_fits", "methods", "cost_s", "cells", "hull_cost_s")  # max_<limit>
    return Caps(
        **{k: getattr(settings, f"max_{k}") for k in limits},
        names={k: f"NEARWISE_MAX_{k.upper()}" for k in limits},
    )


def build_job(intake: Intake, settings: Settings | None = None, method: str | None = None) -> Job:
    """The core's job from the checked fields and parsed tables, within ``settings``' limits.

    Its ``deadline`` starts now (the body is parsed) and stops the work once the client has
    gone (:mod:`nearwise.web.abandon`); pass ``job.deadline.check`` on to the pictures and
    the CSV writers, so that the same budget bounds them."""
    f = intake.fields
    query = intake.tables.get("query")
    deadline = None
    if settings is not None:
        environ = request.environ if has_request_context() else {}
        deadline = Deadline(settings.time_budget_s, abandon.watcher(environ))
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
        time_budget_s=settings.time_budget_s if settings else None,
        caps=caps(settings) if settings else Caps(),
        weight_by=f.get("weight_by"),
        categorical=f.get("categorical", ()),
        categorical_reference=f.get("categorical_reference", {}),
        deadline=deadline,
    )
