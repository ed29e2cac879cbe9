"""Blueprints, one per concern."""

from collections.abc import Callable
from typing import Any

from flask import Response

from nearwise.web.jsonio import dumps

View = Callable[..., Any]


def operation(**spec: Any) -> Callable[[View], View]:
    """Attach OpenAPI operation details (responses, request body, parameters) to a view."""

    def mark(view: View) -> View:
        view.openapi = spec  # type: ignore[attr-defined]
        return view

    return mark


def json_response(doc: Any, status: int = 200) -> Response:
    """An ``application/json`` response written by :func:`nearwise.web.jsonio.dumps`."""
    return Response(dumps(doc), status=status, mimetype="application/json")
