"""Contract of the paths added beside the analyses: reports, FHIR output, trace files,
the page and the metrics.

:func:`register` adds the component schemas (before apispec renders), and
:func:`extend` the paths and media types (after), so that :mod:`service.openapi`
needs only two calls.
"""

from __future__ import annotations

import copy
from typing import Any

from schemas.fhir import FEATURE_SYSTEM, FHIR_JSON
from schemas.file_input import FileUploadFormSchema
from schemas.jobs import JobSchema, JobSettingsSchema, NightDocumentSchema

#: A FHIR R4 Bundle of Observations as the service emits it (the full rules are FHIR's).
FHIR_BUNDLE_SCHEMA: dict[str, Any] = {
    "type": "object",
    "description": (
        "An HL7 FHIR R4 Bundle of type `collection`: one Observation per feature of the feature "
        "vector, coded in LOINC where a standard code means the same thing (heart rate 8867-4, "
        f"respiratory rate 9279-1) and always in `{FEATURE_SYSTEM}` (docs/fhir.md), with the "
        "value in UCUM units or a dataAbsentReason, the confidence as a component, the "
        "caution as a note and, as the method, that intervals are J-J (ballistocardiogram), "
        "not R-R (ECG)."
    ),
    "required": ["resourceType", "type", "entry"],
    "properties": {
        "resourceType": {"const": "Bundle"},
        "id": {"type": "string"},
        "type": {"const": "collection"},
        "timestamp": {"type": "string"},
        "entry": {
            "type": "array",
            "items": {
                "type": "object",
                "required": ["fullUrl", "resource"],
                "properties": {
                    "fullUrl": {"type": "string"},
                    "resource": {
                        "type": "object",
                        "required": ["resourceType", "status", "code"],
                        "properties": {
                            "resourceType": {"const": "Observation"},
                            "status": {"const": "final"},
                            "code": {"type": "object"},
                        },
                    },
                },
            },
        },
    },
}


def register(spec: Any) -> None:
    """Add the component schemas of the new bodies to the apispec ``spec``."""
    spec.components.schema("FileUploadForm", schema=FileUploadFormSchema)
    spec.components.schema("JobSettings", schema=JobSettingsSchema)
    spec.components.schema("Job", schema=JobSchema)
    spec.components.schema("NightDocument", schema=NightDocumentSchema)


def _file_upload(form: dict[str, Any]) -> dict[str, Any]:
    file_part = {
        "description": (
            "The trace file: EDF/EDF+C or BDF (labels, units and rates from the header), a WFDB "
            "record (send the .hea and the signal files it names, each as a `file` part), NumPy "
            ".npy (samples x channels) or .npz (one array per channel, optional "
            "`sampling_rate_hz`), Parquet (one column per channel, `unit` in column metadata, "
            "`sampling_rate_hz` in file metadata) or CSV."
        ),
        "oneOf": [
            {"type": "string", "contentMediaType": "application/octet-stream"},
            # At least one part: a form without `file` is refused (422 naming `file`).
            {"type": "array", "minItems": 1,
             "items": {"type": "string", "contentMediaType": "application/octet-stream"}},
        ],
    }
    return {
        "type": "object",
        "description": "A trace file of any supported format with its form fields.",
        "properties": {**form["properties"], "file": file_part},
        "required": ["file"],
        "additionalProperties": False,
    }


