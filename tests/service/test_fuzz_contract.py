"""Contract fuzzing: schemathesis drives every operation of openapi.yaml.

Requests are generated from the committed contract (valid ones and, in the
negative phase, ones that break it). Every answer must be listed for its
operation, carry a declared media type and headers, and validate against its
schema; no answer may be a 5xx; a request that breaks the contract must be
refused. Run in process (the WSGI app) and against gunicorn on 127.0.0.1.

The check that every contract-valid request is *accepted*
(``positive_data_acceptance``) is left out on purpose: some rules cannot be
written in JSON Schema (a trace must last 20 s at its own rate; ``[low,
high]`` needs low < high; channels must have equal lengths and unique labels)
and are answered 422 by design; tests/service/test_security_inputs.py checks
each of them by name.

Generated traces are short; a hook stretches most of them (by repetition) to
21 s at rates up to 250 Hz, so that the engine itself runs on arbitrary
content, not only the length check.
"""

from __future__ import annotations

import math
from collections import Counter

import pytest

schemathesis = pytest.importorskip("schemathesis")
from hypothesis import HealthCheck, settings  # noqa: E402
from schemathesis.specs.openapi.checks import positive_data_acceptance  # noqa: E402
from service_contract import ROOT  # noqa: E402

from service import create_app  # noqa: E402
from service.loadtest import serve  # noqa: E402

SCHEMA = schemathesis.openapi.from_path(ROOT / "openapi.yaml")
APP = create_app({"TESTING": True})
API_KEY = "fuzz-key-0123456789abcdef"
#: Bounded so that both runs take about a minute together on two cores.
IN_PROCESS_EXAMPLES = 80
LOOPBACK_EXAMPLES = 30
STRETCH_S = 21.0
STRETCH_MAX_FS_HZ = 2000.0

STATUSES: Counter[str] = Counter()


def map_body(context, body):
    """Stretch each ``samples`` list of a JSON analysis body to 21 s (rates up to 250 Hz)."""
    if not isinstance(body, dict):
        return body
    fs = body.get("sampling_rate_hz")
    channels = body.get("channels")
    if not isinstance(fs, int | float) or isinstance(fs, bool) or not isinstance(channels, list):
        return body
    if not 50 <= fs <= STRETCH_MAX_FS_HZ:
        return body
    n = math.ceil(STRETCH_S * fs)
    for channel in channels:
        samples = channel.get("samples") if isinstance(channel, dict) else None
        if isinstance(samples, list) and len(samples) >= 2:
            channel["samples"] = (samples * (n // len(samples) + 1))[:n]
    return body


def _record(label: str, response) -> None:
    path = response.request.url.split('/', 3)[-1]
    STATUSES[f"{label} {response.request.method} {path} {response.status_code}"] += 1


@pytest.fixture(scope="module", autouse=True)
def report_statuses():
    yield
    # The figures quoted in the README's Reliability section (pytest -s shows them).
    print("\nschemathesis statuses:", dict(sorted(STATUSES.items())))


@SCHEMA.hooks.apply(map_body)
@SCHEMA.parametrize()
@settings(max_examples=IN_PROCESS_EXAMPLES, deadline=None,
          suppress_health_check=list(HealthCheck))
def test_in_process_app_honours_the_contract(case):
    response = case.call_and_validate(app=APP, excluded_checks=[positive_data_acceptance])
    _record("in-process", response)
    assert response.status_code < 500


@pytest.fixture(scope="module")
def loopback(tmp_path_factory):
    """gunicorn with the service's config, API keys required, on a free loopback port."""
    env = {"HEARTSWAY_WORKERS": "2", "HEARTSWAY_API_KEYS": f"{API_KEY},second-key-abcdefghijk"}
    with serve(tmp_path_factory.mktemp("fuzz"), env) as server:
        yield server


@SCHEMA.hooks.apply(map_body)
@SCHEMA.parametrize()
@settings(max_examples=LOOPBACK_EXAMPLES, deadline=None,
          suppress_health_check=list(HealthCheck))
def test_gunicorn_on_loopback_honours_the_contract(case, loopback):
    response = case.call_and_validate(
        base_url=loopback.base,
        headers={"Authorization": f"Bearer {API_KEY}"},
        excluded_checks=[positive_data_acceptance],
        timeout=60,
    )
    _record("gunicorn", response)
    assert response.status_code < 500
