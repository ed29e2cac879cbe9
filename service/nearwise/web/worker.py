"""The gunicorn worker of ``nearwise serve``: gthread, but no thread waits for a slow client.

gunicorn's gthread worker gives a connection to a pool thread as soon as its first byte
arrives, and the thread then reads the head and the body with blocking reads and no total
deadline: a few slow senders hold every thread. This worker reads each request, head and whole
body, in its main loop with non-blocking reads into a buffer per connection. Only a complete
request goes to the pool, its bytes put back in front of gunicorn's parser, which then reads
nothing from the socket. A kept-alive connection, and any request pipelined behind the last
one, goes through the same buffering.

Deadlines (checked about every 0.2 s): the head must be whole ``NEARWISE_HEADER_TIMEOUT_S``
after its first byte, the body ``NEARWISE_BODY_TIMEOUT_S`` after the head; past either the
answer is 408. A connection that sends nothing is closed after the header timeout (after
gunicorn's ``keepalive`` seconds between requests). The worker itself answers 413 for a
Content-Length or chunks over ``NEARWISE_MAX_BODY_BYTES`` (before reading the body), 431 for a
head over 64 KiB, 400 for broken chunk framing, and 503 ``busy`` when its buffers would pass
``BUFFERED_BODIES`` bodies of the largest size. Every such answer is problem+json with
``Connection: close``, followed by a lingering close that never blocks the loop. Errors
gunicorn's parser finds (414, 431, 400, 417, 501) are problem+json too (:meth:`handle_error`).

Each worker sets glibc's malloc to hand freed arrays back to the system
(:func:`~nearwise.web.worker_support.tune_malloc`) and, after loading the app, limits its
address space (``NEARWISE_WORKER_MEMORY_MB``).
TLS, HTTP/2, the PROXY protocol and header folding are not used by ``nearwise serve``; with any
of them configured this worker behaves as gunicorn's own gthread worker.
"""

from __future__ import annotations

import errno
import resource
import selectors
import socket
import time
from datetime import timedelta
from functools import partial
from typing import Any

from gunicorn import util
from gunicorn.http.wsgi import Response, default_environ
from gunicorn.workers import gthread

from nearwise.jsonlog import ENV_REQUEST_ID
from nearwise.web import framing
from nearwise.web.framing import Body, Head, Scan
from nearwise.web.settings import Settings
from nearwise.web.worker_support import (
    OUT_OF_MEMORY,
    RETRY,
    error_answer,
    limit_address_space,
    tune_malloc,
)

#: Bodies of the largest allowed size that one worker buffers at once, in all its connections.
BUFFERED_BODIES = 4
RECV_BYTES = 256 * 1024
#: After an answer that closes the connection: how long, and how many bytes, the worker reads
#: and discards before closing, so the client reads the answer instead of a reset.
LINGER_S = 2.0
LINGER_BYTES = 64 * 1024
SWEEP_EVERY_S = 0.2
IDLE, HEAD, BODY, LINGER, GONE = "idle", "head", "body", "linger", "gone"


class Reading:
    """A connection the main loop is reading a request from (or lingering on)."""

    __slots__ = ("buf", "chunks", "conn", "deadline", "need", "phase", "registered", "scan")

    def __init__(self, conn: Any, phase: str, deadline: float) -> None:
        self.conn = conn
        self.buf = bytearray()
        self.phase = phase
        self.deadline = deadline
        self.scan: framing.HeadScan | None = None
        self.need = 0  # bytes the buffer must hold for a Content-Length body
        self.chunks: framing.ChunkScan | None = None
        self.registered = False


