"""Locality diagnostics without fitting."""

from __future__ import annotations

from flask import Blueprint, Response, current_app, request

from nearwise.core import columns
from nearwise.core.budget import Deadline
from nearwise.core.errors import InvalidValue, Where
from nearwise.core.locality import summary
from nearwise.web import abandon, metrics, serialize
from nearwise.web.body import negotiate
from nearwise.web.intake import read_request
from nearwise.web.jsonio import jsonable
from nearwise.web.locality_doc import (
    REQUEST_BODY,
    RESPONSE_200,
    LocalityFields,
    LocalityRequest,
    query_parameters,
)
from nearwise.web.openapi_parts import problems
from nearwise.web.routes import json_response, operation
from nearwise.web.routes.predict import ANSWERS, CSV_ANSWER, caps
from nearwise.web.slots import fit_slot

bp = Blueprint("locality", __name__, url_prefix="/v1")


@bp.post("/locality")
@operation(
    tags=["locality"],
    parameters=query_parameters(),
    requestBody=REQUEST_BODY,
    responses={"200": RESPONSE_200, **problems(400, 401, 406, 408, 413, 414, 415, 422, 431, 503)},
)
def locality() -> Response:
    """Measure how well the training rows cover their space and where query rows fall."""
    answer = negotiate(ANSWERS)
    intake = read_request(current_app.extensions["nearwise"], LocalityRequest(), LocalityFields())
    f = intake.fields
    query = intake.tables.get("query")
    if answer == "text/csv" and query is None:
        raise InvalidValue(
            "A CSV answer lists the query rows with their distances and flags; send a `query` "
            "table, or ask for JSON (Accept: application/json) for the data-set summary alone.",
            [Where(("query",), "needed for a CSV answer")],
        )
    metrics.training_rows(intake.tables["train"].table.n_rows)
    names, X, Xq = columns.feature_arrays(
        intake.tables["train"].table, f.get("features"), query.table if query else None
    )
    settings = current_app.extensions["nearwise"]
    # The time budget starts now; it also stops the work once the client has gone. summary
    # measures the work and refuses it above NEARWISE_MAX_COST_S (422 over_limit) first.
    deadline = Deadline(settings.time_budget_s, abandon.watcher(request.environ))
    with fit_slot():  # taken only now: the body is read, parsed and checked
        doc = summary(
            X,
            names,
            k=f.get("k"),
            fraction=f.get("fraction"),
            Xq=Xq,
            scale=f.get("scale", "standard"),
            caps=caps(settings),
            deadline=deadline,
        )
    doc = jsonable(doc)
    if answer == "text/csv" and query is not None:
        text = serialize.locality_csv(doc, query, intake.dialect, check=deadline.check)
        resp = Response(text, content_type=CSV_ANSWER)
        resp.headers.update(serialize.locality_headers(doc))
    else:
        resp = json_response(doc)
    resp.vary.add("Accept")
    return resp
