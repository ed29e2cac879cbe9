"""The image's HEALTHCHECK: exit 0 when GET /healthz answers 200 on the port the service binds.

The port comes from NEARWISE_BIND (the image sets 0.0.0.0:8080; ``docker run -e`` may change
it), so the check follows the service. Standard library only: the image has no curl.
"""

from __future__ import annotations

import os
import sys
import urllib.request

DEFAULT_BIND = "0.0.0.0:8080"


def health_url(bind: str) -> str:
    """The /healthz address on this host for a ``HOST:PORT`` bind (IPv6 as ``[::]:8080``)."""
    host, _, port = bind.strip().rpartition(":")
    local = "[::1]" if host.startswith("[") else "127.0.0.1"
    return f"http://{local}:{int(port)}/healthz"


def main() -> int:
    url = health_url(os.environ.get("NEARWISE_BIND") or DEFAULT_BIND)
    try:
        with urllib.request.urlopen(url, timeout=2) as answer:
            return 0 if answer.status == 200 else 1
    except OSError as exc:
        print(f"healthcheck: {url}: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
