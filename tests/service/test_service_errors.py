"""Every error of the service: status, media type, RFC 9457 members, contract."""

from __future__ import annotations

import json

import pytest
from service_contract import check_against_contract, multipart

from service import create_app

PROBLEM = "application/problem+json"
# RFC 9457 section 3.1: the standard members of a problem details object.
STANDARD_MEMBERS = {"type", "title", "status", "detail"}


def _valid_channel(n: int = 3000, label: str = "seat") -> dict:
    return {"label": label, "quantity": "force", "unit": "N", "samples": [700.0] * n}


def _body(**changes) -> dict:
    body = {"sampling_rate_hz": 100.0, "channels": [_valid_channel()]}
    body.update(changes)
    return body


def _assert_problem(response, status: int, type_: str = "about:blank") -> dict:
    assert response.status_code == status
    assert response.mimetype == PROBLEM
    body = response.get_json(force=True)
    assert STANDARD_MEMBERS <= set(body)
    assert body["status"] == status
    assert body["type"] == type_
    assert body["request_id"] == response.headers["X-Request-ID"]
    assert "Traceback" not in response.get_data(as_text=True)
    return body


def test_unknown_path_is_404(client):
    response = client.get("/v1/nothing-here")
    body = _assert_problem(response, 404)
    # RFC 9457 section 4.2.1: with about:blank the title is the status phrase.
    assert body["title"] == "Not Found"
    check_against_contract(response, None, "get")


@pytest.mark.parametrize(
    ("method", "path", "allowed"),
    [
        ("post", "/healthz", "GET, HEAD, OPTIONS"),
        ("delete", "/readyz", "GET, HEAD, OPTIONS"),
        ("put", "/v1/features", "GET, HEAD, OPTIONS"),
        ("get", "/v1/analyses", "OPTIONS, POST"),
    ],
)
def test_wrong_method_is_405_with_allow(client, method, path, allowed):
    response = getattr(client, method)(path)
    body = _assert_problem(response, 405)
    # RFC 9110 section 15.5.6: a 405 response must carry Allow.
    assert response.headers["Allow"] == allowed
    assert method.upper() in body["detail"]
    check_against_contract(response, path, "post" if path == "/v1/analyses" else "get")


def test_malformed_json_is_400(client):
    response = client.post(
        "/v1/analyses", data='{"sampling_rate_hz": 250,', content_type="application/json"
    )
    body = _assert_problem(response, 400)
    assert "valid JSON" in body["detail"]
    assert "line 1" in body["detail"]
    check_against_contract(response, "/v1/analyses", "post")


@pytest.mark.parametrize("constant", ["NaN", "Infinity", "-Infinity"])
def test_non_json_constants_are_400(client, constant):
    # RFC 8259 section 6: NaN and Infinity are not permitted as JSON numbers.
    text = '{"sampling_rate_hz": 250, "channels": [{"label": "a", "quantity": "force", ' \
        f'"unit": "N", "samples": [1.0, {constant}]}}]}}'
    response = client.post("/v1/analyses", data=text, content_type="application/json")
    body = _assert_problem(response, 400)
    assert constant.lstrip("-") in body["detail"]


def test_bytes_that_are_not_utf8_are_400(client):
    response = client.post("/v1/analyses", data=b'{"a": "\xff"}', content_type="application/json")
    body = _assert_problem(response, 400)
    assert "UTF-8" in body["detail"]


def test_deeply_nested_json_is_400(client):
    response = client.post(
        "/v1/analyses", data="[" * 100_000 + "]" * 100_000, content_type="application/json"
    )
    body = _assert_problem(response, 400)
    assert "nested" in body["detail"]


def test_body_over_the_limit_is_413():
    app = create_app({"MAX_CONTENT_LENGTH": 10_000})
    response = app.test_client().post(
        "/v1/analyses", data=json.dumps(_body()), content_type="application/json"
    )
    body = _assert_problem(response, 413)
    # RFC 9110 section 15.5.14 names 413 "Content Too Large".
    assert body["title"] == "Content Too Large"
    assert "10000 bytes" in body["detail"]
    check_against_contract(response, "/v1/analyses", "post")


@pytest.mark.parametrize("media_type", ["text/plain", "application/xml", None])
def test_wrong_media_type_is_415(client, media_type):
    kwargs = {"data": json.dumps(_body())}
    if media_type:
        kwargs["content_type"] = media_type
    response = client.post("/v1/analyses", **kwargs)
    body = _assert_problem(response, 415)
    assert "application/json" in body["detail"]
    check_against_contract(response, "/v1/analyses", "post")


def test_schema_violations_are_422_naming_every_field(client):
    body = _body(
        sampling_rate_hz="250",
        channels=[
            {"label": "", "quantity": "pressure", "unit": "N", "samples": [1.0, "2"]},
            {"label": "b", "quantity": "force", "unit": "psi", "samples": [1.0]},
        ],
        subject={"body_mass_kg": -3},
        recording={"placement": "sofa"},
        options={"include": ["beats", "everything"]},
        colour="blue",
    )
    response = client.post("/v1/analyses", json=body)
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    fields = {error["field"] for error in problem["errors"]}
    assert fields == {
        "sampling_rate_hz",
        "channels[0].label",
        "channels[0].quantity",
        "channels[0].samples",
        "channels[1].unit",
        "subject.body_mass_kg",
        "recording.placement",
        "options.include[1]",
        "colour",
    }
    pointers = {error["pointer"] for error in problem["errors"]}
    # RFC 6901 JSON Pointer as a URI fragment, as in RFC 9457 section 3's example.
    assert "#/channels/0/samples" in pointers
    assert all(error["detail"] for error in problem["errors"])
    check_against_contract(response, "/v1/analyses", "post")


