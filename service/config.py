"""Service configuration: defaults, then environment (``HEARTSWAY_*``), then the factory's dict."""

from __future__ import annotations

import os
from collections.abc import Mapping
from typing import Any

from schemas.requests import DEFAULT_MAX_SAMPLES

#: Every setting the service reads, with its default.
DEFAULTS: dict[str, Any] = {
    # Largest request body in bytes (Flask's own key); larger bodies get 413.
    "MAX_CONTENT_LENGTH": 32 * 1024 * 1024,
    # Largest multipart form in bytes held in memory (Werkzeug's key).
    "MAX_FORM_MEMORY_SIZE": 32 * 1024 * 1024,
    # Cap on the samples of one request, all channels together; more gets 422.
    "HEARTSWAY_MAX_SAMPLES": DEFAULT_MAX_SAMPLES,
    # Log level of the service's JSON log lines.
    "HEARTSWAY_LOG_LEVEL": "INFO",
}

#: Environment variable for each setting that can come from the environment.
ENVIRONMENT = {
    "MAX_CONTENT_LENGTH": "HEARTSWAY_MAX_BODY_BYTES",
    "MAX_FORM_MEMORY_SIZE": "HEARTSWAY_MAX_BODY_BYTES",
    "HEARTSWAY_MAX_SAMPLES": "HEARTSWAY_MAX_SAMPLES",
    "HEARTSWAY_LOG_LEVEL": "HEARTSWAY_LOG_LEVEL",
}


def _positive_int(name: str, text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise ValueError(f"`{name}` must be a positive integer; got {text!r}.") from None
    if value <= 0:
        raise ValueError(f"`{name}` must be a positive integer; got {value}.")
    return value


def load_config(
    overrides: Mapping[str, Any] | None = None, environ: Mapping[str, str] | None = None
) -> dict[str, Any]:
    """Merge the defaults, the environment and ``overrides`` (highest priority).

    Raises
    ------
    ValueError
        When an environment variable holds a value of the wrong kind.
    """
    env = os.environ if environ is None else environ
    config = dict(DEFAULTS)
    for key, var in ENVIRONMENT.items():
        if var in env:
            text = env[var]
            config[key] = text if key == "HEARTSWAY_LOG_LEVEL" else _positive_int(var, text)
    config.update(overrides or {})
    return config
