"""POST /v1/analyses end to end on the demo scenario's trace (in process)."""

from __future__ import annotations

import base64
import io
import json
import math

import numpy as np
import pytest
from service_contract import check_against_contract, multipart

from features.intervals import LABELS
from schemas.responses import NOTICE
from service.demo import DEMO_SETTINGS, demo_request_body

DEMO_HEART_RATE_BPM = DEMO_SETTINGS.heart_rate_bpm


@pytest.fixture(scope="module")
def demo_body():
    return demo_request_body()



def _vector(body):
    """The feature vector of a response as {name: value}."""
    return {f["name"]: f["value"] for f in body["feature_vector"]["features"]}

def _post(client, body):
    return client.post("/v1/analyses", json=body)


def test_demo_analysis_is_200_and_matches_the_contract(client, demo_body):
    response = _post(client, demo_body)
    assert response.status_code == 200, response.get_data(as_text=True)
    assert response.mimetype == "application/json"
    check_against_contract(response, "/v1/analyses", "post")
    body = response.get_json()
    assert body["notice"] == NOTICE
    assert "not a medical device" in body["notice"] and "clinician" in body["notice"]
    assert body["input"]["n_samples"] == len(demo_body["channels"][0]["samples"])
    assert [c["label"] for c in body["input"]["channels"]] == [
        c["label"] for c in demo_body["channels"]
    ]
    # The simulator's mean rate (service.demo) within 3 bpm (common practice for
    # seated BCG rate agreement; the engine's own accuracy is tested in features).
    assert abs(body["heart_rate"]["mean_bpm"] - DEMO_HEART_RATE_BPM) < 3.0
    # The simulator's breathing rate within 2 breaths/min (common practice for
    # contactless respiration-rate agreement).
    rate = body["respiration"]["rate_per_min"]
    assert abs(rate - DEMO_SETTINGS.breathing_rate_per_min) < 2.0
    assert body["respiration"]["modulation"]["rsa_ms"] is not None
    assert [w["name"] for w in body["morphology"]["waves"]] == ["H", "I", "J", "K", "L"]
    vector = _vector(body)
    assert vector["heart_rate_mean_bpm"] == body["heart_rate"]["mean_bpm"]
    assert vector["sdnn_ms"] == body["variability"]["time_domain"]["sdnn_ms"]
    # Not asked for: the bulky parts are absent.
    assert not {"beats", "template", "signals", "windows"} & set(body)


def test_families_not_computed_are_null_with_a_reason(client, demo_body):
    body = _post(client, demo_body).get_json()
    for family in ("morphology", "respiration"):
        assert family in body
        if body[family] is None:
            assert any(w.startswith(f"{family}:") for w in body["warnings"])


def test_include_adds_beats_template_signals_windows(client, demo_body):
    asked = {**demo_body, "options": {"include": ["beats", "template", "signals", "windows"],
                                      "window_s": 60, "window_overlap_s": 30}}
    response = _post(client, asked)
    assert response.status_code == 200
    check_against_contract(response, "/v1/analyses", "post")
    body = response.get_json()
    beats = body["beats"]
    assert len(beats["times_s"]) == len(beats["confidence"])
    assert len(beats["intervals_ms"]) == len(beats["labels"]) == len(beats["interval_times_s"])
    assert set(beats["labels"]) <= set(LABELS)
    # Intervals are differences of successive beat times within a run (in ms).
    times = np.asarray(beats["times_s"])
    assert np.all(np.diff(times) > 0)
    assert min(beats["intervals_ms"]) >= 1000 * np.diff(times).min() - 1e-6
    assert body["template"]["fs_hz"] > 0 and body["template"]["samples"]
    assert len(body["signals"]["psd_frequencies_hz"]) == len(body["signals"]["psd_ms2_per_hz"])
    # The demo lasts 120 s: 60-s windows every 30 s start at 0, 30 and 60 s.
    windows = body["windows"]
    assert [w["start_s"] for w in windows["windows"]] == [0.0, 30.0, 60.0]
    assert windows["window_s"] == 60.0 and windows["step_s"] == 30.0
    names = [f["name"] for f in body["feature_vector"]["features"]]
    for w in windows["windows"]:
        assert w["error"] is None and 0.0 <= w["confidence"] <= 1.0
        assert [f["name"] for f in w["feature_vector"]["features"]] == names
        hr = {f["name"]: f["value"] for f in w["feature_vector"]["features"]}
        # Each window's heart rate is that of the same trace: within 5 bpm of the whole
        # (our bound: the simulated rate is steady, a window's mean differs by its RSA
        # swing and detection noise; common practice, not a published figure).
        assert abs(hr["heart_rate_mean_bpm"] - body["heart_rate"]["mean_bpm"]) < 5.0


