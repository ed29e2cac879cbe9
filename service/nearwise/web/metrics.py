"""Prometheus metrics, summed over every gunicorn worker.

Under ``nearwise serve`` the variable ``PROMETHEUS_MULTIPROC_DIR`` is set before any worker
imports ``prometheus_client``, so each worker writes its values to files in that directory and
``GET /metrics`` reads all of them. Without it (one process, e.g. tests) the values live in
this module's registry. Labels hold bounded values only: a URL rule rather than a raw path, a
method from the catalogue, a problem code and a status.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from typing import Any

from flask import Flask, has_request_context, request

from nearwise.jsonlog import ENV_ROUTE
from nearwise.web.logs import StartResponse, WsgiApp

CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"
MULTIPROC_VARIABLE = "PROMETHEUS_MULTIPROC_DIR"
#: Route label of a request that matched no URL rule (404, 405).
UNMATCHED = "unmatched"
#: Values of the ``method`` label; any other name is counted as ``other``.
FIT_METHODS = ("knn", "linear", "spline", "additive", "auto", "compare")
#: Values of the HTTP ``method`` label; any other is counted as ``other``.
HTTP_METHODS = ("GET", "HEAD", "POST", "PUT", "PATCH", "DELETE", "OPTIONS")
ENV_PROBLEM = "nearwise.problem_code"


class _Metrics:
    """The metrics, created on first use so that ``prometheus_client`` is first imported in a
    worker, after ``nearwise serve`` has set ``PROMETHEUS_MULTIPROC_DIR``."""

    def __init__(self) -> None:
        from prometheus_client import CollectorRegistry, Counter, Histogram

        self.registry = CollectorRegistry(auto_describe=True)
        self.requests = Counter(
            "nearwise_http_requests",
            "HTTP requests answered, by URL rule, HTTP method and status.",
            ["route", "method", "status"],
            registry=self.registry,
        )
        self.latency = Histogram(
            "nearwise_http_request_duration_seconds",
            "Time from receiving a request to sending the last byte of its answer, by URL rule.",
            ["route"],
            buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 20, 30, 60),
            registry=self.registry,
        )
        self.fit_seconds = Histogram(
            "nearwise_fit_duration_seconds",
            "Time spent tuning, fitting and predicting in one request, by the method asked for "
            "(auto and compare tune several methods).",
            ["method"],
            buckets=(0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2, 5, 10, 20, 30, 60),
            registry=self.registry,
        )
        self.train_rows = Histogram(
            "nearwise_training_rows",
            "Training rows per request, by URL rule.",
            ["route"],
            buckets=(10, 30, 100, 300, 1_000, 3_000, 10_000, 30_000, 100_000, 250_000, 1_000_000),
            registry=self.registry,
        )
        self.rejections = Counter(
            "nearwise_rejections",
            "Requests answered with a problem (4xx or 503), by problem code and status.",
            ["code", "status"],
            registry=self.registry,
        )


_created: list[_Metrics] = []
_creating = threading.Lock()


def collected() -> _Metrics:
    """This process's metrics, created once (two metrics of one name would overwrite each
    other's values in the shared files)."""
    if not _created:
        with _creating:
            if not _created:
                _created.append(_Metrics())
    return _created[0]


def multiprocess() -> bool:
    """Values are shared through files (set by ``nearwise serve`` before the workers start)."""
    return bool(os.environ.get(MULTIPROC_VARIABLE))


def exposition() -> bytes:
    """Every metric in the Prometheus text format 0.0.4, summed over the workers."""
    from prometheus_client import CollectorRegistry, generate_latest

    if multiprocess():
        from prometheus_client import multiprocess as mp

        registry = CollectorRegistry()
        mp.MultiProcessCollector(registry)
        return generate_latest(registry)
    return generate_latest(collected().registry)


def current_route() -> str:
    rule = request.url_rule
    return rule.rule if rule is not None else UNMATCHED


def method_label(method: str | None) -> str:
    return method if method in FIT_METHODS else "other"


def training_rows(rows: int) -> None:
    """Record the training rows of the request being answered."""
    collected().train_rows.labels(route=current_route()).observe(rows)


@contextmanager
def fitting(method: str, rows: int) -> Iterator[None]:
    """Record the training rows now and, if the block completes, the time it took."""
    training_rows(rows)
    start = time.perf_counter()
    yield
    collected().fit_seconds.labels(method=method_label(method)).observe(time.perf_counter() - start)


def note_problem(code: str) -> None:
    """Remember the problem code of the answer being built, for the rejection counter."""
    if has_request_context():
        request.environ[ENV_PROBLEM] = code


class _Timed:
    """The answer's body, passed through; records the request when it ends."""

    def __init__(self, body: Iterable[bytes], done: Any) -> None:
        self._body = body
        self._done = done

    def __iter__(self) -> Iterator[bytes]:
        try:
            yield from self._body
        finally:
            self._done()

    def close(self) -> None:
        try:
            close = getattr(self._body, "close", None)
            if close is not None:
                close()
        finally:
            self._done()


class RequestMetrics:
    """WSGI middleware counting and timing every request, including errors."""

    def __init__(self, app: WsgiApp) -> None:
        self.app = app

    def __call__(self, environ: dict[str, Any], start_response: StartResponse) -> Any:
        start = time.perf_counter()
        status: list[int] = []

        def start_and_note(code: str, headers: list[tuple[str, str]], exc_info: Any = None) -> Any:
            status[:] = [int(code.split(None, 1)[0])]
            return start_response(code, headers, exc_info)

        recorded = False

        def done() -> None:
            nonlocal recorded
            if recorded:
                return
            recorded = True
            route = environ.get(ENV_ROUTE) or UNMATCHED
            code = status[0] if status else 500
            method = environ.get("REQUEST_METHOD", "")
            method = method if method in HTTP_METHODS else "other"
            m = collected()
            m.requests.labels(route=route, method=method, status=code).inc()
            m.latency.labels(route=route).observe(time.perf_counter() - start)
            problem = environ.get(ENV_PROBLEM)
            if problem and code >= 400 and code != 500:
                m.rejections.labels(code=problem, status=code).inc()

        try:
            body = self.app(environ, start_and_note)
        except BaseException:
            done()
            raise
        wrapper = environ.get("wsgi.file_wrapper")
        if isinstance(wrapper, type) and isinstance(body, wrapper):
            done()  # a file sent by the server itself: keep its fast path
            return body
        return _Timed(body, done)


def install(app: Flask) -> None:
    """Note each request's URL rule (before any other hook can refuse the request) and wrap
    the WSGI app with :class:`RequestMetrics`."""

    @app.before_request
    def note_route() -> None:
        request.environ[ENV_ROUTE] = current_route() if request.url_rule is not None else None

    collected()  # now, in the worker, before any request thread runs
    app.wsgi_app = RequestMetrics(app.wsgi_app)  # type: ignore[method-assign]
