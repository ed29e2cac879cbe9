"""Content codings (RFC 9110 section 8.4): compressed request bodies in, gzip answers out.

Requests: a body sent with ``Content-Encoding: gzip`` or ``deflate`` is decompressed as it
is read, in steps of at most :data:`STEP` bytes of output (``zlib.decompressobj`` with
``max_length``), and refused with 413 ``body_too_large`` as soon as the decompressed size
passes ``NEARWISE_MAX_BODY_BYTES``: a small body that inflates to gigabytes (a zip bomb) costs
at most the cap in memory. ``identity`` is no coding at all; any other coding, or more than one
coding, is a 415 ``unsupported_content_encoding``. A body that is not what its coding says is a
400.

Answers: when the request's ``Accept-Encoding`` allows ``gzip`` and the answer's body holds at
least :data:`MIN_BYTES` bytes, it is sent gzip-compressed (``Content-Encoding: gzip``; the
``mtime`` field is 0, so the same request still gives the same bytes). Every answer carries
``Vary: Accept-Encoding``. Answers already coded, streamed or passed through (files of the docs
page) are sent as they are.
"""

from __future__ import annotations

import gzip
import zlib

from flask import Flask, Response, request

from nearwise.core.errors import shown
from nearwise.web.problems import Problem

#: The content codings a request body may have; ``identity`` is none at all.
CODINGS = ("gzip", "deflate", "identity")
#: Most bytes of decompressed output produced in one step.
STEP = 64 * 1024
#: Answers shorter than this are sent uncompressed: below about one network packet gzip
#: saves nothing worth its header and time.
MIN_BYTES = 1024
#: gzip level of answers: zlib's default trade of speed against size.
LEVEL = 6


def codings() -> list[str]:
    """The request's content codings other than ``identity``, as sent (lowercase); 415 for
    a coding not read, or for more than one."""
    sent = request.headers.get("Content-Encoding", "")
    found = [c.strip().lower() for c in sent.split(",") if c.strip()]
    unknown = [c for c in found if c not in CODINGS]
    if unknown:
        raise _unsupported(
            sent,
            f"The body has the content coding {shown(unknown[0], quoted=True)} "
            f"(Content-Encoding: {shown(sent)}); bodies are read uncompressed or with gzip "
            "or deflate.",
        )
    applied = [c for c in found if c != "identity"]
    if len(applied) > 1:
        raise _unsupported(
            sent,
            f"The body has {len(applied)} content codings (Content-Encoding: {shown(sent)}); "
            "at most one (gzip or deflate) is read.",
        )
    return applied


def _unsupported(sent: str, detail: str) -> Problem:
    return Problem(
        415,
        f"{detail} Send it uncompressed, or compressed once with gzip or deflate.",
        code="unsupported_content_encoding",
        headers={"Accept-Encoding": ", ".join(CODINGS)},
    )


def decode(data: bytes, coding: str, limit: int) -> bytes:
    """``data`` decompressed by ``coding`` (``gzip`` or ``deflate``), or 413 as soon as the
    output passes ``limit`` bytes; 400 when ``data`` is not a whole body of that coding.

    gzip: one or more members (RFC 1952). deflate: the zlib format (RFC 1950) that HTTP's
    ``deflate`` names, or, as many clients send, a raw deflate stream (RFC 1951)."""
    if coding == "deflate":
        raw = not _zlib_header(data)
        return _inflate(data, -zlib.MAX_WBITS if raw else zlib.MAX_WBITS, coding, limit, False)
    return _inflate(data, 16 + zlib.MAX_WBITS, coding, limit, True)


def _zlib_header(data: bytes) -> bool:
    """Whether ``data`` starts with a zlib header: deflate method, a 32 KiB window at most,
    and the check bits (RFC 1950 section 2.2)."""
    return (
        len(data) >= 2
        and data[0] & 0x0F == 8
        and data[0] >> 4 <= 7
        and (data[0] * 256 + data[1]) % 31 == 0
    )


def _inflate(data: bytes, wbits: int, coding: str, limit: int, members: bool) -> bytes:
    out: list[bytes] = []
    size = 0
    rest = data
    while True:  # one gzip member (or the one zlib or raw stream) per pass
        engine = zlib.decompressobj(wbits)
        pending = rest
        try:
            while True:
                chunk = engine.decompress(pending, STEP)
                pending = engine.unconsumed_tail
                size += len(chunk)
                if size > limit:
                    raise _too_large(limit, coding)
                if chunk:
                    out.append(chunk)
                if not chunk and not pending:
                    break
        except zlib.error as exc:
            raise _unreadable(coding, f"it is broken ({exc})") from None
        if not engine.eof:
            raise _unreadable(coding, "it ends before its end marker (cut short?)")
        rest = engine.unused_data
        if not rest or not members:
            break
    if rest:
        raise _unreadable(coding, f"{len(rest)} bytes follow its end")
    return b"".join(out)


def _unreadable(coding: str, why: str) -> Problem:
    return Problem(
        400,
        f"The body is not readable as Content-Encoding: {coding}: {why}. Send the whole "
        f"{coding} output of the body, or the body uncompressed without the header.",
    )


def _too_large(limit: int, coding: str) -> Problem:
    return Problem(
        413,
        f"The body, decompressed ({coding}), is larger than the limit of {limit} bytes set by "
        "NEARWISE_MAX_BODY_BYTES; it was refused without being decompressed further. Send "
        "fewer rows per request.",
        code="body_too_large",
    )


def install(app: Flask) -> None:
    """Compress answers that ``Accept-Encoding`` allows as gzip, above :data:`MIN_BYTES`."""
    app.after_request(compress)


def compress(resp: Response) -> Response:
    """Send ``resp`` gzip-compressed when the request allows it and the body is large enough;
    add ``Vary: Accept-Encoding`` either way."""
    if resp.direct_passthrough or resp.is_streamed or "Content-Encoding" in resp.headers:
        return resp
    resp.vary.add("Accept-Encoding")
    if resp.status_code < 200 or resp.status_code in (204, 304):
        return resp
    if request.accept_encodings["gzip"] <= 0:
        return resp
    data = resp.get_data()
    if len(data) < MIN_BYTES:
        return resp
    resp.set_data(gzip.compress(data, compresslevel=LEVEL, mtime=0))
    resp.headers["Content-Encoding"] = "gzip"
    return resp
