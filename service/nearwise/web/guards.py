"""API keys (``NEARWISE_API_KEYS``) and CORS (``NEARWISE_CORS_ORIGINS``)."""

from __future__ import annotations

import hmac

from flask import Flask, Response, request

from nearwise.web.problems import Problem
from nearwise.web.settings import Settings

_GUARDED = "/v1/"


def install(app: Flask, settings: Settings) -> None:
    """Check keys before /v1 requests and add CORS headers to answers for allowed origins."""
    keys = tuple(k.encode() for k in settings.api_keys)
    origins = settings.cors_origins

    if keys:

        @app.before_request
        def require_key() -> None:
            if not request.path.startswith(_GUARDED) or request.method == "OPTIONS":
                return
            sent = request.headers.get("X-API-Key", "").encode()
            if not any(hmac.compare_digest(sent, k) for k in keys):
                raise Problem(
                    401,
                    "This service needs an API key: send it in the X-API-Key header.",
                    headers={"WWW-Authenticate": 'ApiKey header="X-API-Key"'},
                )

    if origins:

        @app.after_request
        def cors(resp: Response) -> Response:
            origin = request.headers.get("Origin")
            if origin and ("*" in origins or origin in origins):
                resp.headers["Access-Control-Allow-Origin"] = "*" if "*" in origins else origin
                resp.headers["Access-Control-Expose-Headers"] = "Nearwise-Warnings"
                if request.method == "OPTIONS":
                    resp.headers["Access-Control-Allow-Methods"] = "GET, POST, OPTIONS"
                    resp.headers["Access-Control-Allow-Headers"] = "Content-Type, X-API-Key"
                    resp.headers["Access-Control-Max-Age"] = "600"
            resp.vary.add("Origin")
            return resp
