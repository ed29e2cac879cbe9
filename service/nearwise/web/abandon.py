"""Has the client gone? A peek at its socket, for :class:`nearwise.core.budget.Deadline`.

Under gunicorn the WSGI environ holds the client's socket (``gunicorn.socket``). When the
request's work is under way its body has been read, so the socket has nothing more to say
unless the client closed it or sent its next request:

- ``recv(1, MSG_PEEK | MSG_DONTWAIT)`` returning ``b""`` means the peer closed its side
  (FIN): nobody will read the answer;
- a connection reset is the same;
- a byte means the client sent more (a kept-alive client's next request), which is data, not
  closure: still there. Peeking leaves it for gunicorn to read;
- no data yet (``BlockingIOError``) means still there.

Limits: a client that half-closes its sending side right after its request (``shutdown
(SHUT_WR)``, rare for HTTP clients) is taken for gone; over TLS the socket cannot be peeked
through the TLS layer, so no callable is offered there, nor outside gunicorn (the Werkzeug
development server, the test client): the time budget alone bounds those requests.
"""

from __future__ import annotations

import select
import socket
import ssl
from collections.abc import Callable, Mapping
from typing import Any

ENVIRON_KEY = "gunicorn.socket"


def watcher(environ: Mapping[str, Any]) -> Callable[[], bool] | None:
    """A callable that returns True once the request's client has closed its connection, or
    None when the server does not expose the socket."""
    sock = environ.get(ENVIRON_KEY)
    if not isinstance(sock, socket.socket) or isinstance(sock, ssl.SSLSocket):
        return None
    return lambda: closed(sock)


def closed(sock: socket.socket) -> bool:
    """Whether the peer of ``sock`` has closed the connection (see the module's notes).

    ``poll`` with a zero timeout asks first, so that the peek never waits, whatever timeout
    the server set on the socket."""
    fd = sock.fileno()
    if fd < 0:  # closed on our side
        return True
    poller = select.poll()
    poller.register(fd, select.POLLIN)
    try:
        events = poller.poll(0)
    except OSError:
        return True
    if not events:
        return False
    if events[0][1] & (select.POLLERR | select.POLLNVAL):
        return True
    try:
        data = sock.recv(1, socket.MSG_PEEK | socket.MSG_DONTWAIT)
    except (BlockingIOError, InterruptedError):
        return False
    except OSError:  # reset
        return True
    return data == b""
