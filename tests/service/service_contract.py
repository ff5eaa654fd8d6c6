"""Checking real responses against the committed openapi.yaml."""

from __future__ import annotations

from functools import cache
from pathlib import Path
from typing import Any

import yaml
from jsonschema import Draft202012Validator

ROOT = Path(__file__).resolve().parents[2]


@cache
def contract() -> dict[str, Any]:
    """The committed openapi.yaml."""
    return yaml.safe_load((ROOT / "openapi.yaml").read_text(encoding="utf-8"))


def _resolve(node: dict[str, Any]) -> dict[str, Any]:
    while "$ref" in node and len(node) == 1:
        parts = node["$ref"].removeprefix("#/").split("/")
        target: Any = contract()
        for part in parts:
            target = target[part]
        node = target
    return node


def check_against_contract(response: Any, path: str | None, method: str) -> None:
    """Assert that a test-client response is one the contract describes.

    The status must be listed for the operation (for an unknown path, the
    shared NotFound response is used), the media type must be one of that
    status's contents, the body must validate against its JSON Schema (2020-12,
    the dialect of OpenAPI 3.1), and the declared headers must be present.
    """
    spec = contract()
    if path is None:
        described = _resolve({"$ref": "#/components/responses/NotFound"})
    else:
        operation = spec["paths"][path][method.lower()]
        status = str(response.status_code)
        assert status in operation["responses"], f"{status} not in the contract of {path}"
        described = _resolve(operation["responses"][status])
    assert response.mimetype in described["content"], (
        f"{response.mimetype} not among {sorted(described['content'])}"
    )
    for header in described.get("headers", {}):
        assert header in response.headers, f"header {header} missing"
    schema = described["content"][response.mimetype]["schema"]
    body = response.get_data(as_text=True) if "yaml" in response.mimetype else response.get_json()
    validator = Draft202012Validator({"components": spec["components"], **schema})
    errors = sorted(validator.iter_errors(body), key=lambda e: list(e.absolute_path))
    assert not errors, "; ".join(f"{list(e.absolute_path)}: {e.message}" for e in errors[:5])




def multipart(fields: dict[str, Any], file_bytes: bytes | None = None) -> dict[str, Any]:
    """Keyword arguments for the test client: a multipart body built in memory.

    (The test client's own encoder spools large bodies to a temporary file
    that it leaves open.)
    """
    import io

    from werkzeug.datastructures import FileStorage
    from werkzeug.test import encode_multipart

    values: dict[str, Any] = dict(fields)
    if file_bytes is not None:
        values["file"] = FileStorage(
            stream=io.BytesIO(file_bytes), filename="trace.csv", content_type="text/csv"
        )
    boundary, data = encode_multipart(values)
    return {"data": data, "content_type": f"multipart/form-data; boundary={boundary}"}
