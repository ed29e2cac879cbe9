"""JSON log lines on standard output: the service's own records and gunicorn's.

Every line is one JSON object with ``time``, ``level``, ``logger``, ``message`` and
``request_id`` (null outside a request). Access lines, written by gunicorn once the answer has
been sent, add ``method``, ``route`` (the URL rule matched, or null), ``path``, ``status``,
``duration_ms`` and ``bytes``. Request bodies, query strings and headers are never logged, so
neither data nor API keys reach the log: the service never writes them, and :func:`scrub`
removes them from any message (and exception message) another library writes, gunicorn's
"Invalid request" lines among them.

This module imports neither Flask nor ``prometheus_client``: gunicorn's master process loads it
before any worker exists, and ``PROMETHEUS_MULTIPROC_DIR`` must be set before the first import
of ``prometheus_client``.
"""

from __future__ import annotations

import json
import logging
import re
import sys
from contextvars import ContextVar
from datetime import UTC, datetime
from typing import Any, TextIO

from gunicorn.glogging import Logger as GunicornBaseLogger

#: WSGI environ keys the web layer sets for the access log and the metrics.
ENV_REQUEST_ID = "nearwise.request_id"
ENV_ROUTE = "nearwise.route"
#: Attributes of a log record copied into the JSON line when present.
ACCESS_FIELDS = ("method", "route", "path", "status", "duration_ms", "bytes")

#: The id of the request this thread is answering (set by the web layer).
request_id: ContextVar[str | None] = ContextVar("nearwise_request_id", default=None)
_HANDLER_MARK = "_nearwise_json"
#: A query string: "?" and what follows up to a space, a quote or the end.
_QUERY = re.compile(r"\?[^\s'\"]+")
#: The Python repr of bytes, as in gunicorn's "No more data after: b'GET /...'": request bytes.
_BYTES_REPR = re.compile(r"""\bb(?:'(?:[^'\\]|\\.)*'?|"(?:[^"\\]|\\.)*"?)""")
QUERY_MARK = "?[query removed]"
BYTES_MARK = "b'[bytes removed]'"


def scrub(text: str) -> str:
    """``text`` without query strings or raw request bytes."""
    return _QUERY.sub(QUERY_MARK, _BYTES_REPR.sub(BYTES_MARK, text))


def _scrub_exception(text: str) -> str:
    """A formatted traceback with its exception lines (the unindented ones) scrubbed; the
    indented source lines are left as they are."""
    return "\n".join(
        line if line.startswith((" ", "Traceback")) else scrub(line) for line in text.split("\n")
    )


class JsonFormatter(logging.Formatter):
    """One JSON object per record, on one line."""

    def format(self, record: logging.LogRecord) -> str:
        doc: dict[str, Any] = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname,
            "logger": record.name,
            "message": scrub(record.getMessage()),
            "request_id": getattr(record, "request_id", None) or request_id.get(),
        }
        for name in ACCESS_FIELDS:
            if hasattr(record, name):
                doc[name] = getattr(record, name)
        if record.exc_info:
            doc["exception"] = _scrub_exception(self.formatException(record.exc_info))
        return json.dumps(doc, ensure_ascii=False, default=str)


def json_handler(stream: TextIO | None = None) -> logging.Handler:
    handler = logging.StreamHandler(stream if stream is not None else sys.stdout)
    handler.setFormatter(JsonFormatter())
    setattr(handler, _HANDLER_MARK, True)
    return handler


def configure(level: str, stream: TextIO | None = None) -> None:
    """Send the ``nearwise`` loggers' records at ``level`` and above to ``stream`` (standard
    output) as JSON lines; calling it again replaces the handler instead of adding one."""
    logger = logging.getLogger("nearwise")
    for old in [h for h in logger.handlers if getattr(h, _HANDLER_MARK, False)]:
        logger.removeHandler(old)
    logger.addHandler(json_handler(stream))
    logger.setLevel(level)
    logger.propagate = False


class GunicornLogger(GunicornBaseLogger):
    """gunicorn's error and access logs as JSON lines on standard output."""

    def setup(self, cfg: Any) -> None:
        super().setup(cfg)
        for log in (self.error_log, self.access_log):
            for handler in log.handlers:
                if isinstance(handler, logging.StreamHandler) and handler.stream is sys.stderr:
                    handler.setStream(sys.stdout)
                handler.setFormatter(JsonFormatter())
        configure(cfg.loglevel.upper())

    def access(self, resp: Any, req: Any, environ: dict[str, Any], request_time: Any) -> None:
        if not self.access_log_enabled or not environ:
            return
        status = resp.status
        if isinstance(status, str):
            status = status.split(None, 1)[0]
        try:
            status = int(status)
        except (TypeError, ValueError):
            status = None
        method = environ.get("REQUEST_METHOD")
        route = environ.get(ENV_ROUTE)
        fields = {
            "request_id": environ.get(ENV_REQUEST_ID),
            "method": method,
            "route": route,
            "path": environ.get("PATH_INFO"),
            "status": status,
            "duration_ms": round(request_time.total_seconds() * 1000, 3),
            "bytes": getattr(resp, "sent", None),
        }
        try:
            self.access_log.info("%s %s %s", method, route or fields["path"], status, extra=fields)
        except Exception:
            self.error_log.exception("could not write an access log line")
