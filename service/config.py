"""Service configuration: defaults, then environment (``HEARTSWAY_*``), then the factory's dict."""

from __future__ import annotations

import os
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from features.conditioning import MAX_CHANNELS
from schemas.requests import DEFAULT_MAX_SAMPLES

#: Shortest API key accepted: 16 characters (a random 96-bit key in base64).
MIN_API_KEY_LENGTH = 16
_KEY_CHARACTERS = re.compile(r"^[\x21-\x7e]+$")
_ORIGIN = re.compile(r"^https?://[A-Za-z0-9.-]+(:[0-9]{1,5})?$")

#: Every setting the service reads, with its default.
DEFAULTS: dict[str, Any] = {
    # Largest request body in bytes (Flask's own key); larger bodies get 413.
    "MAX_CONTENT_LENGTH": 32 * 1024 * 1024,
    # Largest multipart form in bytes held in memory (Werkzeug's key).
    "MAX_FORM_MEMORY_SIZE": 32 * 1024 * 1024,
    # Cap on the samples of one request, all channels together; more gets 422.
    "HEARTSWAY_MAX_SAMPLES": DEFAULT_MAX_SAMPLES,
    # Cap on the channels of one request (at most the engine's MAX_CHANNELS); more gets 422.
    "HEARTSWAY_MAX_CHANNELS": MAX_CHANNELS,
    # Wall-clock seconds one analysis may compute; then 503 compute-time-exceeded.
    "HEARTSWAY_MAX_COMPUTE_S": 30.0,
    # Log level of the service's JSON log lines.
    "HEARTSWAY_LOG_LEVEL": "INFO",
    # API keys; when any is set, /v1/* needs `Authorization: Bearer <key>`.
    "HEARTSWAY_API_KEYS": (),
    # Origins allowed to call the API from a browser (CORS); none by default.
    "HEARTSWAY_CORS_ORIGINS": (),
    # Largest trace file of a night job (POST /v1/jobs), streamed to disk; larger gets 413.
    "HEARTSWAY_MAX_UPLOAD_BYTES": 1024 * 1024 * 1024,
    # Hosts (host or host:port) a job's callback_url may name; none: callbacks off.
    "HEARTSWAY_CALLBACK_HOSTS": (),
    # Where night jobs live (service.job_store.JobSettings); from the environment
    # (HEARTSWAY_DATA_DIR, HEARTSWAY_QUEUE_URL, ...) when None.
    "HEARTSWAY_JOBS": None,
}

#: Environment variable for each setting that can come from the environment.
ENVIRONMENT = {
    "MAX_CONTENT_LENGTH": "HEARTSWAY_MAX_BODY_BYTES",
    "MAX_FORM_MEMORY_SIZE": "HEARTSWAY_MAX_BODY_BYTES",
    "HEARTSWAY_MAX_SAMPLES": "HEARTSWAY_MAX_SAMPLES",
    "HEARTSWAY_MAX_CHANNELS": "HEARTSWAY_MAX_CHANNELS",
    "HEARTSWAY_MAX_COMPUTE_S": "HEARTSWAY_MAX_COMPUTE_S",
    "HEARTSWAY_LOG_LEVEL": "HEARTSWAY_LOG_LEVEL",
    "HEARTSWAY_CORS_ORIGINS": "HEARTSWAY_CORS_ORIGINS",
    "HEARTSWAY_MAX_UPLOAD_BYTES": "HEARTSWAY_MAX_UPLOAD_BYTES",
    "HEARTSWAY_CALLBACK_HOSTS": "HEARTSWAY_CALLBACK_HOSTS",
}
#: Keys come from this variable (comma-separated) and/or this file (one per line).
API_KEYS_VARIABLE = "HEARTSWAY_API_KEYS"
API_KEYS_FILE_VARIABLE = "HEARTSWAY_API_KEYS_FILE"


