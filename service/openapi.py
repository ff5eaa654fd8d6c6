"""The OpenAPI 3.1 contract, generated from the marshmallow schemas with apispec.

``python -m service.openapi`` writes ``openapi.yaml`` at the top of the
repository; ``python -m service.openapi --check`` exits 1 when the committed
file differs from what the schemas generate. The service serves the same text
at ``GET /openapi.yaml``. Paths are listed here by hand, and a test checks
that they match the application's routes one for one.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

import yaml
from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin

import features
from features.conditioning import valid_units
from schemas.catalogue import CatalogueSchema, FeatureValueSchema
from schemas.csv_input import CsvUploadFormSchema
from schemas.problems import (
    ComputeTimeProblemSchema,
    HealthSchema,
    ProblemSchema,
    UnusableSignalProblemSchema,
    ValidationProblemSchema,
)
from schemas.requests import COUNTS_UNIT, DEFAULT_MAX_SAMPLES, QUANTITIES, AnalysisRequestSchema
from schemas.responses import (
    AnalysisResponseSchema,
    BeatsSchema,
    ChannelSummarySchema,
    MorphologySchema,
    RespirationSchema,
    SignalsSchema,
    TemplateSchema,
    WindowsSchema,
)
from service import openapi_extras
from service.access import AUTH_SCHEME, REALM
from service.config import DEFAULTS
from service.logs import REQUEST_ID_HEADER
from service.problem_table import COMPUTE_TIME_TYPE, UNUSABLE_SIGNAL_TYPE, VALIDATION_TYPE
from service.problems import PROBLEM_MEDIA_TYPE

DEFAULT_PATH = Path(__file__).resolve().parent.parent / "openapi.yaml"

DESCRIPTION = f"""\
Heart-health features (beats, inter-beat variability, waveform morphology,
respiration), each with a confidence, from body-recoil force traces recorded
by sensors under a seat, bed or platform.

Errors are RFC 9457 problem details (`{PROBLEM_MEDIA_TYPE}`). Plain HTTP
errors have the type `about:blank`; a request that breaks the contract has the
type `{VALIDATION_TYPE}` and names every offending field in `errors`; a trace
with no usable signal has the type `{UNUSABLE_SIGNAL_TYPE}` and a `reason`.

Limits (defaults, each configurable, see the README): a body of at most
{DEFAULTS["MAX_CONTENT_LENGTH"]} bytes (`HEARTSWAY_MAX_BODY_BYTES`, 413 above); at
most {DEFAULT_MAX_SAMPLES} samples per request over all channels
(`HEARTSWAY_MAX_SAMPLES`, 422 above); at most {DEFAULTS["HEARTSWAY_MAX_CHANNELS"]}
channels (`HEARTSWAY_MAX_CHANNELS`, 422 above); at most
{DEFAULTS["HEARTSWAY_MAX_COMPUTE_S"]:g} s of work per analysis
(`HEARTSWAY_MAX_COMPUTE_S`; the analysis is stopped and answered 503 with the type
`{COMPUTE_TIME_TYPE}`). Bodies are taken uncompressed only: a
`Content-Encoding` other than `identity` gets 415.

Access: when the service is configured with API keys, every path under `/v1`
needs `Authorization: Bearer <key>` (401 with `WWW-Authenticate` otherwise);
`/healthz`, `/readyz` and `/openapi.yaml` are always open. Browsers may call the
API only from origins the service allows (CORS is closed by default).

