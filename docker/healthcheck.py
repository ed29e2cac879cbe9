"""The image's HEALTHCHECK: exit 0 when GET /healthz answers 200 on the port the service binds.

The bind is the last ``--bind`` on the server's command line (PID 1: the image's entrypoint,
plus any arguments given to ``docker run``), else NEARWISE_BIND, else the entrypoint's own. When
NEARWISE_API_KEYS is set and /healthz is not among NEARWISE_OPEN_ENDPOINTS, the first key is
sent. Standard library only: the image has no curl.
"""

from __future__ import annotations

import os
import sys
import urllib.request
from pathlib import Path

DEFAULT_BIND = "0.0.0.0:8080"
OPEN_BY_DEFAULT = "/healthz,/readyz,/metrics"


def bind_from_argv(argv: list[str]) -> str | None:
    """The last ``--bind HOST:PORT`` or ``--bind=HOST:PORT`` in ``argv``, if any."""
    found = None
    for i, word in enumerate(argv):
        if word == "--bind" and i + 1 < len(argv):
            found = argv[i + 1]
        elif word.startswith("--bind="):
            found = word.partition("=")[2]
    return found


def server_argv(cmdline: Path = Path("/proc/1/cmdline")) -> list[str]:
    try:
        return cmdline.read_bytes().decode(errors="replace").split("\0")
    except OSError:
        return []


def effective_bind(argv: list[str], environ: dict[str, str]) -> str:
    return bind_from_argv(argv) or environ.get("NEARWISE_BIND") or DEFAULT_BIND


def health_url(bind: str) -> str:
    """The /healthz address on this host for a ``HOST:PORT`` bind (IPv6 as ``[::]:8080``)."""
    host, _, port = bind.strip().rpartition(":")
    local = "[::1]" if host.startswith("[") else "127.0.0.1"
    return f"http://{local}:{int(port)}/healthz"


def headers(environ: dict[str, str]) -> dict[str, str]:
    """An Authorization header when /healthz needs a key under these settings."""
    keys = [k.strip() for k in environ.get("NEARWISE_API_KEYS", "").split(",") if k.strip()]
    open_ = environ.get("NEARWISE_OPEN_ENDPOINTS", OPEN_BY_DEFAULT).split(",")
    if keys and "/healthz" not in {e.strip() for e in open_}:
        return {"Authorization": f"Bearer {keys[0]}"}
    return {}


def main() -> int:
    environ = dict(os.environ)
    url = health_url(effective_bind(server_argv(), environ))
    try:
        req = urllib.request.Request(url, headers=headers(environ))
        with urllib.request.urlopen(req, timeout=2) as answer:
            return 0 if answer.status == 200 else 1
    except OSError as exc:
        print(f"healthcheck: {url}: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
