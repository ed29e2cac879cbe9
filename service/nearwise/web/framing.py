"""Where an HTTP/1.x request ends, decided from the bytes received so far, and the server's
own problem answers.

:mod:`nearwise.web.worker` reads each request into a buffer before any thread takes it; this
module tells it whether the buffer holds a whole request yet. The framing rules follow
gunicorn's parser (``gunicorn.http.message`` and ``gunicorn.http.body``): a head it would refuse
is handed to it at once (``Scan.PARSER``), so it answers with its own checks, and a head it
would read a body for is never handed over before that body has arrived.

No socket, no Flask: plain functions on bytes, so they are tested on bytes.
"""

from __future__ import annotations

import json
import re
import uuid
from dataclasses import dataclass
from enum import Enum
from http import HTTPStatus

from gunicorn.http.body import CHUNK_EXT_RE

from nearwise.web.problem_types import envelope_place, title_of

#: The largest request head (request line and header fields) read before answering 431. Far
#: above what any client of this API sends (a few hundred bytes; API keys and cookies fit).
HEAD_CAP = 64 * 1024
#: The longest chunk-size line (size and extensions), as gunicorn's default field size.
CHUNK_LINE_CAP = 8190
_VERSION = re.compile(r"HTTP/(\d)\.(\d)")
_TOKEN = re.compile(r"[!#$%&'*+\-.^_`|~0-9A-Za-z]{1,64}")
_HEX = frozenset(b"0123456789abcdefABCDEF")


class Scan(Enum):
    MORE = "more"  # the head has not ended yet
    PARSER = "parser"  # gunicorn's parser refuses this head without reading further
    TOO_LARGE = "too_large"  # no end of head within HEAD_CAP bytes


class Body(Enum):
    NONE = "none"
    LENGTH = "length"
    CHUNKED = "chunked"


@dataclass(frozen=True)
class Head:
    """A complete head: where it ends, and how its body is framed."""

    end: int  # index just past the blank line
    body: Body
    length: int = 0  # Content-Length, for Body.LENGTH
    expect_continue: bool = False  # HTTP/1.1 with Expect: 100-continue


def scan_head(buf: bytes | bytearray, line_limit: int) -> Head | Scan:
    """The head at the start of ``buf``, or what to do while it is incomplete or refused.

    ``line_limit`` is gunicorn's ``limit_request_line`` (0: none).
    """
    return HeadScan(line_limit).feed(buf)


class HeadScan:
    """:func:`scan_head` for a buffer that grows: each call looks only at the new bytes (and
    the three before them), so a head sent a byte at a time costs linear time, not quadratic."""

    def __init__(self, line_limit: int) -> None:
        self.line_limit = line_limit
        self.seen = 0  # bytes known to hold no end of head, no bare LF, no over-long line
        self.line_ended = False

    def feed(self, buf: bytes | bytearray) -> Head | Scan:
        start = 2 if buf[:2] == b"\r\n" else 0  # one empty line may come first (RFC 9112 2.2)
        if buf[start : start + 2] == b"\r\n":
            return Scan.PARSER  # an empty request line
        seen = self.seen
        end = buf.find(b"\r\n\r\n", max(start, seen - 3))
        head_len = end + 4 if end >= 0 else len(buf)
        new = max(0, seen - 1)
        if new > 0 and buf[new] == 0x0A:
            new -= 1  # an LF seen last time is counted again with its CR
        if buf.count(b"\n", new, head_len) != buf.count(b"\r\n", new, head_len):
            return Scan.PARSER  # a bare LF ends no line here; gunicorn refuses it at once
        if not self.line_ended:
            line_end = buf.find(b"\r\n", max(start, seen - 1))
            line_len = (line_end if line_end >= 0 else len(buf) - 2) - start
            if self.line_limit > 0 and line_len > self.line_limit:
                return Scan.PARSER  # 414, answered by gunicorn from the bytes it is given
            self.line_ended = line_end >= 0
        self.seen = len(buf)
        if end < 0:
            return Scan.TOO_LARGE if len(buf) > HEAD_CAP else Scan.MORE
        if end + 4 > HEAD_CAP:
            return Scan.TOO_LARGE
        return _framing(bytes(buf[start:end]).decode("latin-1"), end + 4)


def _framing(head: str, end: int) -> Head | Scan:
    lines = head.split("\r\n")
    version = _VERSION.fullmatch(lines[0].rsplit(" ", 1)[-1])
    if version is None:
        return Scan.PARSER
    http11 = (int(version[1]), int(version[2])) >= (1, 1)
    lengths: list[str] = []
    codings: list[str] = []
    expect = False
    for line in lines[1:]:
        name, sep, value = line.partition(":")
        if not sep or line[:1] in (" ", "\t"):
            return Scan.PARSER  # no colon, or obsolete line folding
        name, value = name.upper(), value.strip(" \t")
        if name == "CONTENT-LENGTH":
            lengths.append(value)
        elif name == "TRANSFER-ENCODING":
            codings += [v.strip(" \t").lower() for v in value.split(",")]
        elif name == "EXPECT":
            if value.lower() != "100-continue":
                return Scan.PARSER  # 417
            expect = http11
    if len(lengths) > 1:
        return Scan.PARSER
    if codings:
        if codings[-1] != "chunked" or "chunked" in codings[:-1] or lengths or not http11:
            return Scan.PARSER
        if any(c not in ("identity", "gzip", "deflate", "compress") for c in codings[:-1]):
            return Scan.PARSER
        return Head(end, Body.CHUNKED, expect_continue=expect)
    if lengths:
        if not (lengths[0].isascii() and lengths[0].isdigit()):
            return Scan.PARSER
        return Head(end, Body.LENGTH, int(lengths[0]), expect)
    return Head(end, Body.NONE)