def test_windows_need_a_window_length(client, demo_body):
    asked = {**demo_body, "options": {"include": ["windows"]}}
    response = _post(client, asked)
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    fields = {e["field"] for e in response.get_json()["errors"]}
    assert "options.window_s" in fields


def test_window_overlap_must_be_below_the_window(client, demo_body):
    asked = {**demo_body, "options": {"include": ["windows"], "window_s": 60,
                                      "window_overlap_s": 60}}
    response = _post(client, asked)
    assert response.status_code == 422
    assert "options.window_overlap_s" in {e["field"] for e in response.get_json()["errors"]}


def test_base64_channels_give_the_same_numbers_as_lists(client, demo_body):
    encoded = json.loads(json.dumps(demo_body))
    for channel in encoded["channels"]:
        raw = np.asarray(channel.pop("samples"), dtype="<f8").tobytes()
        channel["samples_base64"] = base64.b64encode(raw).decode("ascii")
        channel["dtype"] = "float64"
    first = _post(client, demo_body).get_json()
    second = _post(client, encoded).get_json()
    assert first["feature_vector"] == second["feature_vector"]
    assert first["heart_rate"] == second["heart_rate"]


def test_counts_with_a_scale_give_the_same_numbers_as_newtons(client, demo_body):
    per_count = 0.001  # 1 mN per count: the demo's 3 decimals are whole counts
    scaled = json.loads(json.dumps(demo_body))
    for channel in scaled["channels"]:
        counts = np.round(np.asarray(channel.pop("samples")) / per_count).astype("<i4")
        channel["samples_base64"] = base64.b64encode(counts.tobytes()).decode("ascii")
        channel["dtype"] = "int32"
        channel["unit"] = "counts"
        channel["counts_scale"] = {"unit": "N", "per_count": per_count}
    first = _post(client, demo_body).get_json()
    second = _post(client, scaled).get_json()
    second_vector = _vector(second)
    for name, value in _vector(first).items():
        other = second_vector[name]
        assert (value is None) == (other is None), name
        if value is not None:
            assert math.isclose(value, other, rel_tol=1e-6, abs_tol=1e-9), name


def _csv(body) -> bytes:
    labels = [c["label"] for c in body["channels"]]
    columns = np.column_stack([c["samples"] for c in body["channels"]])
    text = io.StringIO()
    text.write("time_s," + ",".join(labels) + "\n")
    fs = body["sampling_rate_hz"]
    for i, row in enumerate(columns):
        text.write(f"{i / fs:.4f}," + ",".join(f"{v:.3f}" for v in row) + "\n")
    return text.getvalue().encode("utf-8")


def test_csv_upload_gives_the_same_numbers_as_json(client, demo_body):
    plain = {k: v for k, v in demo_body.items() if k in ("sampling_rate_hz", "channels")}
    plain["channels"] = [{k: c[k] for k in ("label", "quantity", "unit", "samples")}
                         for c in plain["channels"]]
    response = client.post(
        "/v1/analyses",
        **multipart(
            {"sampling_rate_hz": str(demo_body["sampling_rate_hz"]), "include": "beats"},
            _csv(demo_body),
        ),
    )
    assert response.status_code == 200, response.get_data(as_text=True)
    check_against_contract(response, "/v1/analyses", "post")
    from_csv = response.get_json()
    from_json = _post(client, {**plain, "options": {"include": ["beats"]}}).get_json()
    assert from_csv["feature_vector"] == from_json["feature_vector"]
    assert from_csv["beats"]["times_s"] == from_json["beats"]["times_s"]


def test_non_finite_result_values_become_null_with_a_warning(monkeypatch, client, demo_body):
    import dataclasses

    import features.engine as engine

    real = engine.heart_rate

    # A NaN from inside the engine (the heart-rate stage), so that the feature vector the
    # engine reads from its own result meets it too.
    def with_nan(*args, **kwargs):
        return dataclasses.replace(real(*args, **kwargs), mean_bpm=float("nan"))

    monkeypatch.setattr(engine, "heart_rate", with_nan)
    response = _post(client, demo_body)
    assert response.status_code == 200
    text = response.get_data(as_text=True)
    assert "NaN" not in text and "Infinity" not in text
    body = json.loads(text)
    assert body["heart_rate"]["mean_bpm"] is None
    assert _vector(body)["heart_rate_mean_bpm"] is None
    assert any("heart_rate.mean_bpm" in w for w in body["warnings"])
    check_against_contract(response, "/v1/analyses", "post")