class NearwiseWorker(gthread.ThreadWorker):
    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        settings = getattr(self.app, "settings", None)
        self.settings: Settings = settings if isinstance(settings, Settings) else Settings()
        cfg = self.cfg
        self.buffering = not (
            cfg.is_ssl
            or getattr(cfg, "http2_cleartext", "off") != "off"
            or getattr(cfg, "proxy_protocol", "off") != "off"
            or getattr(cfg, "permit_obsolete_folding", False)
            or getattr(cfg, "strip_header_spaces", False)
        )
        limit = cfg.limit_request_line
        self.line_limit = 8190 if limit < 0 or limit > 8190 else limit
        self.budget = BUFFERED_BODIES * (self.settings.max_body_bytes + framing.HEAD_CAP)
        self.buffered = 0
        self.reading: dict[Any, Reading] = {}
        self.next_sweep = 0.0
        self.accept_paused_until = 0.0
        self.stop_cap: float | None = None

    # -- process set-up ------------------------------------------------------------------
    def init_process(self) -> None:
        soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
        want = self.cfg.worker_connections + 256
        if soft != resource.RLIM_INFINITY and soft < want:
            top = want if hard == resource.RLIM_INFINITY else min(want, hard)
            resource.setrlimit(resource.RLIMIT_NOFILE, (max(soft, top), hard))
        tune_malloc(self.log)  # before any thread starts
        super().init_process()

    def load_wsgi(self) -> None:
        super().load_wsgi()
        limit_address_space(self.settings.worker_memory_mb, self.log)

    # -- accepting and reading -----------------------------------------------------------
    def set_accept_enabled(self, enabled: bool) -> None:
        if enabled and time.monotonic() < self.accept_paused_until:
            return  # out of file descriptors a moment ago
        super().set_accept_enabled(enabled)

    def accept(self, listener: Any) -> None:
        if not self.buffering:
            return super().accept(listener)
        try:
            sock, addr = listener.accept()
        except OSError as e:
            if e.errno in (errno.EMFILE, errno.ENFILE, errno.ENOBUFS, errno.ENOMEM):
                self.log.warning("cannot accept a connection now: %s", errno.errorcode[e.errno])
                self.accept_paused_until = time.monotonic() + 0.5
                self.set_accept_enabled(False)
            elif e.errno not in (errno.EAGAIN, errno.ECONNABORTED, errno.EWOULDBLOCK):
                raise
            return None
        self.nr_conns += 1
        conn = gthread.TConn(self.cfg, sock, addr, listener.getsockname())
        self._read_next(conn, b"", fresh=True)
        return None

    def _read_next(self, conn: Any, pending: bytes, fresh: bool) -> None:
        """Start reading the connection's next request; ``pending`` holds its first bytes."""
        now = time.monotonic()
        idle_s = self.settings.header_timeout_s if fresh else self.cfg.keepalive
        r = Reading(conn, IDLE, now + idle_s)
        if not self.alive:
            r.deadline = min(r.deadline, now + gthread.STOP_KEEPALIVE_LINGER)
        self.reading[conn] = r
        conn.sock.setblocking(False)
        if pending:
            self._take(r, pending, now)
        if r.phase != GONE and not r.registered:
            self.poller.register(conn.sock, selectors.EVENT_READ, partial(self._readable, r))
            r.registered = True

    def _readable(self, r: Reading, sock: Any) -> None:
        if r.phase == GONE:
            return  # an event of this poll round, for a connection handed on meanwhile
        try:
            data = sock.recv(RECV_BYTES)
        except (BlockingIOError, InterruptedError):
            return
        except OSError:
            data = b""
        if r.phase == LINGER:
            r.need -= len(data)
            if not data or r.need <= 0:
                self._close(r)
            return
        if not data:
            self._close(r)  # the client left before its request was whole: nothing to answer
            return
        try:
            self._take(r, data, time.monotonic())
        except MemoryError:
            self._refuse(r, 503, "out_of_memory", OUT_OF_MEMORY, RETRY)
        except Exception:  # one connection's trouble must not stop the worker's loop
            self.log.exception("error while reading a request; its connection is closed")
            if self.reading.get(r.conn) is r:
                self._close(r)

    def _take(self, r: Reading, data: bytes, now: float) -> None:
        if r.phase == BODY and self.buffered + len(data) > self.budget:
            detail = "The server is reading too many large bodies at once; try again shortly."
            self._refuse(r, 503, "busy", detail, RETRY)
            return
        r.buf += data
        self.buffered += len(data)
        if r.phase == IDLE:
            r.phase, r.deadline = HEAD, now + self.settings.header_timeout_s
            r.scan = framing.HeadScan(self.line_limit)
        if r.phase == HEAD and r.scan is not None:
            found = r.scan.feed(r.buf)
            if found is Scan.MORE:
                return
            if found is Scan.PARSER:
                self._hand_off(r)
                return
            if found is Scan.TOO_LARGE:
                detail = f"The request head is over {framing.HEAD_CAP} bytes."
                self._refuse(r, 431, "header_too_large", detail)
                return
            if not self._start_body(r, found, now):
                return
        self._check_body(r)

    def _start_body(self, r: Reading, head: Head, now: float) -> bool:
        limit = self.settings.max_body_bytes
        if head.body is Body.NONE:
            self._hand_off(r)
            return False
        if head.body is Body.LENGTH and head.length > limit:
            self._too_large(r, f"Content-Length: {head.length}")
            return False
        r.phase, r.deadline = BODY, now + self.settings.body_timeout_s
        r.need = head.end + head.length
        if head.body is Body.CHUNKED:
            r.chunks = framing.ChunkScan(head.end, limit)
        if head.expect_continue and len(r.buf) < r.need + (head.body is Body.CHUNKED):
            try:
                r.conn.sock.send(b"HTTP/1.1 100 Continue\r\n\r\n")
                r.conn.nearwise_continued = True  # gunicorn must not send a second one
            except OSError:
                pass
        return True

    def _check_body(self, r: Reading) -> None:
        if r.chunks is not None:
            try:
                end = r.chunks.advance(r.buf)
            except framing.ChunksTooLarge:
                self._too_large(r, "in chunks")
                return
            except framing.BadChunks as e:
                self._refuse(r, 400, "malformed_request", f"The chunked body is broken: {e}.")
                return
            if end is None:
                return
        elif len(r.buf) < r.need:
            return
        self._hand_off(r)

    def _too_large(self, r: Reading, found: str) -> None:
        limit = self.settings.max_body_bytes
        detail = (
            f"The body is larger than the limit of {limit} bytes set by NEARWISE_MAX_BODY_BYTES "
            f"({found}). Send fewer rows per request."
        )
        self._refuse(r, 413, "body_too_large", detail)

    def _release(self, r: Reading) -> None:
        """Stop reading ``r`` in the loop and give its bytes back to the budget."""
        if r.registered:
            try:
                self.poller.unregister(r.conn.sock)
            except (KeyError, ValueError, OSError):
                pass
            r.registered = False
        self.buffered -= len(r.buf)
        r.buf = bytearray()
        r.phase = GONE
        self.reading.pop(r.conn, None)

    def _hand_off(self, r: Reading) -> None:
        """Give the whole request to a pool thread: gunicorn's parser reads it from the buffer."""
        data = bytes(r.buf)
        self._release(r)
        conn = r.conn
        try:
            conn.init()  # the first time: makes the parser (plain HTTP/1.x: no socket I/O)
        except Exception:
            self.log.debug("could not start a connection", exc_info=True)
            self._drop(conn)
            return
        conn.parser.unreader.unread(data)
        self.enqueue_req(conn)

    def enqueue_req(self, conn: Any) -> None:
        try:
            super().enqueue_req(conn)
        except (RuntimeError, MemoryError):  # no thread could be started
            data, _ = framing.raw_problem(503, "out_of_memory", OUT_OF_MEMORY, RETRY)
            _send(conn.sock, data)
            self._drop(conn)

    # -- answering and closing from the loop ---------------------------------------------
    def _refuse(
        self, r: Reading, status: int, code: str, detail: str, headers: dict[str, str] | None = None
    ) -> None:
        data, request_id = framing.raw_problem(status, code, detail, headers)
        _send(r.conn.sock, data)
        self.log.info(
            "answered %d %s from the server's read loop to ip=%s (request id %s)",
            status,
            code,
            _ip(r.conn.client),
            request_id,
        )
        _note(code)
        self._release(r)
        self._linger(r.conn)

    def _linger(self, conn: Any) -> None:
        """Half-close, read and discard what still comes for a while, then close: never blocks."""
        try:
            conn.sock.shutdown(socket.SHUT_WR)
        except OSError:
            self._drop(conn)
            return
        r = Reading(conn, LINGER, time.monotonic() + LINGER_S)
        r.need = LINGER_BYTES
        self.reading[conn] = r
        conn.sock.setblocking(False)
        self.poller.register(conn.sock, selectors.EVENT_READ, partial(self._readable, r))
        r.registered = True

    def _close(self, r: Reading) -> None:
        self._release(r)
        self._drop(r.conn)

    def _drop(self, conn: Any) -> None:
        self.nr_conns -= 1
        util.close(conn.sock)

    def finish_request(self, conn: Any, fs: Any) -> None:
        """Back from a thread: read the next request on a kept-alive connection (starting with
        what the parser read past this one), or close."""
        if not self.buffering:
            return super().finish_request(conn, fs)
        try:
            keep = fs.result() if not fs.cancelled() else False
        except Exception:
            keep = False
        try:
            if keep:
                self._read_next(conn, conn.parser.unreader.take_buffered(), fresh=False)
            else:
                self._linger(conn)
        except Exception:
            self.log.debug("could not go on with a connection", exc_info=True)
            r = self.reading.get(conn)
            if r is not None:
                self._release(r)
            self._drop(conn)
        return None

    def murder_pending(self) -> None:
        """gunicorn's sweep, and the deadlines of the connections this loop reads."""
        super().murder_pending()
        now = time.monotonic()
        if now < self.next_sweep:
            return
        self.next_sweep = now + SWEEP_EVERY_S
        if not self.alive and self.stop_cap is None:
            self.stop_cap = now + gthread.STOP_KEEPALIVE_LINGER
        for r in list(self.reading.values()):
            if r.phase == IDLE and self.stop_cap is not None:
                r.deadline = min(r.deadline, self.stop_cap)
            if now < r.deadline:
                continue
            if r.phase == HEAD:
                timeout = self.settings.header_timeout_s
                detail = f"The request head did not arrive within {timeout:g} s."
                self._refuse(r, 408, "request_timeout", detail)
            elif r.phase == BODY:
                timeout = self.settings.body_timeout_s
                detail = f"The request body did not arrive within {timeout:g} s of its head."
                self._refuse(r, 408, "request_timeout", detail)
            else:
                self._close(r)

    # -- in a pool thread ----------------------------------------------------------------
    def handle_request(self, req: Any, conn: Any) -> Any:
        if getattr(conn, "nearwise_continued", False):
            req._expected_100_continue = False  # already sent by the read loop
            conn.nearwise_continued = False
        if self.buffering:
            # The request is all in memory; the answer gets the body deadline to be sent.
            conn.sock.settimeout(self.settings.body_timeout_s)
        return super().handle_request(req, conn)

    def handle_error(self, req: Any, client: Any, addr: Any, exc: BaseException) -> None:
        """gunicorn's error answers as problem+json; nothing the client sent is echoed or
        logged beyond the path and a checked header name."""
        limits = (self.line_limit, self.cfg.limit_request_fields, self.cfg.limit_request_field_size)
        status, code, detail, headers = error_answer(exc, *limits)
        ip = _ip(addr)
        if isinstance(exc, MemoryError):
            self.log.warning("Out of memory answering a request from ip=%s (503 %s)", ip, code)
        elif status < 500:
            kind = type(exc).__name__
            self.log.warning("Invalid request from ip=%s: %s (%d %s)", ip, kind, status, code)
        else:
            path = getattr(req, "path", None) or "(no path read)"
            self.log.error("Error handling request %s from ip=%s", path, ip, exc_info=exc)
        data, request_id = framing.raw_problem(status, code, detail, headers)
        if req is not None:
            environ = default_environ(req, client, self.cfg)
            environ[ENV_REQUEST_ID] = request_id
            resp = Response(req, client, self.cfg)
            resp.status = f"{status} {framing.HTTPStatus(status).phrase}"
            resp.sent = resp.response_length = len(data)
            self.log.access(resp, req, environ, timedelta(0))
        _note(code)
        try:
            util.write_nonblock(client, data)
        except Exception:
            self.log.debug("Failed to send error message.")


def _send(sock: Any, data: bytes) -> None:
    try:
        sock.send(data)  # a small answer on a fresh or drained connection: one send fits
    except OSError:
        pass


def _ip(addr: Any) -> str:
    return str(addr[0]) if isinstance(addr, tuple) and addr else "unix"


def _note(code: str) -> None:
    try:
        from nearwise.web.metrics import note_problem

        note_problem(code)
    except Exception:  # metrics are not worth failing an answer for
        pass