def _positive_int(name: str, text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise ValueError(f"`{name}` must be a positive integer; got {text!r}.") from None
    if value <= 0:
        raise ValueError(f"`{name}` must be a positive integer; got {value}.")
    return value


def _positive_seconds(name: str, text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise ValueError(f"`{name}` must be a positive number of seconds; got {text!r}.") from None
    if not value > 0 or value == float("inf"):
        raise ValueError(f"`{name}` must be a positive number of seconds; got {text!r}.")
    return value


def _split(text: str) -> tuple[str, ...]:
    return tuple(part.strip() for part in text.split(",") if part.strip())


def _parse(key: str, var: str, text: str) -> Any:
    if key == "HEARTSWAY_LOG_LEVEL":
        return text
    if key == "HEARTSWAY_CORS_ORIGINS":
        return _split(text)
    if key == "HEARTSWAY_CALLBACK_HOSTS":
        return tuple(part.lower() for part in _split(text))
    if key == "HEARTSWAY_MAX_COMPUTE_S":
        return _positive_seconds(var, text)
    return _positive_int(var, text)


def read_api_keys(env: Mapping[str, str]) -> tuple[str, ...]:
    """API keys from ``HEARTSWAY_API_KEYS`` (comma-separated) and ``HEARTSWAY_API_KEYS_FILE``.

    The file holds one key per line; blank lines and lines starting with ``#``
    are skipped. Several keys may be active at once, so that a new key can be
    handed out before the old one is withdrawn.

    Raises
    ------
    ValueError
        When the file cannot be read. (Key rules are checked by
        :func:`check_config`.)
    """
    keys = list(_split(env.get(API_KEYS_VARIABLE, "")))
    path = env.get(API_KEYS_FILE_VARIABLE)
    if path:
        try:
            text = Path(path).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as error:
            raise ValueError(
                f"`{API_KEYS_FILE_VARIABLE}` must name a readable UTF-8 file; got {path!r} "
                f"({type(error).__name__})."
            ) from None
        keys.extend(
            line.strip() for line in text.splitlines()
            if line.strip() and not line.strip().startswith("#")
        )
    return tuple(dict.fromkeys(keys))


def check_config(config: Mapping[str, Any]) -> None:
    """Refuse settings the service cannot honour.

    Raises
    ------
    ValueError
        Naming the setting, the rule and the value (never an API key itself).
    """
    channels = config["HEARTSWAY_MAX_CHANNELS"]
    if not isinstance(channels, int) or not 1 <= channels <= MAX_CHANNELS:
        raise ValueError(
            f"`HEARTSWAY_MAX_CHANNELS` must be an integer from 1 to {MAX_CHANNELS} (the "
            f"engine's limit); got {channels!r}."
        )
    for i, key in enumerate(config["HEARTSWAY_API_KEYS"]):
        if len(key) < MIN_API_KEY_LENGTH or not _KEY_CHARACTERS.match(key):
            raise ValueError(
                f"`HEARTSWAY_API_KEYS` must hold keys of at least {MIN_API_KEY_LENGTH} printable "
                f"ASCII characters without spaces; key number {i + 1} is not."
            )
    for origin in config["HEARTSWAY_CORS_ORIGINS"]:
        if not _ORIGIN.match(origin):
            raise ValueError(
                "`HEARTSWAY_CORS_ORIGINS` must list origins such as https://app.example.org "
                f"(scheme, host, optional port; no path, no wildcard); got {origin!r}."
            )


def load_config(
    overrides: Mapping[str, Any] | None = None, environ: Mapping[str, str] | None = None
) -> dict[str, Any]:
    """Merge the defaults, the environment and ``overrides`` (highest priority).

    Raises
    ------
    ValueError
        When an environment variable or an override holds a value of the wrong kind.
    """
    env = os.environ if environ is None else environ
    config = dict(DEFAULTS)
    for key, var in ENVIRONMENT.items():
        if var in env:
            config[key] = _parse(key, var, env[var])
    config["HEARTSWAY_API_KEYS"] = read_api_keys(env)
    config.update(overrides or {})
    config["HEARTSWAY_API_KEYS"] = tuple(config["HEARTSWAY_API_KEYS"])
    config["HEARTSWAY_CORS_ORIGINS"] = tuple(config["HEARTSWAY_CORS_ORIGINS"])
    check_config(config)
    return config