def test_engine_rule_reaches_the_client_as_422(client):
    # 10 s at 100 Hz: shorter than the engine's minimum record (features.conditioning).
    body = {"sampling_rate_hz": 100.0,
            "channels": [{"label": "seat", "quantity": "force", "unit": "N",
                          "samples": (700 + np.sin(np.arange(1000) / 10)).tolist()}]}
    response = _post(client, body)
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    problem = response.get_json()
    assert problem["type"] == "tag:heartsway.dev,2026:problem/validation-error"
    assert problem["errors"][0]["field"].startswith("channels")
    check_against_contract(response, "/v1/analyses", "post")


def test_uploads_stay_in_memory(monkeypatch, client, demo_body):
    # Werkzeug spools multipart files over 500 kB to a temporary file by default
    # (werkzeug.formparser.default_stream_factory); health data must not touch the disk.
    import werkzeug.formparser

    def no_disk(*args, **kwargs):
        raise AssertionError("an upload was spooled to disk")

    monkeypatch.setattr(werkzeug.formparser, "SpooledTemporaryFile", no_disk)
    payload = _csv(demo_body)
    assert len(payload) > 500_000
    response = client.post(
        "/v1/analyses",
        **multipart({"sampling_rate_hz": str(demo_body["sampling_rate_hz"])}, payload),
    )
    assert response.status_code == 200, response.get_data(as_text=True)


# --------------------------------------------------------------------------- lost samples


def _gaps(body):
    return [s for s in body["quality"]["segments"] if s["kind"] == "gap"]


def test_one_null_sample_is_a_gap_not_a_422(client, demo_body):
    body = json.loads(json.dumps(demo_body))
    fs = body["sampling_rate_hz"]
    for channel in body["channels"]:
        channel["samples"][int(30 * fs)] = None  # JSON null: a sample the device lost
    response = _post(client, body)
    assert response.status_code == 200, response.get_data(as_text=True)
    check_against_contract(response, "/v1/analyses", "post")
    result = response.get_json()
    (gap,) = _gaps(result)
    # The lost sample at 30 s, masked 1 s either side (features.gaps.GAP_PAD_S), on the
    # sample grid.
    assert gap["start_s"] == pytest.approx(29.0, abs=1 / fs)
    assert gap["end_s"] == pytest.approx(31.0, abs=2 / fs)
    # The simulator's mean rate (service.demo) within 3 bpm, as for the complete trace.
    assert abs(result["heart_rate"]["mean_bpm"] - DEMO_HEART_RATE_BPM) < 3.0


def test_csv_empty_cell_is_a_gap_and_time_s_gives_the_rate(client, demo_body):
    lines = _csv(demo_body).decode("utf-8").split("\n")
    cells = lines[1001].split(",")
    cells[1] = ""  # row 1000 of the first channel lost
    lines[1001] = ",".join(cells)
    response = client.post("/v1/analyses", **multipart({}, "\n".join(lines).encode()))
    assert response.status_code == 200, response.get_data(as_text=True)
    check_against_contract(response, "/v1/analyses", "post")
    result = response.get_json()
    fs = demo_body["sampling_rate_hz"]
    # No rate sent: the time_s column's span gives it (printed to 0.1 ms over the trace).
    assert result["input"]["sampling_rate_hz"] == pytest.approx(fs, rel=1e-6)
    (gap,) = _gaps(result)
    assert gap["start_s"] <= 1000 / fs <= gap["end_s"]


def test_csv_irregular_time_column_is_a_422_naming_the_column(client, demo_body):
    lines = _csv(demo_body).decode("utf-8").split("\n")
    fs = demo_body["sampling_rate_hz"]
    cells = lines[501].split(",")
    cells[0] = f"{(499.5) / fs:.4f}"  # half a step early: neither one step nor whole steps
    lines[501] = ",".join(cells)
    response = client.post("/v1/analyses", **multipart({}, "\n".join(lines).encode()))
    assert response.status_code == 422
    check_against_contract(response, "/v1/analyses", "post")
    (error,) = response.get_json()["errors"]
    assert error["field"] == "file"
    assert "`time_s` must advance by one sample step" in error["detail"]


def test_a_trace_of_nulls_is_a_422_naming_the_channel(client):
    samples = [None] * 3000 + [700.0] * 500  # 5 s of samples at 100 Hz, the rest lost
    body = {"sampling_rate_hz": 100.0,
            "channels": [{"label": "seat", "quantity": "force", "unit": "N",
                          "samples": samples}]}
    response = _post(client, body)
    assert response.status_code == 422
    check_against_contract(response, "/v1/analyses", "post")
    (error,) = response.get_json()["errors"]
    assert error["field"] == "channels[0].samples"
    assert "at least 20 s of samples besides its gaps" in error["detail"]