def extend(document: dict[str, Any]) -> None:
    """Add the FHIR media type, the upload formats and the new paths to ``document``."""
    schemas = document["components"]["schemas"]
    schemas["FileUpload"] = _file_upload(schemas["FileUploadForm"])
    schemas["FhirBundle"] = FHIR_BUNDLE_SCHEMA
    analyses = document["paths"]["/v1/analyses"]["post"]
    multipart = analyses["requestBody"]["content"]["multipart/form-data"]
    multipart["schema"] = {"anyOf": [copy.deepcopy(multipart["schema"]),
                                     {"$ref": "#/components/schemas/FileUpload"}]}
    multipart["encoding"] = {"file": {"contentType": "text/csv, application/octet-stream"}}
    analyses["description"] += (
        " Other trace files (EDF/BDF, WFDB, .npy/.npz, Parquet) go up the same way as the "
        "form field `file`, with `channels` to select labels; `sampling_rate_hz` only where "
        "the format does not carry it. With `Accept: application/fhir+json` the answer is a "
        "FHIR R4 Bundle of Observations instead of the JSON document."
    )
    ok = analyses["responses"]["200"]
    ok["content"][FHIR_JSON] = {"schema": {"$ref": "#/components/schemas/FhirBundle"}}
    headers = ok.get("headers", {})
    problem = {"$ref": "#/components/schemas/Problem"}
    errors = {k: v for k, v in analyses["responses"].items() if k != "200"}
    paths = document["paths"]
    paths["/v1/reports"] = {"post": {
        "operationId": "createReport",
        "summary": "Analyse a trace and draw its report image.",
        "description": (
            "The same body as `POST /v1/analyses`. The image shows the trace with the masked "
            "segments shaded and the beats marked, the beat ensemble with the located waves, "
            "the intervals with the breathing signal, and the confidence of each family. "
            "`Accept: image/png` (the default) or `image/svg+xml`."
        ),
        "tags": ["analyses"],
        "security": analyses.get("security", []),
        "requestBody": copy.deepcopy(analyses["requestBody"]),
        "responses": {
            "200": {
                "description": "The report image (1100 x 850 pixels as PNG).",
                "content": {
                    "image/png": {"schema": {"type": "string", "contentMediaType": "image/png"}},
                    "image/svg+xml": {"schema": {"type": "string",
                                                 "contentMediaType": "image/svg+xml"}},
                },
                "headers": headers,
            },
            "406": {"description": "The Accept header names neither image type.",
                    "content": {"application/problem+json": {"schema": problem}},
                    "headers": headers},
            **errors,
        },
    }}
    text = {"description": "Static text.", "headers": headers}
    paths["/"] = {"get": {
        "operationId": "page",
        "summary": "The page: drop a trace file (or a night), see its report; or the demo.",
        "tags": ["page"],
        "responses": {"200": {**text, "content": {"text/html": {"schema": {"type": "string"}}}}},
    }}
    paths["/static/page.js"] = {"get": {
        "operationId": "pageScript", "summary": "The page's script.", "tags": ["page"],
        "responses": {"200": {**text, "content": {"text/javascript": {
            "schema": {"type": "string"}}}}},
    }}
    paths["/static/demo.json"] = {"get": {
        "operationId": "pageDemo", "tags": ["page"],
        "summary": "The demo evening (invented data) as the body of an analysis.",
        "responses": {"200": {**text, "description": "An AnalysisRequest body.",
                              "content": {"application/json": {"schema": {
                                  "$ref": "#/components/schemas/AnalysisRequest"}}}}},
    }}
    paths["/static/page.css"] = {"get": {
        "operationId": "pageStyle", "summary": "The page's style sheet.", "tags": ["page"],
        "responses": {"200": {**text, "content": {"text/css": {"schema": {"type": "string"}}}}},
    }}
    _jobs(document, errors, headers)
    paths["/metrics"] = {"get": {
        "operationId": "metrics",
        "summary": "Prometheus metrics, summed over every worker process.",
        "description": (
            "`heartsway_http_requests_total{route,method,status}`, "
            "`heartsway_http_request_duration_seconds{route}`, "
            "`heartsway_analysis_duration_seconds` and `heartsway_samples_processed_total`, "
            "in the Prometheus text format. Counts only: no request content."
        ),
        "tags": ["operations"],
        "responses": {"200": {
            "description": "The Prometheus text exposition format (prometheus_client's).",
            "content": {"text/plain": {"schema": {"type": "string"}}},
            "headers": headers,
        }},
    }}