class BadChunks(ValueError):
    """The chunked framing is broken: 400."""


class ChunksTooLarge(ValueError):
    """The chunks add up to more than the body limit: 413."""


class ChunkScan:
    """Follows a chunked body through a growing buffer; ``advance`` returns the index just past
    the body (trailers included) once it has all arrived, else None."""

    def __init__(self, start: int, max_body: int) -> None:
        self.pos = start  # the next chunk-size line, or the trailers once ``last``
        self.seen = start  # bytes from ``pos`` on known to hold no line end (or end of trailers)
        self.size = -1  # the current chunk's size while its data is awaited
        self.total = 0
        self.max_body = max_body
        self.last = False
        self.end: int | None = None

    def advance(self, buf: bytes | bytearray) -> int | None:
        while True:
            if self.last:
                self.end = self.end or self._trailers(buf)
                return self.end
            if self.size >= 0:
                end = self.pos + self.size
                if len(buf) < end + 2:
                    return None
                if buf[end : end + 2] != b"\r\n":
                    raise BadChunks("a chunk does not end with CRLF where its size says")
                self.pos = self.seen = end + 2
                self.size = -1
                continue
            eol = buf.find(b"\r\n", max(self.pos, self.seen - 1), self.pos + CHUNK_LINE_CAP + 2)
            if eol < 0:
                if len(buf) - self.pos > CHUNK_LINE_CAP:
                    raise BadChunks("a chunk-size line is too long")
                self.seen = len(buf)
                return None
            size = _chunk_size(bytes(buf[self.pos : eol]))
            self.total += size
            if self.total > self.max_body:
                raise ChunksTooLarge(self.total)
            self.pos = self.seen = eol + 2
            if size == 0:
                self.last = True
            else:
                self.size = size

    def _trailers(self, buf: bytes | bytearray) -> int | None:
        if buf[self.pos : self.pos + 2] == b"\r\n":
            return self.pos + 2
        end = buf.find(b"\r\n\r\n", max(self.pos, self.seen - 3))
        scanned = end + 4 if end >= 0 else len(buf)
        new = max(self.pos, self.seen - 1)
        if new > self.pos and buf[new] == 0x0A:
            new -= 1  # an LF seen last time is counted again with its CR
        if buf.count(b"\n", new, scanned) != buf.count(b"\r\n", new, scanned):
            raise BadChunks("a trailer line ends with a bare LF")
        if (end if end >= 0 else len(buf)) - self.pos > HEAD_CAP:
            raise BadChunks("the trailer section is too long")
        self.seen = len(buf)
        return end + 4 if end >= 0 else None


def _chunk_size(line: bytes) -> int:
    size, semi, ext = line.partition(b";")
    if semi:
        if b"\r" in ext or not CHUNK_EXT_RE.fullmatch(b";" + ext):
            raise BadChunks("a chunk extension is not valid")
        size = size.rstrip(b" \t")
    if not size or any(c not in _HEX for c in size):
        raise BadChunks("a chunk size is not a hexadecimal number")
    return int(size, 16)


def safe_name(text: object) -> str | None:
    """``text`` when it is a short header-name token (safe to echo), else None."""
    return text if isinstance(text, str) and _TOKEN.fullmatch(text) else None


def raw_problem(
    status: int, code: str, detail: str, headers: dict[str, str] | None = None
) -> tuple[bytes, str]:
    """A complete HTTP/1.1 problem+json answer that closes the connection, and its request id.

    The body has the members of every answer of ``nearwise.web.problems``; ``detail`` must not
    hold anything the client sent beyond a checked header name.
    """
    phrase = HTTPStatus(status).phrase
    request_id = uuid.uuid4().hex
    doc = {
        "type": f"/problems/{code}",
        "title": title_of(code, status),
        "status": status,
        "detail": detail,
        "code": code,
        "errors": envelope_place(code, detail),
    }
    body = json.dumps(doc, separators=(",", ":")).encode()
    lines = [
        f"HTTP/1.1 {status} {phrase}",
        "Content-Type: application/problem+json",
        f"Content-Length: {len(body)}",
        "Connection: close",
        "Cache-Control: no-store",
        "X-Content-Type-Options: nosniff",
        f"X-Request-ID: {request_id}",
        *(f"{k}: {v}" for k, v in (headers or {}).items()),
    ]
    return ("\r\n".join(lines) + "\r\n\r\n").encode("latin-1") + body, request_id
