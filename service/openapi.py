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
from schemas.catalogue import CatalogueSchema
from schemas.csv_input import CsvUploadFormSchema
from schemas.problems import (
    HealthSchema,
    ProblemSchema,
    UnusableSignalProblemSchema,
    ValidationProblemSchema,
)
from schemas.requests import DEFAULT_MAX_SAMPLES, AnalysisRequestSchema
from schemas.responses import (
    AnalysisResponseSchema,
    BeatsSchema,
    ChannelSummarySchema,
    MorphologySchema,
    RespirationSchema,
    SignalsSchema,
    TemplateSchema,
)
from service.config import DEFAULTS
from service.logs import REQUEST_ID_HEADER
from service.problems import PROBLEM_MEDIA_TYPE, UNUSABLE_SIGNAL_TYPE, VALIDATION_TYPE

DEFAULT_PATH = Path(__file__).resolve().parent.parent / "openapi.yaml"

DESCRIPTION = f"""\
Heart-health features (beats, inter-beat variability, waveform morphology,
respiration), each with a confidence, from body-recoil force traces recorded
by sensors under a seat, bed or platform.

Errors are RFC 9457 problem details (`{PROBLEM_MEDIA_TYPE}`). Plain HTTP
errors have the type `about:blank`; a request that breaks the contract has the
type `{VALIDATION_TYPE}` and names every offending field in `errors`; a trace
with no usable signal has the type `{UNUSABLE_SIGNAL_TYPE}` and a `reason`.

Limits (defaults, configurable): a body of at most
{DEFAULTS["MAX_CONTENT_LENGTH"]} bytes (413 above), at most {DEFAULT_MAX_SAMPLES}
samples per request over all channels (422 above).

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
    "InternalError": _plain("Unexpected error; logged under the request id, no details shown."),
    "Unavailable": _plain("The analysis engine failed its self-check in this process."),
}


def _json(schema: str, description: str) -> dict[str, Any]:
    return {
        "description": description,
        "content": {"application/json": {"schema": {"$ref": f"#/components/schemas/{schema}"}}},
        "headers": _REQUEST_ID,
    }


def _errors(*names: str) -> dict[str, Any]:
    codes = {
        "BadRequest": "400",
        "NotFound": "404",
        "MethodNotAllowed": "405",
        "ContentTooLarge": "413",
        "UnsupportedMediaType": "415",
        "Unprocessable": "422",
        "InternalError": "500",
        "Unavailable": "503",
    }
    return {codes[name]: {"$ref": f"#/components/responses/{name}"} for name in names}


def _paths(spec: APISpec) -> None:
    spec.path(
        path="/healthz",
        operations={
            "get": {
                "operationId": "getHealth",
                "summary": "Liveness: the process answers.",
                "tags": ["operations"],
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
                "responses": {
                    "200": {
                        "description": "OpenAPI 3.1 document.",
                        "content": {"application/yaml": {"schema": {"type": "string"}}},
                        "headers": _REQUEST_ID,
                    },
                    **_errors("MethodNotAllowed", "InternalError"),
                },
            }
        },
    )
    spec.path(
        path="/v1/features",
        operations={
            "get": {
                "operationId": "listFeatures",
                "summary": "The catalogue of features, with definitions and units.",
                "tags": ["features"],
                "responses": {
                    "200": _json("Catalogue", "Every feature the engine reports."),
                    **_errors("MethodNotAllowed", "InternalError"),
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
                    "form data with the rate in `sampling_rate_hz`."
                ),
                "tags": ["analyses"],
                "requestBody": {
                    "required": True,
                    "content": {
                        "application/json": {
                            "schema": {"$ref": "#/components/schemas/AnalysisRequest"}
                        },
                        "multipart/form-data": {
                            "schema": {
                                "allOf": [
                                    {"$ref": "#/components/schemas/CsvUploadForm"},
                                    {
                                        "type": "object",
                                        "required": ["file"],
                                        "properties": {
                                            "file": {
                                                "type": "string",
                                                "contentMediaType": "text/csv",
                                                "description": "The CSV trace.",
                                            }
                                        },
                                    },
                                ]
                            }
                        },
                    },
                },
                "responses": {
                    "200": _json("Analysis", "The features, each with its confidence."),
                    **_errors(
                        "BadRequest",
                        "MethodNotAllowed",
                        "ContentTooLarge",
                        "UnsupportedMediaType",
                        "Unprocessable",
                        "InternalError",
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
    spec.components.schema("Health", schema=HealthSchema)
    spec.components.schema("Problem", schema=ProblemSchema)
    spec.components.schema("ValidationProblem", schema=ValidationProblemSchema)
    spec.components.schema("UnusableSignalProblem", schema=UnusableSignalProblemSchema)
    spec.components.schema("ChannelSummary", schema=ChannelSummarySchema)
    spec.components.schema("Beats", schema=BeatsSchema)
    spec.components.schema("Template", schema=TemplateSchema)
    spec.components.schema("Signals", schema=SignalsSchema)
    spec.components.schema("Morphology", schema=MorphologySchema)
    spec.components.schema("Respiration", schema=RespirationSchema)
    spec.components.schema("Analysis", schema=AnalysisResponseSchema)
    for name, response in _RESPONSES.items():
        spec.components.response(name, response)
    _paths(spec)
    return spec.to_dict()


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