def _jobs(document: dict[str, Any], errors: dict[str, Any], headers: dict[str, Any]) -> None:
    """The night-job paths: POST /v1/jobs, GET/DELETE /v1/jobs/{id}, GET .../result and
    GET .../report."""
    schemas = document["components"]["schemas"]
    settings = schemas.pop("JobSettings")["properties"]
    body = copy.deepcopy(schemas["AnalysisRequest"])
    body["properties"].update(copy.deepcopy(settings))
    body["description"] = ("An analysis request (AnalysisRequest) plus the job's window "
                           "and callback fields.")
    schemas["JobRequest"] = body
    upload = copy.deepcopy(schemas["FileUpload"])
    upload["properties"].pop("include", None)
    upload["properties"].update(copy.deepcopy(settings))
    upload["properties"]["file"] = {
        "description": "One trace file (EDF/BDF is read window by window; CSV, NumPy and "
                       "Parquet are read whole). Streamed to disk as it arrives.",
        "type": "string", "contentMediaType": "application/octet-stream"}
    schemas["JobUpload"] = upload
    problem = {"$ref": "#/components/schemas/Problem"}

    def problem_answer(description: str) -> dict[str, Any]:
        return {"description": description,
                "content": {"application/problem+json": {"schema": problem}},
                "headers": headers}

    job_json = {"application/json": {"schema": {"$ref": "#/components/schemas/Job"}}}
    security = document["paths"]["/v1/analyses"]["post"].get("security", [])
    not_found = {"$ref": "#/components/responses/NotFound"}
    job_id = {"name": "job_id", "in": "path", "required": True,
              "schema": {"type": "string", "maxLength": 64}}
    common = {k: v for k, v in errors.items() if k in ("401", "500")}
    paths = document["paths"]
    paths["/v1/jobs"] = {"post": {
        "operationId": "createJob",
        "summary": "Queue a whole night for a windowed analysis and its night summary.",
        "description": (
            "The same inputs as `POST /v1/analyses` (a JSON body, or one trace `file` as "
            "multipart form data up to HEARTSWAY_MAX_UPLOAD_BYTES, default 1 GiB) plus "
            "`window_s` (default 300), `window_overlap_s` and an optional `callback_url`. "
            "The input is checked (format, header, rate, channels, window length) before "
            "the answer. An `Idempotency-Key` header seen before from the same caller "
            "answers the first job again instead of queueing another."
        ),
        "tags": ["jobs"],
        "security": security,
        "parameters": [{"name": "Idempotency-Key", "in": "header", "required": False,
                        "schema": {"type": "string", "minLength": 1, "maxLength": 255}}],
        "requestBody": {"required": True, "content": {
            "application/json": {"schema": {"$ref": "#/components/schemas/JobRequest"}},
            "multipart/form-data": {"schema": {"$ref": "#/components/schemas/JobUpload"},
                                    "encoding": {"file": {
                                        "contentType": "application/octet-stream"}}},
        }},
        "responses": {
            "202": {"description": "Queued: the job document, its path in `Location`.",
                    "content": job_json,
                    "headers": {**headers, "Location": {
                        "description": "/v1/jobs/{id}", "schema": {"type": "string"}}}},
            **errors,
            "507": problem_answer("No room to store the upload now."),
        },
    }}
    paths["/v1/jobs/{job_id}"] = {
        "get": {
            "operationId": "getJob", "parameters": [job_id],
            "summary": "The job: status, progress, attempts, times, and why it failed.",
            "tags": ["jobs"], "security": security,
            "responses": {"200": {"description": "The job document.", "content": job_json,
                                  "headers": headers},
                          "404": not_found, **common},
        },
        "delete": {
            "operationId": "deleteJob", "parameters": [job_id],
            "summary": "Cancel the job and delete its upload and result.",
            "tags": ["jobs"], "security": security,
            "responses": {"204": {"description": "Cancelled and deleted.", "headers": headers},
                          "404": not_found, **common},
        },
    }
    paths["/v1/jobs/{job_id}/result"] = {
        "get": {
            "operationId": "getJobResult", "parameters": [job_id],
            "summary": "The night document once the job succeeded.",
            "description": "With `Accept: application/fhir+json`, the night summary as a "
                           "FHIR R4 Bundle of Observations.",
            "tags": ["jobs"], "security": security,
            "responses": {
                "200": {"description": "The night: summary, windows, versions, caution.",
                        "content": {
                            "application/json": {
                                "schema": {"$ref": "#/components/schemas/NightDocument"}},
                            FHIR_JSON: {"schema": {"$ref": "#/components/schemas/FhirBundle"}},
                        },
                        "headers": headers},
                "409": problem_answer("The job has not succeeded (yet)."),
                "404": not_found, **common,
            },
        },
    }
    paths["/v1/jobs/{job_id}/report"] = _job_report(document, [job_id], security, {
        "409": problem_answer("The job has not succeeded (yet)."), "404": not_found, **common})


def _job_report(document: dict[str, Any], parameters: list[Any], security: list[Any],
                responses: dict[str, Any]) -> dict[str, Any]:
    """GET /v1/jobs/{id}/report: the image answers of POST /v1/reports, the job's errors."""
    images = document["paths"]["/v1/reports"]["post"]["responses"]
    return {
        "get": {
            "operationId": "getJobReport", "parameters": parameters,
            "summary": "The night picture once the job succeeded.",
            "description": (
                "Heart rate, breathing rate and RMSSD of each occupied window across the "
                "night, each point as opaque as its confidence; the occupied and movement "
                "stretches and the bed exits; the caution on the image. Drawn from the "
                "stored result. `Accept: image/png` (the default) or `image/svg+xml`."),
            "tags": ["jobs"], "security": security,
            "responses": {
                "200": {**copy.deepcopy(images["200"]),
                        "description": "The night picture (1100 x 850 pixels as PNG)."},
                "406": copy.deepcopy(images["406"]),
                **responses,
            },
        },
    }
