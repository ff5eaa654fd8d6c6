"""A small typed client of the heartsway HTTP API (standard library only).

Catalogue
---------
HeartswayClient(base_url, *, api_key, timeout_s, retries, backoff_s)
    .health() -> dict; .features() -> dict
    .analyze(body) -> Analysis; .analyze_file(path, ...) -> Analysis
    .fhir_bundle(body) -> dict; .report(body, *, image_format) -> bytes
    .submit(path_or_body, *, window_s, ...) -> Job; .job(id) -> Job
Job
    A night job: .wait() (a progress bar on a terminal), .result(), .delete().
Analysis, Feature
    The answer, typed: the headline numbers and the feature vector (plus the document).
ApiError, ServiceUnavailable
    A problem-details answer; a 503 that outlasted the retries.
VALIDATION_ERROR, UNUSABLE_SIGNAL, COMPUTE_TIME_EXCEEDED
    The service's own problem types (``ApiError.problem["type"]``).

Example::

    from client import HeartswayClient

    api = HeartswayClient("http://127.0.0.1:8000")
    analysis = api.analyze_file("evening.edf")
    print(analysis.heart_rate_bpm, analysis.feature("sdnn_ms").value)
"""

from client.api import (
    COMPUTE_TIME_EXCEEDED,
    UNUSABLE_SIGNAL,
    VALIDATION_ERROR,
    Analysis,
    ApiError,
    Feature,
    HeartswayClient,
    Job,
    ServiceUnavailable,
)

__all__ = [
    "COMPUTE_TIME_EXCEEDED",
    "UNUSABLE_SIGNAL",
    "VALIDATION_ERROR",
    "Analysis",
    "ApiError",
    "Feature",
    "HeartswayClient",
    "Job",
    "ServiceUnavailable",
]
