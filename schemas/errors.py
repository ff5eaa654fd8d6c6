"""Flatten marshmallow's nested error messages into a list of named fields."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from marshmallow import ValidationError


def _join(prefix: str, key: Any) -> str:
    if isinstance(key, int):
        return f"{prefix}[{key}]"
    if key == "_schema":
        return prefix
    return f"{prefix}.{key}" if prefix else str(key)


def pointer_of(field: str) -> str:
    """JSON Pointer (RFC 6901, as a URI fragment) of a dotted field path."""
    if field in ("", "body"):
        return "#"
    parts = field.replace("[", ".").replace("]", "").split(".")
    escaped = (part.replace("~", "~0").replace("/", "~1") for part in parts if part)
    return "#/" + "/".join(escaped)


def _entry(field: str, detail: str) -> dict[str, str]:
    name = field or "body"
    return {"field": name, "pointer": pointer_of(name), "detail": detail}


def flatten_errors(messages: Any, prefix: str = "") -> list[dict[str, str]]:
    """Turn ``ValidationError.messages`` into ``[{"field", "pointer", "detail"}]``.

    Nested keys become dotted paths with list indices in brackets, for
    example ``{"channels": {1: {"samples": ["..."]}}}`` becomes the field
    ``channels[1].samples``. Schema-level messages take the path of the
    schema they belong to (the empty path, shown as ``body``, at the top).
    The result is sorted by field, then message.

    Parameters
    ----------
    messages
        A message string, a list of them, or a mapping of such, nested.
    prefix
        Path of ``messages`` within the request body.

    Returns
    -------
    list of dict
        One entry per message: the dotted ``field``, its JSON ``pointer``
        (the form RFC 9457 section 3 uses in its example) and the ``detail``.
    """
    out: list[dict[str, str]] = []
    if isinstance(messages, Mapping):
        for key, value in messages.items():
            out.extend(flatten_errors(value, _join(prefix, key)))
    elif isinstance(messages, list | tuple):
        for value in messages:
            if isinstance(value, str):
                out.append(_entry(prefix, value))
            else:
                out.extend(flatten_errors(value, prefix))
    else:
        out.append(_entry(prefix, str(messages)))
    if not prefix:
        out.sort(key=lambda item: (item["field"], item["detail"]))
    return out


#: The error every schema here raises; the service catches it under this name
#: so that only ``schemas/`` imports marshmallow.
SchemaValidationError = ValidationError
