"""The HTTP layer: Flask app, schemas, table parsing and the problem handler. No numerics."""

from nearwise.web.app import create_app

__all__ = ["create_app"]
