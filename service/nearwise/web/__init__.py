"""The HTTP layer: Flask app, schemas, table parsing and the problem handler. No numerics.

``create_app`` is imported on first use, so that ``nearwise serve`` can read its settings
(``nearwise.web.settings``) before anything loads numpy and its BLAS thread pool.
"""

from typing import Any

__all__ = ["create_app"]


def __getattr__(name: str) -> Any:
    if name == "create_app":
        from nearwise.web.app import create_app

        return create_app
    raise AttributeError(f"module 'nearwise.web' has no attribute {name!r}")
