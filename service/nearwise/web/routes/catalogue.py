"""The catalogue of methods."""

from flask import Blueprint, Response

from nearwise.core import catalogue
from nearwise.web.body import negotiate
from nearwise.web.jsonio import jsonable
from nearwise.web.openapi_parts import problems
from nearwise.web.responses import MethodsResponse
from nearwise.web.routes import json_response, operation

bp = Blueprint("catalogue", __name__, url_prefix="/v1")


@bp.get("/methods")
@operation(
    tags=["methods"],
    responses={
        "200": {
            "description": "The catalogue.",
            "content": {"application/json": {"schema": MethodsResponse}},
        },
        **problems(401, 406, 422),
    },
)
def methods() -> Response:
    """List the methods with their parameters, dimensions and interval kinds."""
    negotiate(["application/json"])
    return json_response(jsonable(catalogue.describe()))
