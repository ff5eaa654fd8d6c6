"""Hostile and broken input, each answered with a named error or an honest result.

Complements tests/service/test_service_errors.py (malformed JSON, NaN/Infinity
literals, deep nesting, 413, 415, strings for numbers, unequal lengths,
duplicate labels, base64 of the wrong length, too many samples) and
tests/schemas (each request rule): the cases here are the ones those leave out.
"""

from __future__ import annotations

import base64
import gzip
import http.client
import json

import numpy as np
import pytest
from service_contract import check_against_contract, multipart

from service import create_app
from service.loadtest import serve
from simulation import SimulationSettings, simulate

VALIDATION = "tag:heartsway.dev,2026:problem/validation-error"


def _channel(samples, **extra):
    return {"label": "seat", "quantity": "force", "unit": "N", "samples": samples, **extra}


def _body(channels, fs=250.0):
    return {"sampling_rate_hz": fs, "channels": channels}


def _fields(response):
    return {e["field"]: e["detail"] for e in response.get_json()["errors"]}


def test_gzip_bodies_are_refused_before_any_inflation(client, monkeypatch):
    # A gzip bomb: 100 MB of zeros in about 100 kB. Refused as sent, never inflated: any
    # call into zlib's inflater during the request fails the test (a mechanism check, not
    # a timing one, so a slow machine cannot fail it).
    import zlib

    bomb = gzip.compress(b"0" * 100_000_000, compresslevel=9)
    assert len(bomb) < 200_000

    def inflating(*args, **kwargs):
        raise AssertionError("the body was inflated")

    monkeypatch.setattr(zlib, "decompress", inflating)
    monkeypatch.setattr(zlib, "decompressobj", inflating)
    monkeypatch.setattr(gzip, "decompress", inflating)
    response = client.post("/v1/analyses", data=bomb, content_type="application/json",
                           headers={"Content-Encoding": "gzip"})
    assert response.status_code == 415
    # RFC 9110 section 15.5.16: a 415 for a content coding names the accepted codings.
    assert response.headers["Accept-Encoding"] == "identity"
    assert "Content-Encoding" in response.get_json()["detail"]
    check_against_contract(response, "/v1/analyses", "post")


def test_identity_content_encoding_is_accepted(client):
    body = _body([_channel([700.0] * 10)])
    response = client.post("/v1/analyses", data=json.dumps(body), content_type="application/json",
                           headers={"Content-Encoding": "identity"})
    assert response.status_code == 422  # past the coding check: the trace is too short


@pytest.mark.parametrize("value", [1e300, -2e13])
def test_samples_of_absurd_magnitude_are_422(client, value):
    # Values near 1e154 and above overflow squares inside the engine (see the report).
    samples = [700.0] * 20 + [value]
    response = client.post("/v1/analyses", json=_body([_channel(samples)]))
    assert response.status_code == 422
    assert "magnitude at most 1e+12" in _fields(response)["channels[0].samples"]
    assert "index 20" in _fields(response)["channels[0].samples"]


def test_base64_samples_of_absurd_magnitude_are_422(client):
    raw = np.array([1.0, 3e38, 2.0], dtype="<f4").tobytes()
    channel = {"label": "a", "quantity": "force", "unit": "N", "dtype": "float32",
               "samples_base64": base64.b64encode(raw).decode()}
    response = client.post("/v1/analyses", json=_body([channel]))
    assert response.status_code == 422
    assert "index 1" in _fields(response)["channels[0].samples_base64"]


def test_sensor_positions_off_any_plate_are_422(client):
    response = client.post("/v1/analyses",
                           json=_body([_channel([700.0] * 10, position_m=[0.1, 1e300])]))
    assert set(_fields(response)) == {"channels[0].position_m[1]"}


@pytest.mark.parametrize("fs", [49.9, 2000.5, 0, -250])
def test_rates_out_of_range_are_422(client, fs):
    response = client.post("/v1/analyses", json=_body([_channel([700.0] * 10)], fs=fs))
    assert response.status_code == 422
    assert set(_fields(response)) == {"sampling_rate_hz"}


def test_infinity_in_a_csv_upload_is_422(client):
    # NaN (or an empty cell) is a lost sample, a gap; infinity is no measurement at all.
    text = "seat\n" + "700\n" * 100 + "inf\n" + "700\n" * 100
    response = client.post("/v1/analyses",
                           **multipart({"sampling_rate_hz": "250"}, text.encode()))
    assert response.status_code == 422
    assert "infinite value at index 100" in _fields(response)["channels[0].samples"]


