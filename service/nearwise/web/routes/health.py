"""Liveness and readiness."""

from flask import Blueprint, Response

from nearwise.web.body import negotiate
from nearwise.web.openapi_parts import problems
from nearwise.web.responses import StatusSchema
from nearwise.web.routes import json_response, operation

bp = Blueprint("health", __name__)
# 401 only when API keys are set and the endpoint is left out of NEARWISE_OPEN_ENDPOINTS; 406 for
# an Accept without JSON; 422 for a `format` other than json.
_OK = {
    "200": {"description": "OK", "content": {"application/json": {"schema": StatusSchema}}},
    **problems(401, 406, 422),
}


@bp.get("/healthz")
@operation(tags=["service"], responses=_OK)
def healthz() -> Response:
    """The process is alive."""
    negotiate(["application/json"])
    return json_response({"status": "ok"})


@bp.get("/readyz")
@operation(tags=["service"], responses=_OK)
def readyz() -> Response:
    """The service is ready to answer requests."""
    negotiate(["application/json"])
    return json_response({"status": "ready"})
