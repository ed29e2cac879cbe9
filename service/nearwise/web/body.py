"""Reading request bodies under the size cap, and content negotiation."""

from __future__ import annotations

from collections.abc import Sequence

from flask import request

from nearwise.core.errors import shown
from nearwise.web import coding
from nearwise.web.problems import Problem

_CHUNK = 64 * 1024


def read_body(limit: int) -> bytes:
    """The whole request body, or a 413 once it exceeds ``limit`` bytes.

    A declared ``Content-Length`` over the limit is refused before reading. A body without
    one (chunked transfer) is read up to ``limit + 1`` bytes, so an oversized stream is
    refused rather than silently cut. A body sent with ``Content-Encoding: gzip`` or
    ``deflate`` is decompressed under the same limit, which then applies to the decompressed
    size (:mod:`nearwise.web.coding`); another content coding is refused before reading: 415,
    as RFC 9110 section 8.4 asks.
    """
    applied = coding.codings()
    data = _read_raw(limit)
    return coding.decode(data, applied[0], limit) if applied and data else data


def _read_raw(limit: int) -> bytes:
    """The body as sent, or a 413 once it exceeds ``limit`` bytes."""
    env = request.environ
    stream = env["wsgi.input"]
    length = request.content_length
    if length is not None:
        if length > limit:
            raise _too_large(limit, f"Content-Length: {length}")
        data = stream.read(length) if length else b""
        if len(data) != length:
            raise Problem(
                400,
                f"The body ended after {len(data)} of the {length} bytes "
                "declared by Content-Length.",
            )
        return data
    chunked = "chunked" in env.get("HTTP_TRANSFER_ENCODING", "").lower()
    if not (chunked or env.get("wsgi.input_terminated")):
        return b""
    parts: list[bytes] = []
    size = 0
    while True:
        chunk = stream.read(min(_CHUNK, limit + 1 - size))
        if not chunk:
            return b"".join(parts)
        parts.append(chunk)
        size += len(chunk)
        if size > limit:
            raise _too_large(limit, "sent without Content-Length")


def _too_large(limit: int, found: str) -> Problem:
    return Problem(
        413,
        f"The body is larger than the limit of {limit} bytes set by NEARWISE_MAX_BODY_BYTES "
        f"({shown(found)}). Send fewer rows per request.",
        code="body_too_large",
    )


FORMATS = {"json": "application/json", "csv": "text/csv", "svg": "image/svg+xml"}


def negotiate(offered: Sequence[str]) -> str:
    """The offered media type the ``Accept`` header prefers (the first when absent), or 406.

    A ``format`` query-string parameter (``json``, ``csv`` or ``svg``), where the endpoint
    offers that type, overrides the header: for clients that cannot set headers.
    """
    fmt = request.args.get("format")
    if fmt is not None:
        wanted = FORMATS.get(fmt)
        if wanted is None or wanted not in offered:
            names = [k for k, v in FORMATS.items() if v in offered]
            raise Problem(
                422,
                f"`format` must be one of {', '.join(names)} here; got {shown(fmt, quoted=True)}.",
                [{"parameter": "format", "message": "unknown format"}],
                code="invalid_request",
            )
        return wanted
    if not request.headers.get("Accept"):
        return offered[0]
    best = request.accept_mimetypes.best_match(offered)
    if best is None:
        raise Problem(
            406,
            f"This endpoint answers {' or '.join(offered)}; the Accept header allows neither "
            f"({shown(request.headers['Accept'], quoted=True)}).",
        )
    return best


def unsupported_media_type(accepted: Sequence[str]) -> Problem:
    """The 415 for a body of a type the endpoint does not read."""
    sent = shown(request.mimetype) or "no Content-Type"
    return Problem(
        415,
        f"This endpoint reads {', '.join(accepted)} bodies; got {sent}.",
        headers={"Accept-Post": ", ".join(accepted)},
    )
