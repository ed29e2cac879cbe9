"""The application factory. Nothing happens at import time."""

from __future__ import annotations

import logging
from collections.abc import Callable
from pathlib import Path

from flask import Flask, Response

from nearwise.web import coding, guards, logs, metrics, openapi, problems, slots
from nearwise.web.settings import Settings, log_level_number


def create_app(settings: Settings | None = None, fit_pool: Path | None = None) -> Flask:
    """A configured app; ``settings`` default to the ``NEARWISE_*`` environment variables.

    ``fit_pool`` is the directory of the service-wide fit slots that ``nearwise serve`` makes
    before forking its workers; without it the slots are this process's own.
    """
    settings = settings if settings is not None else Settings.from_env()
    app = Flask("nearwise", static_folder=None)
    app.config["MAX_CONTENT_LENGTH"] = settings.max_body_bytes
    app.extensions["nearwise"] = settings
    logging.getLogger("nearwise").setLevel(log_level_number(settings))
    coding.install(app)  # first: its hook runs last, on the answer as the others left it
    problems.install(app)
    metrics.install(app)  # first: its hook notes the URL rule before any check can refuse
    guards.install(app, settings)
    slots.install(app, settings.worker_fit_cap, settings.fit_slots, fit_pool)
    app.wsgi_app = logs.RequestIds(app.wsgi_app)  # type: ignore[method-assign]

    from nearwise.web.routes import catalogue, cell, compare, health, locality, predict
    from nearwise.web.routes import metrics as metrics_route

    blueprints = (predict, compare, locality, cell, catalogue, health, metrics_route)
    for bp in (m.bp for m in blueprints):
        app.register_blueprint(bp)
    app.add_url_rule("/openapi.json", "openapi", _openapi_view(app))
    from nearwise.web.routes import docs, problem_pages  # pages, open without an API key

    app.register_blueprint(docs.bp)
    app.register_blueprint(problem_pages.bp)
    return app


def _openapi_view(app: Flask) -> Callable[[], Response]:
    cache: dict[str, bytes] = {}

    def openapi_document() -> Response:
        """The OpenAPI 3.1 document of this service."""
        from nearwise.web.body import negotiate

        negotiate(["application/json"])
        if "doc" not in cache:
            cache["doc"] = openapi.render(app).encode()
        return Response(cache["doc"], mimetype="application/json")

    return openapi_document
