"""Slow and stalled connections for ``attack.py``, all to 127.0.0.1 and all with timeouts.

- :func:`stalled_bodies`: predicts that declare ``Content-Length: 1000``, send one byte of body
  and wait for the answer (issue 12, table 1 row 1).
- :class:`SlowPool`: connections that trickle request headers, or a predict body, one byte
  every ``period`` seconds from one thread (row 2), noting what the server answers or closes.
- :func:`abandon`: a whole request sent, then the connection closed before the answer.
"""

from __future__ import annotations

import selectors
import socket
import threading
import time
from collections import Counter
from dataclasses import dataclass, field

from hostile import HOST, Answer, read_answer

PERIOD_S = 3.0
BODY_HEAD = (
    f"POST /v1/predict HTTP/1.1\r\nHost: {HOST}\r\nContent-Type: application/json\r\n"
    "Content-Length: 1000\r\n\r\n"
).encode()
SLOW_HEAD = f"GET /healthz HTTP/1.1\r\nHost: {HOST}\r\nX-Slow: ".encode() + b"a" * 1000


@dataclass
class Stalled:
    thread: threading.Thread
    heard: list[tuple[Answer, bool]] = field(default_factory=list)  # the answer, closed after


def stalled_bodies(port: int, n: int, timeout: float) -> list[Stalled]:
    """``n`` threads, each sending predict headers and one byte of a 1000-byte body, then
    waiting up to ``timeout`` seconds for an answer and 2 s more for the server to close."""

    def one(out: list[tuple[Answer, bool]]) -> None:
        t0 = time.monotonic()
        closed = False
        try:
            with socket.create_connection((HOST, port), timeout=timeout) as sock:
                sock.sendall(BODY_HEAD + b"{")
                ans = read_answer(sock, t0)
                if ans.status:
                    sock.settimeout(2.0)
                    closed = sock.recv(1) == b""
        except OSError as exc:
            ans = Answer(seconds=time.monotonic() - t0, error=type(exc).__name__)
        if ans.error == "TimeoutError":
            ans = Answer(error="held", seconds=timeout)
        out.append((ans, closed))

    runs = []
    for _ in range(n):
        heard: list[tuple[Answer, bool]] = []
        thread = threading.Thread(target=one, args=(heard,), daemon=True)
        thread.start()
        runs.append(Stalled(thread, heard))
    return runs


def finish(runs: list[Stalled]) -> list[tuple[Answer, bool]]:
    for r in runs:
        r.thread.join(timeout=120)
    return [r.heard[0] if r.heard else (Answer(error="no result"), False) for r in runs]


@dataclass
class Slow:
    sock: socket.socket
    kind: str  # "header" or "body"
    data: bytes  # what is still to trickle
    due: float
    closed_at: float | None = None


class SlowPool:
    """``headers`` connections trickling request headers and ``bodies`` trickling a predict
    body (its headers sent at once), one byte every ``period`` s each, spread over the period.
    A connection the server closes is replaced, as an attacker would (at most ten times the
    connections in all), so the pressure stays for the whole hold."""

    def __init__(self, port: int, headers: int, bodies: int, period: float = PERIOD_S) -> None:
        self.port = port
        self.period = period
        self.start = time.monotonic()
        self.sel = selectors.DefaultSelector()
        self.conns: list[Slow] = []
        self.answers: dict[str, Counter] = {"header": Counter(), "body": Counter()}
        self.refused = 0
        self.spare = 10 * (headers + bodies)
        total = headers + bodies
        for i in range(total):
            self._connect("header" if i < headers else "body", self.start + period * i / total)
        self.fewest = self.most = self._open()

    def _connect(self, kind: str, due: float) -> None:
        try:
            sock = socket.create_connection((HOST, self.port), timeout=5.0)
            if kind == "body":  # the headers at once, then the body byte by byte
                sock.sendall(BODY_HEAD)
        except OSError:
            self.refused += 1
            return
        sock.setblocking(False)
        conn = Slow(sock, kind, SLOW_HEAD if kind == "header" else b"[" * 999, due)
        self.conns.append(conn)
        self.sel.register(sock, selectors.EVENT_READ, conn)

    def _open(self) -> int:
        return sum(c.closed_at is None for c in self.conns)

    def _closed(self, conn: Slow, what: str) -> None:
        conn.closed_at = time.monotonic()
        self.answers[conn.kind][what] += 1
        self.sel.unregister(conn.sock)
        conn.sock.close()
        if self.spare > 0:
            self.spare -= 1
            self._connect(conn.kind, conn.closed_at + self.period)

    def _heard(self, conn: Slow) -> None:
        try:
            data = conn.sock.recv(4096)
        except BlockingIOError:
            return
        except OSError as exc:
            self._closed(conn, type(exc).__name__)
            return
        parts = data.split(b" ", 2)
        self._closed(conn, parts[1].decode() if data.startswith(b"HTTP/") else "closed")

    def drive(self, until: float) -> None:
        """Trickle bytes until ``until`` (time.monotonic()), noting every close."""
        while (now := time.monotonic()) < until:
            live = [c for c in self.conns if c.closed_at is None]
            if not live:
                time.sleep(min(0.5, until - now))
                continue
            due = min(c.due for c in live)
            for key, _ in self.sel.select(max(0.0, min(due - now, until - now, 0.5))):
                self._heard(key.data)
            now = time.monotonic()
            for c in live:
                if c.closed_at is None and c.due <= now and c.data:
                    try:
                        c.sock.send(c.data[:1])
                        c.data = c.data[1:]
                    except BlockingIOError:
                        pass
                    except OSError:
                        self._heard(c)
                    c.due += self.period
            self.fewest = min(self.fewest, self._open())
            self.most = max(self.most, self._open())

    def close(self) -> None:
        for c in self.conns:
            if c.closed_at is None:
                self.sel.unregister(c.sock)
                c.sock.close()
        self.sel.close()

    def figures(self) -> dict[str, object]:
        closes = [c.closed_at - self.start for c in self.conns if c.closed_at is not None]
        return {
            "slow connections opened (headers + bodies, replacements included)": len(self.conns),
            "connections refused": self.refused,
            "slow connections held (fewest open at once during the hold)": self.fewest,
            "slow connections closed by the server": {k: dict(v) for k, v in self.answers.items()},
            "first close by the server (s)": round(min(closes), 1) if closes else None,
        }


def abandon(port: int, path: str, body: bytes, after_s: float) -> float:
    """POST a whole JSON body to ``path`` and close the connection ``after_s`` seconds later
    without reading the answer; returns the seconds since sending began."""
    t0 = time.monotonic()
    head = (
        f"POST {path} HTTP/1.1\r\nHost: {HOST}\r\nContent-Type: application/json\r\n"
        f"Content-Length: {len(body)}\r\n\r\n"
    ).encode()
    try:
        with socket.create_connection((HOST, port), timeout=30.0) as sock:
            sock.sendall(head + body)
            time.sleep(after_s)
    except OSError:
        pass
    return time.monotonic() - t0
