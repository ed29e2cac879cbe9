"""Prometheus metrics of every worker."""

from flask import Blueprint, Response

from nearwise.web.metrics import CONTENT_TYPE, exposition
from nearwise.web.openapi_parts import problems
from nearwise.web.routes import operation

bp = Blueprint("metrics", __name__)


@bp.get("/metrics")
@operation(
    tags=["service"],
    responses={
        "200": {
            "description": "Every metric in the Prometheus text exposition format 0.0.4, "
            "summed over the worker processes: requests by URL rule, HTTP method and status "
            "(`nearwise_http_requests_total`), answer latency by URL rule "
            "(`nearwise_http_request_duration_seconds`), fitting time by method "
            "(`nearwise_fit_duration_seconds`), training rows per request "
            "(`nearwise_training_rows`) and refused requests by problem code and status "
            "(`nearwise_rejections_total`).",
            "content": {
                CONTENT_TYPE: {
                    "schema": {"type": "string"},
                    "example": "# HELP nearwise_http_requests_total HTTP requests answered, "
                    "by URL rule, HTTP method and status.\n"
                    "# TYPE nearwise_http_requests_total counter\n"
                    'nearwise_http_requests_total{method="POST",route="/v1/predict",'
                    'status="200"} 12.0\n',
                }
            },
        },
        **problems(401),
    },
)
def metrics() -> Response:
    """Prometheus metrics: request counts and latencies, fitting times, rows and refusals.

    Answered without an API key unless `/metrics` is left out of NEARWISE_OPEN_ENDPOINTS.
    """
    return Response(exposition(), content_type=CONTENT_TYPE)
