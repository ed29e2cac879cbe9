"""Shared fixtures: ``settings``, ``app`` and ``client``."""

from __future__ import annotations

import pytest
from flask import Flask
from flask.testing import FlaskClient

from nearwise.web.app import create_app
from nearwise.web.settings import Settings


@pytest.fixture
def settings() -> Settings:
    """Default settings, whatever ``NEARWISE_*`` variables the test run has."""
    return Settings()


@pytest.fixture
def app(settings: Settings) -> Flask:
    app = create_app(settings)
    app.config["TESTING"] = True
    return app


@pytest.fixture
def client(app: Flask) -> FlaskClient:
    return app.test_client()
