"""The WSGI entry point for gunicorn and other servers: ``nearwise.wsgi:app``."""

from nearwise.web.app import create_app

app = create_app()