def test_dc_coupling_on_an_accelerometer_is_422(client):
    channel = {**_valid_channel(), "quantity": "acceleration", "unit": "g", "coupling": "dc"}
    response = client.post("/v1/analyses", json=_body(channels=[channel]))
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    by_field = {error["field"]: error["detail"] for error in problem["errors"]}
    assert set(by_field) == {"channels[0].coupling"}
    assert by_field["channels[0].coupling"].startswith(
        "`coupling` may be 'dc' only for a force channel")
    check_against_contract(response, "/v1/analyses", "post")


def test_unequal_lengths_and_duplicate_labels_are_422(client):
    body = _body(channels=[_valid_channel(3000, "a"), _valid_channel(2999, "a")])
    response = client.post("/v1/analyses", json=body)
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    by_field = {error["field"]: error["detail"] for error in problem["errors"]}
    assert set(by_field) == {"channels[1].samples", "channels[1].label"}
    assert "3000" in by_field["channels[1].samples"] and "2999" in by_field["channels[1].samples"]


def test_too_many_samples_is_422():
    app = create_app({"HEARTSWAY_MAX_SAMPLES": 5000})
    body = _body(channels=[_valid_channel(3000, "a"), _valid_channel(3000, "b")])
    response = app.test_client().post("/v1/analyses", json=body)
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    assert problem["errors"][0]["field"] == "channels"
    assert "5000" in problem["errors"][0]["detail"] and "6000" in problem["errors"][0]["detail"]


def test_body_that_is_not_an_object_is_422(client):
    response = client.post("/v1/analyses", json=[1, 2, 3])
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    assert problem["errors"][0]["field"] == "body"


def test_base64_of_the_wrong_length_is_422(client):
    channel = {"label": "a", "quantity": "force", "unit": "N",
               "samples_base64": "AAAAAAA=", "dtype": "float32"}  # 5 bytes
    response = client.post("/v1/analyses", json=_body(channels=[channel]))
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    assert problem["errors"] == [{
        "field": "channels[0].samples_base64",
        "pointer": "#/channels/0/samples_base64",
        "detail": "`samples_base64` must decode to a multiple of 4 bytes for dtype float32; "
                  "got 5 bytes.",
    }]


def test_multipart_without_file_is_422(client):
    response = client.post("/v1/analyses", **multipart({"sampling_rate_hz": "250"}))
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    assert [e["field"] for e in problem["errors"]] == ["file"]


def test_multipart_csv_errors_name_file_and_form_fields(client):
    response = client.post(
        "/v1/analyses",
        **multipart({"sampling_rate_hz": "fast", "colour": "blue"}, b"a,b\n1,2\n3,x\n"),
    )
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    by_field = {e["field"]: e["detail"] for e in problem["errors"]}
    assert set(by_field) == {"file", "sampling_rate_hz", "colour"}
    assert "line 3" in by_field["file"]
    check_against_contract(response, "/v1/analyses", "post")


def test_unexpected_error_is_500_without_a_trace(app, monkeypatch):
    import service.blueprints.analyses as analyses

    def explode(request):
        raise RuntimeError("secret internal detail")

    monkeypatch.setattr(analyses, "run_analysis", explode)
    response = app.test_client().post("/v1/analyses", json=_body())
    body = _assert_problem(response, 500)
    text = response.get_data(as_text=True)
    assert "secret internal detail" not in text and "RuntimeError" not in text
    assert body["title"] == "Internal Server Error"
    check_against_contract(response, "/v1/analyses", "post")


def test_engine_input_error_is_422_naming_the_field(app, monkeypatch):
    import service.blueprints.analyses as analyses
    from features.errors import InvalidInputError

    def reject(request):
        raise InvalidInputError(
            "channels[0].samples", "`channels[0].samples` must span 20 s; got 3."
        )

    monkeypatch.setattr(analyses, "run_analysis", reject)
    response = app.test_client().post("/v1/analyses", json=_body())
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/validation-error")
    assert problem["errors"] == [{
        "field": "channels[0].samples",
        "pointer": "#/channels/0/samples",
        "detail": "`channels[0].samples` must span 20 s; got 3.",
    }]
    check_against_contract(response, "/v1/analyses", "post")


def test_unusable_signal_is_422_with_its_own_type(app):
    # 700 N that never changes: a loaded sensor that is stuck or disconnected (a living
    # occupant always moves it a little, if only by breathing; common practice). The
    # engine raises it, so the error takes the whole road: run_analysis, the deadline
    # wrapper, the problem table's row.
    response = app.test_client().post("/v1/analyses", json=_body())
    problem = _assert_problem(response, 422, "tag:heartsway.dev,2026:problem/unusable-signal")
    assert problem["reason"] == "flat_signal"
    assert "constant or toggles between two values" in problem["detail"]
    assert problem["title"] == "The trace holds no usable signal"
    check_against_contract(response, "/v1/analyses", "post")
