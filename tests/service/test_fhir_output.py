"""FHIR output: Accept: application/fhir+json answers an R4 Bundle of Observations that
validates with two FHIR model libraries, with LOINC and UCUM where they apply."""

from __future__ import annotations

import copy
import json

import pytest
from fhir.resources.R4B.bundle import Bundle as BundleR4B
from fhirclient.models.bundle import Bundle as BundleR4
from fhirclient.models.fhirabstractbase import FHIRValidationError
from pydantic import ValidationError
from service_contract import check_against_contract

from features.feature_vector import FEATURE_NAMES
from schemas.fhir import FEATURE_SYSTEM, LOINC_SYSTEM, UCUM_SYSTEM
from service.demo import demo_request_body

FHIR = "application/fhir+json"
# Observation.status value set, FHIR R4 (hl7.org/fhir/R4/valueset-observation-status.html).
OBSERVATION_STATUS = {"registered", "preliminary", "final", "amended", "corrected",
                      "cancelled", "entered-in-error", "unknown"}


@pytest.fixture(scope="module")
def bundle_response():
    from service import create_app

    body = demo_request_body()
    body["recording"] = {"placement": "seat", "start_time": "2026-03-01T19:30:00+01:00"}
    client = create_app({"TESTING": True}).test_client()
    return client.post("/v1/analyses", json=body, headers={"Accept": FHIR})


def _by_feature(bundle):
    out = {}
    for entry in bundle["entry"]:
        ours = [c for c in entry["resource"]["code"]["coding"] if c["system"] == FEATURE_SYSTEM]
        out[ours[0]["code"]] = entry["resource"]
    return out


def test_answer_is_a_collection_bundle_in_the_fhir_media_type(bundle_response):
    assert bundle_response.status_code == 200
    assert bundle_response.mimetype == FHIR
    assert "Accept" in bundle_response.headers["Vary"]
    bundle = bundle_response.get_json()
    assert bundle["resourceType"] == "Bundle" and bundle["type"] == "collection"
    # One Observation per feature of the vector, in catalogue order.
    assert list(_by_feature(bundle)) == list(FEATURE_NAMES)
    check_against_contract(bundle_response, "/v1/analyses", "post")


def test_bundle_validates_against_r4_and_r4b_models(bundle_response):
    bundle = bundle_response.get_json()
    # fhirclient's models are generated from FHIR 4.0.1 (R4), the release we claim; strict
    # mode refuses unknown members, wrong types and missing required ones.
    parsed = BundleR4(copy.deepcopy(bundle), strict=True)
    assert parsed.type == "collection" and len(parsed.entry) == len(FEATURE_NAMES)
    # fhir.resources 8 ships R5 by default and R4B (4.3.0) as a subpackage; Observation and
    # Bundle did not change between R4 and R4B, and its pydantic models also check the
    # primitive formats (id, uri, dateTime, instant).
    BundleR4B.model_validate(copy.deepcopy(bundle))
    for entry in bundle["entry"]:
        assert entry["resource"]["status"] in OBSERVATION_STATUS
        assert entry["fullUrl"] == "urn:uuid:" + entry["resource"]["id"]


def test_the_libraries_refuse_a_broken_bundle(bundle_response):
    broken = copy.deepcopy(bundle_response.get_json())
    broken["entry"][0]["resource"]["valueDecimal"] = 1.0  # not a member of Observation
    with pytest.raises(FHIRValidationError):
        BundleR4(copy.deepcopy(broken), strict=True)
    with pytest.raises(ValidationError):
        BundleR4B.model_validate(broken)


def test_standard_codes_and_units(bundle_response):
    bundle = bundle_response.get_json()
    observations = _by_feature(bundle)
    hr = observations["heart_rate_mean_bpm"]
    # LOINC 8867-4 Heart rate and 9279-1 Respiratory rate, in /min: FHIR R4 vital signs
    # profile (hl7.org/fhir/R4/observation-vitalsigns.html).
    assert hr["code"]["coding"][0] == {"system": LOINC_SYSTEM, "code": "8867-4",
                                       "display": "Heart rate"}
    assert hr["valueQuantity"]["system"] == UCUM_SYSTEM
    assert hr["valueQuantity"]["code"] == "/min"
    assert hr["category"][0]["coding"][0]["code"] == "vital-signs"
    rr = observations["breathing_rate_per_min"]
    assert rr["code"]["coding"][0]["code"] == "9279-1"
    assert rr["valueQuantity"]["code"] == "/min"
    # LOINC 80404-7 is "R-R interval.standard deviation (Heart rate variability)"
    # (loinc.org/80404-7), the SDNN of ECG R-R intervals; ours is of J-J intervals, so
    # only our own concept, and the method says J-J.
    sdnn = observations["sdnn_ms"]
    assert [c["system"] for c in sdnn["code"]["coding"]] == [FEATURE_SYSTEM]
    assert "80404-7" not in json.dumps(sdnn)
    assert "J-J intervals" in sdnn["method"]["text"]
    assert "not R-R intervals" in sdnn["method"]["text"]
    assert sdnn["valueQuantity"]["code"] == "ms"
    # No LOINC code is claimed for RMSSD: only our own concept.
    assert [c["system"] for c in observations["rmssd_ms"]["code"]["coding"]] == [FEATURE_SYSTEM]
    # UCUM writes ms squared as ms2 and a dimensionless value as 1 (UCUM specification, 4.2).
    assert observations["lf_power_ms2"].get("valueQuantity", {"code": "ms2"})["code"] == "ms2"
    assert observations["usable_fraction"]["valueQuantity"]["code"] == "1"


def test_values_confidence_caution_and_time_match_the_json_answer(client, bundle_response):
    body = demo_request_body()
    document = client.post("/v1/analyses", json=body).get_json()
    observations = _by_feature(bundle_response.get_json())
    for feature in document["feature_vector"]["features"]:
        observation = observations[feature["name"]]
        confidence = observation["component"][0]
        assert confidence["code"]["coding"][0]["code"] == "confidence"
        # The same float through two JSON encodings: approx's default (rel 1e-6) only
        # absorbs formatting, it cannot hide a different value.
        assert confidence["valueQuantity"]["value"] == pytest.approx(feature["confidence"])
        if feature["value"] is None:
            assert "valueQuantity" not in observation
            assert observation["dataAbsentReason"]["text"] == feature["reason"]
        else:
            assert observation["valueQuantity"]["value"] == pytest.approx(feature["value"])
        assert observation["note"][0]["text"] == document["notice"]
        assert observation["effectiveDateTime"] == "2026-03-01T19:30:00+01:00"


def test_without_the_fhir_accept_the_answer_stays_json(client):
    preferring_json = "application/json, application/fhir+json;q=0.5"
    for accept in (None, "*/*", "application/json", preferring_json):
        headers = {} if accept is None else {"Accept": accept}
        response = client.post("/v1/analyses", json=demo_request_body(), headers=headers)
        assert response.mimetype == "application/json", accept
