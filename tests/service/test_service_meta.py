"""Liveness, readiness, the contract endpoint and the feature catalogue."""

from __future__ import annotations

import yaml
from service_contract import ROOT, check_against_contract

import features
from features.engine import FEATURE_SET_VERSION


def test_healthz_answers_ok(client):
    response = client.get("/healthz")
    assert response.status_code == 200
    assert response.mimetype == "application/json"
    assert response.get_json() == {"status": "ok", "version": features.__version__}
    check_against_contract(response, "/healthz", "get")


def test_readyz_is_ready_once_the_engine_has_run(client):
    response = client.get("/readyz")
    assert response.status_code == 200
    assert response.mimetype == "application/json"
    assert response.get_json() == {"status": "ready", "version": features.__version__}
    check_against_contract(response, "/readyz", "get")


def test_readyz_is_503_when_the_engine_is_broken(app, monkeypatch):
    def broken(*args, **kwargs):
        raise MemoryError

    monkeypatch.setattr(features, "analyze", broken)
    response = app.test_client().get("/readyz")
    assert response.status_code == 503
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert body["status"] == 503 and body["type"] == "about:blank"
    assert "MemoryError" not in body["detail"]
    check_against_contract(response, "/readyz", "get")


def test_openapi_yaml_is_the_committed_contract(client):
    response = client.get("/openapi.yaml")
    assert response.status_code == 200
    # RFC 9512 registers application/yaml.
    assert response.mimetype == "application/yaml"
    assert response.get_data(as_text=True) == (ROOT / "openapi.yaml").read_text(encoding="utf-8")
    assert yaml.safe_load(response.get_data(as_text=True))["openapi"] == "3.1.0"
    check_against_contract(response, "/openapi.yaml", "get")


def test_feature_catalogue_lists_features_with_units(client):
    response = client.get("/v1/features")
    assert response.status_code == 200
    assert response.mimetype == "application/json"
    body = response.get_json()
    assert set(body) == {"feature_set_version", "features"}
    assert body["feature_set_version"] == FEATURE_SET_VERSION
    names = [entry["name"] for entry in body["features"]]
    assert len(names) == len(set(names))
    # Task Force (1996) measures that the issue requires by name.
    assert {"sdnn_ms", "rmssd_ms", "heart_rate_mean_bpm"} <= set(names)
    for entry in body["features"]:
        assert set(entry) == {"name", "family", "unit", "path", "definition", "valid_range",
                              "reference", "tolerance", "tolerance_unit",
                              "tolerance_relative", "confidence_calibrated"}
        assert entry["definition"]
        # Issue 12: every confidence names the error it speaks of.
        assert entry["tolerance"] > 0 and entry["tolerance_unit"]
    by_name = {e["name"]: e for e in body["features"]}
    # Issue 12's bound for heart rate, 2 /min, and SDNN, 10 % of the true value.
    assert (by_name["heart_rate_mean_bpm"]["tolerance"],
            by_name["heart_rate_mean_bpm"]["tolerance_unit"]) == (2.0, "/min")
    assert by_name["sdnn_ms"]["tolerance_relative"] is True
    assert by_name["sdnn_ms"]["confidence_calibrated"] is True
    check_against_contract(response, "/v1/features", "get")


def test_every_catalogued_feature_is_in_the_vector_of_a_real_analysis(client):
    from service.demo import demo_request_body

    catalogue = client.get("/v1/features").get_json()["features"]
    analysis = client.post("/v1/analyses", json=demo_request_body()).get_json()
    vector = analysis["feature_vector"]["features"]
    # Every catalogue entry, in catalogue order, each with a value or a reason.
    assert [f["name"] for f in vector] == [entry["name"] for entry in catalogue]
    for f in vector:
        assert f["value"] is not None or f["reason"], f["name"]
        assert 0.0 <= f["confidence"] <= 1.0
    values = {f["name"]: f["value"] for f in vector}
    assert values["heart_rate_mean_bpm"] == analysis["heart_rate"]["mean_bpm"]
    assert values["sdnn_ms"] == analysis["variability"]["time_domain"]["sdnn_ms"]
    assert values["rsa_ms"] == analysis["respiration"]["modulation"]["rsa_ms"]


def test_request_id_is_echoed_when_well_formed(client):
    response = client.get("/healthz", headers={"X-Request-ID": "abc-123.x_y"})
    assert response.headers["X-Request-ID"] == "abc-123.x_y"


def test_request_id_is_replaced_when_malformed(client):
    response = client.get("/healthz", headers={"X-Request-ID": "bad id\twith spaces" * 10})
    sent_back = response.headers["X-Request-ID"]
    assert " " not in sent_back and len(sent_back) == 32


def test_page_rate_field_states_the_engines_sampling_rate_limits(client):
    # The page must refuse in the browser exactly what the engine refuses: its rate field's
    # bounds come from features.limits, and no placeholder of the template is left.
    import re

    from features.limits import MAX_FS_HZ, MIN_FS_HZ

    page = client.get("/").get_data(as_text=True)
    assert "{{" not in page
    field = re.search(r'<input id="rate"[^>]*>', page)
    assert field is not None
    assert f'min="{MIN_FS_HZ:g}"' in field.group(0)
    assert f'max="{MAX_FS_HZ:g}"' in field.group(0)
