"""API keys (``NEARWISE_API_KEYS``), CORS (``NEARWISE_CORS_ORIGINS``) and security headers.

A key is sent as ``Authorization: Bearer <key>`` and compared with every configured key in
constant time. When keys are set, ``/v1/`` always needs one; ``/healthz``, ``/readyz`` and
``/metrics`` need one unless listed in ``NEARWISE_OPEN_ENDPOINTS``; the pages (``/``,
``/docs``, its assets) and ``/openapi.json`` stay open. CORS preflight requests (``OPTIONS``)
never need a key.
"""

from __future__ import annotations

import hmac
import re
from collections.abc import Sequence

from flask import Flask, Response, request
from flask_cors import CORS

from nearwise.web.problems import Problem
from nearwise.web.settings import OPEN_ENDPOINT_CHOICES, Settings

REALM = 'Bearer realm="nearwise"'
#: Headers a browser script may read from an answer.
EXPOSED_HEADERS = (
    "X-Request-ID",
    "Retry-After",
    "Nearwise-Warnings",
    "Nearwise-Method",
    "Nearwise-Recommended",
    "Nearwise-Rows",
    "Nearwise-Features",
    "Nearwise-Scale",
    "Nearwise-Typical-Spacing",
    "Nearwise-Far-Threshold",
)
#: Request headers a browser script may send.
ALLOWED_HEADERS = ("Authorization", "Content-Type", "Accept", "X-Request-ID")
#: Policy for every answer that sets none itself (the HTML pages set their own).
DEFAULT_POLICY = "default-src 'none'; frame-ancestors 'none'"
_CREDENTIALS = re.compile(r"[ \t]*(\S+)(?:[ \t]+(.*?))?[ \t]*\Z", re.DOTALL)


def bearer_token(header: str | None) -> str | None:
    """The token of an ``Authorization: Bearer <token>`` header (scheme in any case, spaces
    around either part ignored); None when the header is absent, empty or another scheme."""
    match = _CREDENTIALS.match(header or "")
    if match is None or match.group(1).lower() != "bearer":
        return None
    return match.group(2) or None


def key_matches(sent: bytes, keys: Sequence[bytes]) -> bool:
    """Whether ``sent`` equals one of ``keys``; every key is compared, in constant time, so
    the time taken does not tell which key (or how much of one) matched."""
    matched = False
    for key in keys:
        matched |= hmac.compare_digest(sent, key)
    return matched


def needs_key(path: str, open_endpoints: Sequence[str]) -> bool:
    """Whether a request for ``path`` must carry a key when keys are set."""
    if path == "/v1" or path.startswith("/v1/"):
        return True
    return path in OPEN_ENDPOINT_CHOICES and path not in open_endpoints


def install(app: Flask, settings: Settings) -> None:
    """Check keys before requests, turn CORS on for the allowed origins and add the security
    headers to every answer (errors included)."""
    # the bytes as configured (environment) and as sent (header text is read as latin-1)
    keys = tuple(k.encode("utf-8", "surrogateescape") for k in settings.api_keys)
    open_endpoints = settings.open_endpoints

    if keys:

        @app.before_request
        def require_key() -> None:
            if request.method == "OPTIONS" or not needs_key(request.path, open_endpoints):
                return
            token = bearer_token(request.headers.get("Authorization"))
            if token is None:
                raise Problem(
                    401,
                    "This endpoint needs an API key: send it as `Authorization: Bearer <key>`.",
                    code="unauthorized",
                    headers={"WWW-Authenticate": REALM},
                )
            if not key_matches(token.encode("latin-1", "replace"), keys):
                raise Problem(
                    401,
                    "The API key in the Authorization header is not one this service accepts.",
                    code="invalid_api_key",
                    headers={"WWW-Authenticate": f'{REALM}, error="invalid_token"'},
                )

    if settings.cors_origins:
        _cors(app, settings.cors_origins)

    @app.after_request
    def security_headers(resp: Response) -> Response:
        h = resp.headers
        page = "Content-Security-Policy" in h  # an HTML page with its own policy
        h.setdefault("Content-Security-Policy", DEFAULT_POLICY)
        h.setdefault("X-Content-Type-Options", "nosniff")
        h.setdefault("Referrer-Policy", "no-referrer")
        h.setdefault("X-Frame-Options", "SAMEORIGIN" if page else "DENY")
        if request.path.startswith("/v1/"):
            h["Cache-Control"] = "no-store"
        return resp


def _cors(app: Flask, origins: Sequence[str]) -> None:
    anyone = "*" in origins
    CORS(
        app,
        origins="*" if anyone else list(origins),
        send_wildcard=anyone,
        always_send=False,  # no Origin header: no CORS headers
        methods=["GET", "POST", "OPTIONS"],
        allow_headers=list(ALLOWED_HEADERS),
        expose_headers=list(EXPOSED_HEADERS),
        max_age=600,
        supports_credentials=False,
        vary_header=True,
    )
    if not anyone:

        @app.after_request
        def vary_on_origin(resp: Response) -> Response:
            resp.vary.add("Origin")  # the answer differs by Origin, even with one origin
            return resp