Caution: this service is not a medical device and its output is not a
diagnosis. Its features are estimates for research and wellness monitoring;
decisions about a person's health belong to qualified clinicians under local
regulation.
"""

_PROBLEM_CONTENT = {PROBLEM_MEDIA_TYPE: {"schema": {"$ref": "#/components/schemas/Problem"}}}
_REQUEST_ID = {
    REQUEST_ID_HEADER: {
        "description": "Id of this request: the client's, when well formed, or a new one.",
        "schema": {"type": "string"},
    }
}


def _plain(description: str, **headers: Any) -> dict[str, Any]:
    return {
        "description": description,
        "content": _PROBLEM_CONTENT,
        "headers": {**_REQUEST_ID, **headers},
    }


_RESPONSES: dict[str, dict[str, Any]] = {
    "BadRequest": _plain("The body is not valid JSON."),
    "NotFound": _plain("No such path."),
    "MethodNotAllowed": _plain(
        "The path exists but not for this method.",
        Allow={"description": "Methods the path accepts.", "schema": {"type": "string"}},
    ),
    "ContentTooLarge": _plain("The body is larger than the configured limit."),
    "UnsupportedMediaType": _plain("The body's media type is not accepted here."),
    "Unprocessable": {
        "description": (
            "The request breaks the contract (every offending field named), or the "
            "trace holds no usable signal."
        ),
        "content": {
            PROBLEM_MEDIA_TYPE: {
                "schema": {
                    "oneOf": [
                        {"$ref": "#/components/schemas/ValidationProblem"},
                        {"$ref": "#/components/schemas/UnusableSignalProblem"},
                    ]
                }
            }
        },
        "headers": _REQUEST_ID,
    },
    "Unauthorized": _plain(
        "An API key is required (the service is configured with keys) and none, or an "
        "unknown one, was sent.",
        **{
            "WWW-Authenticate": {
                "description": f'`{AUTH_SCHEME} realm="{REALM}"` (RFC 6750 section 3).',
                "schema": {"type": "string"},
            }
        },
    ),
    "InternalError": _plain("Unexpected error; logged under the request id, no details shown."),
    "Unavailable": _plain("The analysis engine failed its self-check in this process."),
    "ComputeTimeExceeded": {
        "description": (
            "The analysis ran past the service's compute-time limit "
            f"(HEARTSWAY_MAX_COMPUTE_S, default {DEFAULTS['HEARTSWAY_MAX_COMPUTE_S']:g} s) "
            "and was stopped; send a shorter trace or fewer channels."
        ),
        "content": {
            PROBLEM_MEDIA_TYPE: {"schema": {"$ref": "#/components/schemas/ComputeTimeProblem"}}
        },
        "headers": _REQUEST_ID,
    },
}

#: Optional API-key authentication: a key, or none when the service has no keys.
_KEY_OPTIONAL: list[dict[str, list[str]]] = [{"apiKey": []}, {}]
#: Open paths: never a key.
_OPEN: list[dict[str, list[str]]] = []


def _json(schema: str, description: str) -> dict[str, Any]:
    return {
        "description": description,
        "content": {"application/json": {"schema": {"$ref": f"#/components/schemas/{schema}"}}},
        "headers": _REQUEST_ID,
    }


def _errors(*names: str) -> dict[str, Any]:
    codes = {
        "BadRequest": "400",
        "Unauthorized": "401",
        "NotFound": "404",
        "MethodNotAllowed": "405",
        "ContentTooLarge": "413",
        "UnsupportedMediaType": "415",
        "Unprocessable": "422",
        "InternalError": "500",
        "Unavailable": "503",
        "ComputeTimeExceeded": "503",
    }
    return {codes[name]: {"$ref": f"#/components/responses/{name}"} for name in names}



def _operations_paths(spec: APISpec) -> None:
    """Add the open operations paths to ``spec``: liveness, readiness and this contract."""
    spec.path(
        path="/healthz",
        operations={
            "get": {
                "operationId": "getHealth",
                "summary": "Liveness: the process answers.",
                "tags": ["operations"],
                "security": _OPEN,
                "responses": {
                    "200": _json("Health", "Alive."),
                    **_errors("MethodNotAllowed", "InternalError"),
                },
            }
        },
    )
    spec.path(
        path="/readyz",
        operations={
            "get": {
                "operationId": "getReadiness",
                "summary": "Readiness: the engine analysed a synthetic trace in this process.",
                "tags": ["operations"],
                "security": _OPEN,
                "responses": {
                    "200": _json("Health", "Ready for analyses."),
                    **_errors("MethodNotAllowed", "InternalError", "Unavailable"),
                },
            }
        },
    )
    spec.path(
        path="/openapi.yaml",
        operations={
            "get": {
                "operationId": "getContract",
                "summary": "This contract.",
                "tags": ["operations"],
                "security": _OPEN,
                "responses": {
                    "200": {
                        "description": "OpenAPI 3.1 document.",
                        "content": {
                            "application/yaml": {
                                # No JSON type: the body is YAML text whose parsed
                                # form is this document.
                                "schema": {"description": "This OpenAPI document, as YAML."}
                            }
                        },
                        "headers": _REQUEST_ID,
                    },
                    **_errors("MethodNotAllowed", "InternalError"),
                },
            }
        },
    )


def _paths(spec: APISpec) -> None:
    """Add the core operations to ``spec``: health, readiness, the catalogue and analyses.

    One ``spec.path`` call per path, each operation with its id, summary, security and
    responses (shared ones by reference, see ``_RESPONSES``). Reports, the page, static
    files and /metrics come from :func:`service.openapi_extras.extend`; the multipart
    bodies are completed by ``_csv_upload`` and ``openapi_extras``.
    """
    _operations_paths(spec)
    spec.path(
        path="/v1/features",
        operations={
            "get": {
                "operationId": "listFeatures",
                "summary": "The catalogue of features, with definitions and units.",
                "tags": ["features"],
                "security": _KEY_OPTIONAL,
                "responses": {
                    "200": _json("Catalogue", "Every feature the engine reports."),
                    **_errors("Unauthorized", "MethodNotAllowed", "InternalError"),
                },
            }
        },
    )
    spec.path(
        path="/v1/analyses",
        operations={
            "post": {
                "operationId": "createAnalysis",
                "summary": "Analyse a trace.",
                "description": (
                    "Send the trace as JSON (numbers in `samples`, or little-endian binary "
                    "in `samples_base64` with its `dtype`), or upload a CSV file (one column "
                    "per channel, a header row, an optional `time_s` column) as multipart "
                    "form data with the rate in `sampling_rate_hz` (or given by `time_s`). "
                    "A lost sample (`null` in `samples`, NaN in a float `samples_base64` or "
                    "a binary file, an empty CSV cell, whole missing steps of `time_s`) is "
                    "masked as a segment of kind `gap` and the rest is analysed."
                ),
                "tags": ["analyses"],
                "security": _KEY_OPTIONAL,
                "requestBody": {
                    "required": True,
                    "content": {
                        "application/json": {
                            "schema": {"$ref": "#/components/schemas/AnalysisRequest"}
                        },
                        # Filled in by _csv_upload: the form's fields plus `file`.
                        "multipart/form-data": {
                            "schema": {"$ref": "#/components/schemas/CsvUpload"},
                            "encoding": {"file": {"contentType": "text/csv"}},
                        },
                    },
                },
                "responses": {
                    "200": _json("Analysis", "The features, each with its confidence."),
                    **_errors(
                        "BadRequest",
                        "Unauthorized",
                        "MethodNotAllowed",
                        "ContentTooLarge",
                        "UnsupportedMediaType",
                        "Unprocessable",
                        "InternalError",
                        "ComputeTimeExceeded",
                    ),
                },
            }
        },
    )


def build_spec() -> dict[str, Any]:
    """The contract as a plain dict (deterministic: same schemas, same dict)."""
    spec = APISpec(
        title="heartsway",
        version=features.__version__,
        openapi_version="3.1.0",
        plugins=[MarshmallowPlugin()],
        info={
            "description": DESCRIPTION,
            "license": {"name": "Proprietary", "identifier": "LicenseRef-Proprietary"},
        },
        servers=[{"url": "http://127.0.0.1:8000", "description": "Local service"}],
    )
    spec.components.schema("AnalysisRequest", schema=AnalysisRequestSchema)
    spec.components.schema("CsvUploadForm", schema=CsvUploadFormSchema)
    spec.components.schema("Catalogue", schema=CatalogueSchema)
    spec.components.schema("FeatureValue", schema=FeatureValueSchema)
    spec.components.schema("Health", schema=HealthSchema)
    spec.components.schema("Problem", schema=ProblemSchema)
    spec.components.schema("ValidationProblem", schema=ValidationProblemSchema)
    spec.components.schema("UnusableSignalProblem", schema=UnusableSignalProblemSchema)
    spec.components.schema("ComputeTimeProblem", schema=ComputeTimeProblemSchema)
    spec.components.security_scheme(
        "apiKey",
        {
            "type": "http",
            "scheme": "bearer",
            "description": (
                "An API key issued by the operator (HEARTSWAY_API_KEYS or "
                "HEARTSWAY_API_KEYS_FILE), sent as `Authorization: Bearer <key>`. Required on "
                "/v1 paths only when the service is configured with keys."
            ),
        },
    )
    spec.components.schema("ChannelSummary", schema=ChannelSummarySchema)
    spec.components.schema("Beats", schema=BeatsSchema)
    spec.components.schema("Windows", schema=WindowsSchema)
    spec.components.schema("Template", schema=TemplateSchema)
    spec.components.schema("Signals", schema=SignalsSchema)
    spec.components.schema("Morphology", schema=MorphologySchema)
    spec.components.schema("Respiration", schema=RespirationSchema)
    spec.components.schema("Analysis", schema=AnalysisResponseSchema)
    for name, response in _RESPONSES.items():
        spec.components.response(name, response)
    openapi_extras.register(spec)
    _paths(spec)
    document = spec.to_dict()
    schemas = document["components"]["schemas"]
    _channel_rules(schemas["Channel"])
    schemas["CsvUpload"] = _csv_upload(schemas["CsvUploadForm"])
    # Reports, FHIR output, other file formats, the page and /metrics.
    openapi_extras.extend(document)
    return document


def _csv_upload(form: dict[str, Any]) -> dict[str, Any]:
    """The multipart body: the form's fields and the CSV ``file``, in one closed object.

    (An ``allOf`` of the closed form and a ``file`` member could never be
    satisfied: the form's ``additionalProperties: false`` forbids ``file``.)
    """
    file_part = {
        "type": "string",
        "contentMediaType": "text/csv",
        "description": (
            "The CSV trace: a header row of channel labels, one column per channel, an "
            "optional `time_s` column (steps of one sample within 1 %, or whole numbers of "
            "samples where samples were lost; it gives the rate when none is sent). An "
            "empty cell is a lost sample."
        ),
    }
    return {
        "type": "object",
        "description": "A CSV upload with its form fields.",
        "properties": {**form["properties"], "file": file_part},
        "required": [*form.get("required", []), "file"],
        "additionalProperties": False,
    }


def _channel_rules(channel: dict[str, Any]) -> None:
    """Add the cross-member rules of a channel that marshmallow checks in code.

    Exactly one of ``samples`` and ``samples_base64`` (the latter with its
    ``dtype``, the former without), and the units each quantity accepts, with
    ``counts_scale`` exactly when the unit is ``counts``.
    """
    channel["oneOf"] = [
        {"required": ["samples"], "not": {"anyOf": [
            {"required": ["samples_base64"]}, {"required": ["dtype"]}]}},
        {"required": ["samples_base64", "dtype"], "not": {"required": ["samples"]}},
    ]
    per_quantity = []
    for quantity in sorted(QUANTITIES):
        units = valid_units(quantity)
        physical = [unit for unit in units if unit != COUNTS_UNIT]
        per_quantity.append({
            "properties": {
                "quantity": {"const": quantity},
                "unit": {"enum": units},
                "counts_scale": {"properties": {"unit": {"enum": physical}}},
            }
        })
    channel["allOf"] = [
        {"anyOf": per_quantity},
        {
            "if": {"properties": {"unit": {"const": COUNTS_UNIT}}, "required": ["unit"]},
            "then": {"required": ["counts_scale"]},
            "else": {"not": {"required": ["counts_scale"]}},
        },
    ]


class _Dumper(yaml.SafeDumper):  # type: ignore[misc]
    """Safe YAML with multi-line strings as literal blocks, for a readable diff."""


def _str(dumper: yaml.SafeDumper, value: str) -> yaml.Node:
    style = "|" if "\n" in value else None
    return dumper.represent_scalar("tag:yaml.org,2002:str", value, style=style)


_Dumper.add_representer(str, _str)


def spec_yaml() -> str:
    """The contract as YAML text, exactly as committed in openapi.yaml."""
    header = "# Generated by `python -m service.openapi` from the schemas; do not edit by hand.\n"
    body: str = yaml.dump(
        build_spec(), Dumper=_Dumper, sort_keys=False, allow_unicode=True, width=100
    )
    return header + body


def main(argv: list[str] | None = None) -> int:
    """Write openapi.yaml, or with ``--check`` report whether it is current."""
    parser = argparse.ArgumentParser(prog="python -m service.openapi", description=__doc__)
    parser.add_argument("path", nargs="?", type=Path, default=DEFAULT_PATH)
    parser.add_argument("--check", action="store_true", help="exit 1 if the file is stale")
    args = parser.parse_args(argv)
    text = spec_yaml()
    if args.check:
        current = args.path.read_text(encoding="utf-8") if args.path.exists() else ""
        if current != text:
            print(f"{args.path} is stale: run `python -m service.openapi`.", file=sys.stderr)
            return 1
        return 0
    args.path.write_text(text, encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
