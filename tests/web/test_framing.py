"""Where a buffered request ends (``nearwise.web.framing``), checked against gunicorn's parser:
a head the worker hands over as refused must be refused by the parser, and a body the worker
waits for must be the body the parser reads."""

from __future__ import annotations

import pytest
from gunicorn.config import Config
from gunicorn.http.errors import LimitRequestLine
from gunicorn.http.parser import RequestParser

from nearwise.web import framing
from nearwise.web.framing import HEAD_CAP, Body, Head, Scan

LINE = 4094  # gunicorn's limit_request_line
TE = b"POST / HTTP/1.1\r\nTransfer-Encoding: "


def gunicorn_body(data: bytes) -> bytes:
    """The body gunicorn's parser reads from ``data`` alone (it raises on a refused head)."""
    req = next(RequestParser(Config(), iter([data]), ("127.0.0.1", 1)))
    return req.body.read()


FRAMED = [
    (b"GET / HTTP/1.1\r\nHost: x\r\n\r\n", b"", Body.NONE),
    (b"\r\nGET / HTTP/1.1\r\n\r\n", b"", Body.NONE),  # one empty line first is allowed
    (b"POST / HTTP/1.1\r\nContent-Length: 5\r\n\r\n", b"hello", Body.LENGTH),
    (b"POST / HTTP/1.0\r\ncontent-length:  007\r\n\r\n", b"abcdefg", Body.LENGTH),
    (TE + b"chunked\r\n\r\n", b"3\r\nabc\r\n0\r\n\r\n", Body.CHUNKED),
    (TE + b"gzip, chunked\r\n\r\n", b"0\r\n\r\n", Body.CHUNKED),
    (TE + b"identity\r\nTransfer-Encoding: chunked\r\n\r\n", b"0\r\n\r\n", Body.CHUNKED),
]  # fmt: skip


@pytest.mark.parametrize(("head", "body", "kind"), FRAMED)
def test_framed_heads_match_gunicorns_reading(head: bytes, body: bytes, kind: Body) -> None:
    found = framing.scan_head(head + body, LINE)
    assert isinstance(found, Head) and found.body is kind and found.end == len(head)
    if kind is Body.CHUNKED:
        assert framing.ChunkScan(found.end, 100).advance(head + body) == len(head + body)
        assert gunicorn_body(head + body) == (b"abc" if b"abc" in body else b"")
    else:
        assert found.length == len(body)
        assert gunicorn_body(head + body + b"NEXT") == body


REFUSED = [
    b"POST / HTTP/1.1\r\nContent-Length: 1\r\nContent-Length: 1\r\n\r\n",
    b"POST / HTTP/1.1\r\nContent-Length: 1\r\nTransfer-Encoding: chunked\r\n\r\n",
    b"POST / HTTP/1.1\r\nContent-Length: +1\r\n\r\n",
    b"POST / HTTP/1.1\r\nTransfer-Encoding: gzip\r\n\r\n",
    b"POST / HTTP/1.1\r\nTransfer-Encoding: chunked, gzip\r\n\r\n",
    b"POST / HTTP/1.1\r\nTransfer-Encoding: br, chunked\r\n\r\n",
    b"POST / HTTP/1.0\r\nTransfer-Encoding: chunked\r\n\r\n",
    b"GET / HTTP/1.1\r\nExpect: something\r\n\r\n",
    b"GET / HTTP/1.1\r\nX: a\r\n folded\r\n\r\n",
    b"GET / HTTP/1.1\r\nno colon\r\n\r\n",
    b"GET / HTTP/1.1\nHost: x\n\n",  # bare LF: refused before the head could end
    b"GET /\r\n\r\n",
    b"\r\n\r\n",
    b"GET /" + b"a" * LINE + b" HTTP/1.1\r\n",  # over the line limit, head not ended
]


@pytest.mark.parametrize("head", REFUSED)
def test_refused_heads_are_refused_by_gunicorn(head: bytes) -> None:
    assert framing.scan_head(head, LINE) is Scan.PARSER
    with pytest.raises(Exception):  # noqa: B017 - any of gunicorn's parse errors
        gunicorn_body(head + b"x" * 10)


def test_expect_continue_only_on_http_11() -> None:
    h11 = framing.scan_head(
        b"PUT / HTTP/1.1\r\nExpect: 100-Continue\r\nContent-Length: 1\r\n\r\n", 0
    )
    h10 = framing.scan_head(
        b"PUT / HTTP/1.0\r\nExpect: 100-continue\r\nContent-Length: 1\r\n\r\n", 0
    )
    assert isinstance(h11, Head) and h11.expect_continue
    assert isinstance(h10, Head) and not h10.expect_continue


def test_line_and_head_limits_just_inside_and_outside() -> None:
    line = b"GET /" + b"a" * (LINE - 14) + b" HTTP/1.1"
    assert len(line) == LINE
    assert isinstance(framing.scan_head(line + b"\r\n\r\n", LINE), Head)
    assert gunicorn_body(line + b"\r\n\r\n") == b""
    longer = b"GET /a" + line[5:] + b"\r\n\r\n"
    assert framing.scan_head(longer, LINE) is Scan.PARSER
    with pytest.raises(LimitRequestLine):
        gunicorn_body(longer)
    start = b"GET / HTTP/1.1\r\nX: "
    fits = start + b"a" * (HEAD_CAP - len(start) - 4) + b"\r\n\r\n"
    assert len(fits) == HEAD_CAP and isinstance(framing.scan_head(fits, LINE), Head)
    assert framing.scan_head(fits[:-4] + b"a\r\n\r\n", LINE) is Scan.TOO_LARGE
    assert framing.scan_head(fits[:-4], LINE) is Scan.MORE
    assert framing.scan_head(fits[:-4] + b"a" * 5, LINE) is Scan.TOO_LARGE  # unended, over


def test_chunks_are_followed_byte_by_byte_and_counted() -> None:
    body = b"4;name=v\r\nabcd\r\n2\r\nef\r\n0\r\nTrailer-Field: 1\r\n\r\nNEXT"
    scan = framing.ChunkScan(0, max_body=6)
    ends = [scan.advance(body[:n]) for n in range(len(body) + 1)]
    assert ends[-1] == len(body) - 4 and ends.count(None) == len(body) - 4  # ends at the CRLF
    with pytest.raises(framing.ChunksTooLarge):
        framing.ChunkScan(0, max_body=5).advance(body)
    for bad in (b"x\r\n", b"4\r\nabcdXY", b"4;=\r\n", b"" + b"1" * 9000):
        with pytest.raises(framing.BadChunks):
            framing.ChunkScan(0, max_body=10**9).advance(bad)


AT_LIMIT = b"GET /" + b"a" * (LINE - 14) + b" HTTP/1.1\r\nHost: x\r\n\r\n"  # line of LINE bytes


@pytest.mark.parametrize("data", [h + b for h, b, _ in FRAMED] + REFUSED + [AT_LIMIT])
def test_a_head_fed_a_byte_at_a_time_ends_as_when_sent_whole(data: bytes) -> None:
    scan = framing.HeadScan(LINE)
    first = next(f for n in range(1, len(data) + 1) if (f := scan.feed(data[:n])) is not Scan.MORE)
    assert first == framing.scan_head(data, LINE)
