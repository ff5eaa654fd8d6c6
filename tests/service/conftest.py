"""Fixtures of the service tests: the app and its test client."""

from __future__ import annotations

import io
import json
import logging

import pytest

from service import create_app
from service.logs import LOGGER_NAME, JsonFormatter


@pytest.fixture
def app():
    return create_app({"TESTING": True})


@pytest.fixture
def client(app):
    return app.test_client()


@pytest.fixture
def log_lines():
    """The service's JSON log lines written during the test, parsed."""
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    logger = logging.getLogger(LOGGER_NAME)
    logger.addHandler(handler)
    try:
        yield lambda: [json.loads(line) for line in stream.getvalue().splitlines()]
    finally:
        logger.removeHandler(handler)
