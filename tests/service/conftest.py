"""Fixtures of the service tests: the app and its test client."""

from __future__ import annotations

import pytest

from service import create_app


@pytest.fixture
def app():
    return create_app({"TESTING": True})


@pytest.fixture
def client(app):
    return app.test_client()
