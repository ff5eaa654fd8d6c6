"""Liveness, readiness, the contract endpoint and the feature catalogue."""

from __future__ import annotations

import yaml
from service_contract import ROOT, check_against_contract, engine_ready

import features


def test_healthz_answers_ok(client):
    response = client.get("/healthz")
    assert response.status_code == 200
    assert response.mimetype == "application/json"
    assert response.get_json() == {"status": "ok", "version": features.__version__}
    check_against_contract(response, "/healthz", "get")


def test_readyz_follows_the_engine(client):
    response = client.get("/readyz")
    if engine_ready():
        assert response.status_code == 200
        assert response.get_json()["status"] == "ready"
    else:
        assert response.status_code == 503
        assert response.mimetype == "application/problem+json"
        assert response.get_json()["status"] == 503
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
    for entry in body["features"]:
        assert set(entry) == {"name", "family", "unit", "definition"}
        assert entry["definition"]
    check_against_contract(response, "/v1/features", "get")


def test_request_id_is_echoed_when_well_formed(client):
    response = client.get("/healthz", headers={"X-Request-ID": "abc-123.x_y"})
    assert response.headers["X-Request-ID"] == "abc-123.x_y"


def test_request_id_is_replaced_when_malformed(client):
    response = client.get("/healthz", headers={"X-Request-ID": "bad id\twith spaces" * 10})
    sent_back = response.headers["X-Request-ID"]
    assert " " not in sent_back and len(sent_back) == 32