def test_csv_sent_as_a_plain_form_field_is_read_too(client):
    text = "seat\n" + "700\n" * 50
    response = client.post("/v1/analyses",
                           **multipart({"sampling_rate_hz": "250", "file": text}))
    assert response.status_code == 422
    assert "at least 20 s" in _fields(response)["channels[0].samples"]


def test_too_long_a_trace_is_422_naming_the_24_hour_rule():
    client = create_app({"HEARTSWAY_MAX_SAMPLES": 5_000_000}).test_client()
    raw = np.zeros(50 * 86_401, dtype="<i2").tobytes()
    channel = {"label": "a", "quantity": "force", "unit": "N", "dtype": "int16",
               "samples_base64": base64.b64encode(raw).decode()}
    response = client.post("/v1/analyses", json=_body([channel], fs=50.0))
    assert response.status_code == 422
    assert "at most 86400 s (24 h)" in _fields(response)["channels[0].samples"]


def test_all_zero_and_constant_traces_are_told_apart(client):
    n = 250 * 30
    zero = client.post("/v1/analyses", json=_body([_channel([0.0] * n)])).get_json()
    flat = client.post("/v1/analyses", json=_body([_channel([700.0] * n)]))
    # An empty support (0 N) is a valid answer; a loaded but perfectly still one (700 N) is
    # a stuck or disconnected sensor, since an occupant always moves it a little.
    assert zero["heart_rate"]["mean_bpm"] is None
    assert zero["heart_rate"]["reason"] == "empty_support"
    assert "movement_not_checked_flat_trace" in zero["quality"]["flags"]
    assert "no repeating heartbeat waveform was found" in zero["warnings"]
    assert flat.status_code == 422
    assert flat.get_json()["reason"] == "flat_signal"


def test_clipped_trace_is_flagged_and_masked(client):
    recording = simulate(SimulationSettings(duration_s=60.0, n_channels=1, seed=4))
    trace = np.asarray(recording.channels[0])
    low, high = np.percentile(trace, [5, 95])
    body = _body([{"label": "seat", "quantity": recording.quantity, "unit": recording.unit,
                   "samples": np.clip(trace, low, high).tolist()}], fs=recording.fs_hz)
    response = client.post("/v1/analyses", json=body)
    assert response.status_code == 200
    document = response.get_json()
    assert "clipping" in {segment["kind"] for segment in document["quality"]["segments"]}
    assert document["quality"]["usable_fraction"] < 1.0
    check_against_contract(response, "/v1/analyses", "post")


@pytest.fixture(scope="module")
def loopback(tmp_path_factory):
    env = {"HEARTSWAY_WORKERS": "1", "HEARTSWAY_MAX_BODY_BYTES": "100000"}
    with serve(tmp_path_factory.mktemp("inputs"), env) as server:
        yield server


def test_chunked_body_over_the_limit_is_413_on_gunicorn(loopback):
    # No Content-Length: the limit must hold while reading, not only from the header.
    # 150 kB against the 100 kB limit: a body the sockets' buffers take whole, so that the
    # client has sent it all when the server answers and closes (with 1 MB the client was
    # at times still sending, and the closed connection broke its pipe before it could
    # read the answer).
    connection = http.client.HTTPConnection("127.0.0.1", loopback.port, timeout=30)
    chunks = (b"[" + b"1," * 25_000 for _ in range(3))
    connection.request("POST", "/v1/analyses", body=chunks, encode_chunked=True,
                       headers={"Content-Type": "application/json",
                                "Transfer-Encoding": "chunked"})
    response = connection.getresponse()
    body = json.loads(response.read())
    connection.close()
    assert response.status == 413, body
    assert body["title"] == "Content Too Large" and "100000 bytes" in body["detail"]


def test_oversized_headers_are_refused_by_gunicorn(loopback):
    connection = http.client.HTTPConnection("127.0.0.1", loopback.port, timeout=30)
    connection.request("GET", "/healthz", headers={"X-Padding": "x" * 10_000})
    response = connection.getresponse()
    response.read()
    connection.close()
    assert response.status == 431  # RFC 6585 section 5: Request Header Fields Too Large
