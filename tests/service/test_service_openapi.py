"""The contract: generated, committed, valid, and matching the application's routes."""

from __future__ import annotations

import re

from openapi_spec_validator import validate
from service_contract import ROOT, contract

from service import create_app
from service.openapi import main, spec_yaml


def test_committed_contract_is_current():
    committed = (ROOT / "openapi.yaml").read_text(encoding="utf-8")
    assert committed == spec_yaml(), "openapi.yaml is stale: run `python -m service.openapi`"


def test_check_command_reports_a_stale_file(tmp_path):
    stale = tmp_path / "openapi.yaml"
    stale.write_text("openapi: 3.1.0\n", encoding="utf-8")
    assert main([str(stale), "--check"]) == 1
    assert main([str(stale)]) == 0
    assert main([str(stale), "--check"]) == 0


def test_contract_is_valid_openapi_3_1():
    # openapi-spec-validator checks the document against the OpenAPI 3.1 schema.
    validate(contract())
    assert contract()["openapi"] == "3.1.0"


def test_every_route_is_in_the_contract_and_back():
    app = create_app()
    routes = {
        # Flask writes a path parameter <job_id>, OpenAPI {job_id}.
        (re.sub(r"<([a-z_]+)>", r"{\1}", rule.rule), method.lower())
        for rule in app.url_map.iter_rules()
        for method in rule.methods - {"HEAD", "OPTIONS"}
    }
    described = {
        (path, method) for path, item in contract()["paths"].items() for method in item
    }
    assert routes == described


def test_every_error_status_is_described():
    operation = contract()["paths"]["/v1/analyses"]["post"]
    assert {"400", "405", "413", "415", "422", "500"} <= set(operation["responses"])
    assert set(operation["requestBody"]["content"]) == {"application/json", "multipart/form-data"}


def test_a_form_without_file_breaks_the_contract_as_the_service_refuses_it():
    # tests/service/test_service_errors.py: the service answers such a form 422 naming
    # `file`; the contract must not allow it (JSON Schema 2020-12, OpenAPI 3.1's dialect).
    from jsonschema import Draft202012Validator

    document = contract()
    for path in ("/v1/analyses", "/v1/reports"):
        multipart = document["paths"][path]["post"]["requestBody"]["content"]
        schema = {**multipart["multipart/form-data"]["schema"],
                  "components": document["components"]}
        validator = Draft202012Validator(schema)
        for form in ({"sampling_rate_hz": 250.0}, {"sampling_rate_hz": 250.0, "file": []}):
            assert not validator.is_valid(form), (path, form)
        assert validator.is_valid({"sampling_rate_hz": 250.0, "file": "t,x\n"})
        assert validator.is_valid({"file": ["a.hea", "a.dat"]})
