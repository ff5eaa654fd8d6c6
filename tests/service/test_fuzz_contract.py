"""Contract fuzzing: schemathesis drives every operation of openapi.yaml with every check.

Requests are generated from the committed contract (valid ones and, in the
negative phase, ones that break it). All of schemathesis's checks run on every
operation: every answer must be listed for its operation, carry a declared media
type and headers, and validate against its schema; no answer may be a 5xx; a
request that breaks the contract must be refused; a request the contract allows
must be accepted. Run in process (the WSGI app) and against gunicorn on 127.0.0.1.
The night-job operations are among them (their jobs are queued in a temporary folder).

One allowance, and a check that keeps it narrow: some rules cannot be written in
JSON Schema (a trace must last 20 s at its own rate; ``[low, high]`` needs low <
high; channels must have equal lengths and unique labels; an uploaded file must be
a readable file of its format), so a contract-valid request may be answered 422
(``positive_data_acceptance`` lists 422 among the expected statuses). Such a 422
must then name only rules of content: :func:`refused_only_for_content` fails it
when any of its errors is one the contract could have stated (a field missing,
unknown, of the wrong type, out of its enumeration or range), which is how the
contract and the service disagreeing shows (a multipart form without a ``file``
part was once allowed by the one and refused by the other).
tests/service/test_security_inputs.py checks each content rule by name.

Generated traces are short; a hook stretches most of them (by repetition) to
21 s at rates up to 250 Hz, so that the engine itself runs on arbitrary
content, not only the length check.

The example counts are bounded so that CI stays quick; a longer run by hand::

    HEARTSWAY_FUZZ_EXAMPLES=1000 python -m pytest tests/service/test_fuzz_contract.py -s
"""

from __future__ import annotations

import math
import os
import re
import shutil
import tempfile
from collections import Counter
from pathlib import Path

import pytest

schemathesis = pytest.importorskip("schemathesis")
from hypothesis import HealthCheck, settings  # noqa: E402
from schemathesis.config import SchemathesisConfig  # noqa: E402
from service_contract import ROOT  # noqa: E402

from features.limits import MAX_FS_HZ, MIN_DURATION_S, MIN_FS_HZ  # noqa: E402
from service import create_app  # noqa: E402
from service.job_store import JobSettings  # noqa: E402
from service.loadtest import serve  # noqa: E402

#: schemathesis's default expected statuses for contract-valid requests, plus 422 for the
#: content rules JSON Schema cannot state (narrowed by refused_only_for_content).
ACCEPTED_STATUSES = ["2xx", "3xx", "401", "403", "404", "409", "422", "429", "5xx"]
#: schemathesis's default refusals of contract-breaking requests, plus 413: a generated
#: body can pass the documented body limit (HEARTSWAY_MAX_BODY_BYTES, 32 MiB), and
#: "Content Too Large" is the refusal RFC 9110 (15.5.14) gives it.
REFUSED_STATUSES = ["400", "401", "403", "404", "405", "406", "409", "413", "415", "422",
                    "428", "429", "5xx"]
CONFIG = SchemathesisConfig.from_dict(
    {"checks": {"positive_data_acceptance": {"expected-statuses": ACCEPTED_STATUSES},
                "negative_data_rejection": {"expected-statuses": REFUSED_STATUSES}}}
)
SCHEMA = schemathesis.openapi.from_path(ROOT / "openapi.yaml", config=CONFIG)
#: Night jobs queued by the fuzzer live in a folder of their own (no worker runs them).
JOBS_DIR = Path(tempfile.mkdtemp(prefix="heartsway-fuzz-jobs-"))
APP = create_app({"TESTING": True, "HEARTSWAY_JOBS": JobSettings(data_dir=JOBS_DIR / "app")})
API_KEY = "fuzz-key-0123456789abcdef"
#: Bounded so that both runs take about a minute together on two cores; the environment
#: variable HEARTSWAY_FUZZ_EXAMPLES sets the in-process count for a longer run by hand.
IN_PROCESS_EXAMPLES = int(os.environ.get("HEARTSWAY_FUZZ_EXAMPLES", "80"))
LOOPBACK_EXAMPLES = max(30, IN_PROCESS_EXAMPLES // 3)

#: Errors a JSON Schema could have stated: marshmallow 4's messages for a missing,
#: unknown, null or mistyped field and for its validators (marshmallow.fields and
#: marshmallow.validate), and the service's own for a missing `file` part.
SCHEMA_EXPRESSIBLE = re.compile(
    r"Missing data for required field|Unknown field|Field may not be null|Not a valid|"
    r"Invalid input type|Must be one of|Must be greater than|Must be less than|"
    r"Length must be|Shorter than minimum|Longer than maximum|must be a trace file part; got none"
)
STRETCH_S = MIN_DURATION_S + 1.0  # just over the shortest record the engine accepts

STATUSES: Counter[str] = Counter()


def map_body(context, body):
    """Stretch each ``samples`` list of a JSON analysis body to 21 s (rates up to 250 Hz)."""
    if not isinstance(body, dict):
        return body
    fs = body.get("sampling_rate_hz")
    channels = body.get("channels")
    if not isinstance(fs, int | float) or isinstance(fs, bool) or not isinstance(channels, list):
        return body
    if not MIN_FS_HZ <= fs <= MAX_FS_HZ:
        return body
    n = math.ceil(STRETCH_S * fs)
    for channel in channels:
        samples = channel.get("samples") if isinstance(channel, dict) else None
        if isinstance(samples, list) and len(samples) >= 2:
            channel["samples"] = (samples * (n // len(samples) + 1))[:n]
    return body


def refused_only_for_content(ctx, response, case):
    """A contract-valid request answered 422 may break only rules the contract cannot state."""
    meta = case.meta
    if meta is None or not meta.generation.mode.is_positive or response.status_code != 422:
        return None
    errors = response.json().get("errors") or []
    stated = [e for e in errors if SCHEMA_EXPRESSIBLE.search(e["detail"])]
    assert not stated, (
        "The contract allows what the service refuses for a reason the contract could "
        f"state: {stated[:3]}"
    )
    return None


def _record(label: str, response) -> None:
    path = response.request.url.split('/', 3)[-1]
    STATUSES[f"{label} {response.request.method} {path} {response.status_code}"] += 1


@pytest.fixture(scope="module", autouse=True)
def report_statuses():
    yield
    shutil.rmtree(JOBS_DIR, ignore_errors=True)
    # The figures quoted in the README's Reliability section (pytest -s shows them).
    print("\nschemathesis statuses:", dict(sorted(STATUSES.items())))


@SCHEMA.hooks.apply(map_body)
@SCHEMA.parametrize()
@settings(max_examples=IN_PROCESS_EXAMPLES, deadline=None,
          suppress_health_check=list(HealthCheck))
def test_in_process_app_honours_the_contract(case):
    response = case.call_and_validate(app=APP, additional_checks=[refused_only_for_content])
    _record("in-process", response)
    assert response.status_code < 500


@pytest.fixture(scope="module")
def loopback(tmp_path_factory):
    """gunicorn with the service's config, API keys required, on a free loopback port."""
    env = {"HEARTSWAY_WORKERS": "2", "HEARTSWAY_API_KEYS": f"{API_KEY},second-key-abcdefghijk",
           "HEARTSWAY_DATA_DIR": str(JOBS_DIR / "gunicorn")}
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
        additional_checks=[refused_only_for_content],
        timeout=60,
    )
    _record("gunicorn", response)
    assert response.status_code < 500
