"""Liveness and readiness."""

from flask import Blueprint, Response

from nearwise.web.body import negotiate
from nearwise.web.responses import StatusSchema
from nearwise.web.routes import json_response, operation

bp = Blueprint("health", __name__)
_OK = {"200": {"description": "OK", "content": {"application/json": {"schema": StatusSchema}}}}


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
