"""Who may call: optional API keys, and CORS closed unless origins are allowed.

API keys
    When ``HEARTSWAY_API_KEYS`` (or ``HEARTSWAY_API_KEYS_FILE``) holds any key,
    every path but the open ones (liveness, readiness, the contract) needs
    ``Authorization: Bearer <key>``. The key sent is compared with every
    configured key by :func:`hmac.compare_digest` (constant time for equal
    lengths, and all keys are always compared), so timing does not tell how
    much of a key was right or which key matched. A missing or wrong key gets
    401 with ``WWW-Authenticate: Bearer`` (RFC 6750 section 3). Keys never
    reach a log line.

CORS
    Browsers get no CORS headers at all unless their ``Origin`` is in
    ``HEARTSWAY_CORS_ORIGINS``; then the response allows that origin (never
    ``*``), and a preflight (``OPTIONS`` with ``Access-Control-Request-Method``)
    is answered 204 with the methods and headers the API uses.
"""

from __future__ import annotations

import hmac

from flask import Flask, Response, current_app, request

from service.logs import REQUEST_ID_HEADER, current_request_id, logger
from service.problems import problem

#: Endpoints that answer without a key: probes and the contract.
OPEN_ENDPOINTS = frozenset({"health.healthz", "health.readyz", "meta.openapi_yaml"})
AUTH_SCHEME = "Bearer"
REALM = "heartsway"
_CORS_METHODS = "GET, POST, OPTIONS"
_CORS_HEADERS = f"Authorization, Content-Type, {REQUEST_ID_HEADER}"
_CORS_MAX_AGE_S = "600"


def key_is_valid(sent: str, keys: tuple[str, ...]) -> bool:
    """Whether ``sent`` equals one of ``keys``, comparing with every key in constant time."""
    sent_bytes = sent.encode("utf-8", "surrogateescape")
    matched = False
    for key in keys:
        # `|` rather than `or`: every key is compared whatever the outcome.
        matched |= hmac.compare_digest(sent_bytes, key.encode("utf-8"))
    return matched


def _bearer_token() -> str | None:
    header = request.headers.get("Authorization", "")
    scheme, _, token = header.partition(" ")
    if scheme.lower() != AUTH_SCHEME.lower() or not token.strip():
        return None
    return token.strip()


def _unauthorized(detail: str, error: str | None) -> Response:
    challenge = f'{AUTH_SCHEME} realm="{REALM}"'
    if error:
        challenge += f', error="{error}"'
    return problem(401, detail, headers={"WWW-Authenticate": challenge})


def _require_key() -> Response | None:
    keys: tuple[str, ...] = current_app.config["HEARTSWAY_API_KEYS"]
    if not keys or request.method == "OPTIONS" or request.endpoint in OPEN_ENDPOINTS:
        return None
    token = _bearer_token()
    if token is None:
        outcome = "missing"
        response = _unauthorized(
            "This path needs an API key: send `Authorization: Bearer <key>`; got no key.",
            None,
        )
    elif not key_is_valid(token, keys):
        outcome = "invalid"
        response = _unauthorized(
            "The API key must be one this service issued; got a key it does not know.",
            "invalid_token",
        )
    else:
        return None
    logger.warning(
        "authentication_failed",
        extra={"fields": {"request_id": current_request_id(), "outcome": outcome}},
    )
    return response


def _allowed_origin() -> str | None:
    origin = request.headers.get("Origin")
    if origin and origin in current_app.config["HEARTSWAY_CORS_ORIGINS"]:
        return origin
    return None


def _preflight() -> Response | None:
    if (
        request.method != "OPTIONS"
        or request.url_rule is None
        or "Access-Control-Request-Method" not in request.headers
    ):
        return None
    response = Response(status=204)
    if _allowed_origin() is not None:
        response.headers["Access-Control-Allow-Methods"] = _CORS_METHODS
        response.headers["Access-Control-Allow-Headers"] = _CORS_HEADERS
        response.headers["Access-Control-Max-Age"] = _CORS_MAX_AGE_S
    return response


def _cors_headers(response: Response) -> Response:
    response.vary.add("Origin")
    origin = _allowed_origin()
    if origin is not None:
        response.headers["Access-Control-Allow-Origin"] = origin
        response.headers["Access-Control-Expose-Headers"] = REQUEST_ID_HEADER
    return response


def _before() -> Response | None:
    return _preflight() or _require_key()


def init_app(app: Flask) -> None:
    """Attach the key check, the preflight answer and the CORS headers to ``app``."""
    app.before_request(_before)
    app.after_request(_cors_headers)
