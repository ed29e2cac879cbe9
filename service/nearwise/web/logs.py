"""A request id for every request: the incoming ``X-Request-ID`` when it is printable ASCII
of at most 128 characters, otherwise a new uuid4 in hex. It is returned in the ``X-Request-ID``
header of every answer, errors included, and appears in every log line written while the
request is answered (see :mod:`nearwise.jsonlog`).
"""

from __future__ import annotations

import uuid
from collections.abc import Callable, Iterable
from typing import Any

from nearwise.jsonlog import ENV_REQUEST_ID, request_id

HEADER = "X-Request-ID"
MAX_ID_LENGTH = 128

StartResponse = Callable[..., Any]
WsgiApp = Callable[[dict[str, Any], StartResponse], Iterable[bytes]]


def valid_request_id(text: str | None) -> bool:
    """An id sent by a client is kept when it is 1-128 printable ASCII characters."""
    return (
        text is not None and 0 < len(text) <= MAX_ID_LENGTH and all(" " <= c <= "~" for c in text)
    )


def new_request_id() -> str:
    return uuid.uuid4().hex


class RequestIds:
    """WSGI middleware: choose the request id, expose it to logging, return it as a header."""

    def __init__(self, app: WsgiApp) -> None:
        self.app = app

    def __call__(self, environ: dict[str, Any], start_response: StartResponse) -> Any:
        sent = environ.get("HTTP_X_REQUEST_ID")
        rid = sent if valid_request_id(sent) else new_request_id()
        environ[ENV_REQUEST_ID] = rid

        def start(status: str, headers: list[tuple[str, str]], exc_info: Any = None) -> Any:
            kept = [(k, v) for k, v in headers if k.lower() != HEADER.lower()]
            return start_response(status, [*kept, (HEADER, rid)], exc_info)

        token = request_id.set(rid)
        try:
            return self.app(environ, start)
        finally:
            request_id.reset(token)
