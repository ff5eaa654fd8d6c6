"""Request schemas: numeric decoding, base64, strictness, CSV reading, error paths."""

from __future__ import annotations

import base64

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from marshmallow import ValidationError

from schemas.csv_input import read_csv_channels
from schemas.errors import flatten_errors, pointer_of
from schemas.fields import BASE64_DTYPES, SamplesField, decode_base64_samples
from schemas.requests import AnalysisRequestSchema


def _body(channel: dict, **extra) -> dict:
    base = {"label": "a", "quantity": "force", "unit": "N"}
    return {"sampling_rate_hz": 250.0, "channels": [{**base, **channel}], **extra}


def _fields(error: ValidationError) -> set[str]:
    return {e["field"] for e in flatten_errors(error.messages)}


@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), min_size=1,
                max_size=200))
@settings(max_examples=50, deadline=None)
def test_samples_load_exactly_as_float64(values):
    loaded = SamplesField().deserialize(values)
    assert loaded.dtype == np.float64
    np.testing.assert_array_equal(loaded, np.asarray(values, dtype=np.float64))


@pytest.mark.parametrize(
    ("values", "fragment"),
    [
        ([1.0, "2.0"], "str"),
        ([1.0, True], "bool"),
        ([[1.0], [2.0]], "list"),
        ("1,2,3", "list of numbers"),
        ([], "at least one sample"),
        ([1.0, 1e400], "infinite value at index 1"),  # json.loads("1e400") is inf
        ([10**400], "too large"),
    ],
)
def test_samples_refuse_anything_but_finite_numbers_and_null(values, fragment):
    with pytest.raises(ValidationError, match=fragment):
        SamplesField().deserialize(values)


def test_null_samples_load_as_nan_a_gap():
    loaded = SamplesField().deserialize([1.0, None, 3, None])
    # NaN is numpy's missing value (IEEE 754 quiet NaN); the engine masks it as a gap.
    assert np.isnan(loaded).tolist() == [False, True, False, True]
    assert loaded[[0, 2]].tolist() == [1.0, 3.0]


def test_base64_nan_is_a_lost_sample_and_infinity_is_refused():
    text = base64.b64encode(np.array([1.0, np.nan, 2.0], "<f4").tobytes()).decode()
    assert np.isnan(decode_base64_samples(text, "float32", field="x")).tolist() == [
        False, True, False]
    text = base64.b64encode(np.array([1.0, -np.inf], "<f8").tobytes()).decode()
    with pytest.raises(ValidationError, match=r"`x` must not hold infinity .* at index 1"):
        decode_base64_samples(text, "float64", field="x")


@pytest.mark.parametrize("dtype", sorted(BASE64_DTYPES))
def test_base64_round_trips_every_little_endian_dtype(dtype):
    rng = np.random.default_rng(7)
    values = (rng.normal(size=64) * 1000).astype(BASE64_DTYPES[dtype])
    text = base64.b64encode(values.tobytes()).decode("ascii")
    decoded = decode_base64_samples(text, dtype, field="samples_base64")
    np.testing.assert_array_equal(decoded, values.astype(np.float64))


def test_base64_is_little_endian():
    # 1.0 as IEEE 754 binary32 is 0x3F800000; little-endian bytes 00 00 80 3F.
    text = base64.b64encode(bytes([0x00, 0x00, 0x80, 0x3F])).decode("ascii")
    assert decode_base64_samples(text, "float32", field="x").tolist() == [1.0]


@pytest.mark.parametrize(
    ("text", "dtype", "fragment"),
    [
        ("not base64!", "float32", "does not decode"),
        (base64.b64encode(b"\x00" * 6).decode(), "float32", "multiple of 4 bytes"),
        (base64.b64encode(b"\x00" * 3).decode(), "int16", "multiple of 2 bytes"),
        ("", "float64", "at least one sample"),
        (base64.b64encode(np.array([np.inf], "<f8").tobytes()).decode(), "float64",
         "infinity"),
    ],
)
def test_base64_errors(text, dtype, fragment):
    with pytest.raises(ValidationError, match=fragment):
        decode_base64_samples(text, dtype, field="samples_base64")


def test_exactly_one_encoding_and_dtype_only_with_base64():
    schema = AnalysisRequestSchema()
    with pytest.raises(ValidationError) as both:
        schema.load(_body({"samples": [1.0], "samples_base64": "AAAAAA==", "dtype": "float32"}))
    assert _fields(both.value) == {"channels[0].samples"}
    with pytest.raises(ValidationError) as neither:
        schema.load(_body({}))
    assert _fields(neither.value) == {"channels[0].samples"}
    with pytest.raises(ValidationError) as missing_dtype:
        schema.load(_body({"samples_base64": "AAAAAA=="}))
    assert _fields(missing_dtype.value) == {"channels[0].dtype"}


def test_units_follow_the_engine_and_counts_need_a_scale():
    schema = AnalysisRequestSchema()
    with pytest.raises(ValidationError) as error:
        schema.load({
            "sampling_rate_hz": 250.0,
            "channels": [
                {"label": "a", "quantity": "force", "unit": "m/s^2", "samples": [1.0]},
                {"label": "b", "quantity": "force", "unit": "counts", "samples": [1.0],
                 "coupling": "dc"},
                {"label": "c", "quantity": "acceleration", "unit": "counts", "samples": [1.0],
                 "counts_scale": {"unit": "N", "per_count": 0.1}},
            ],
        })
    assert _fields(error.value) == {
        "channels[0].unit", "channels[1].counts_scale", "channels[2].counts_scale.unit"
    }


def test_counts_of_unknown_scale_load_as_an_ac_channel():
    request = AnalysisRequestSchema().load(_body({"unit": "counts", "samples": [1.0, 2.0]}))
    assert request.channels[0].counts_scale is None
    assert request.channels[0].coupling is None  # the engine resolves it to "ac"
    given = AnalysisRequestSchema().load(_body({"coupling": "ac", "samples": [1.0]}))
    assert given.channels[0].coupling == "ac"


@pytest.mark.parametrize(("channel", "field", "fragment"), [
    ({"coupling": "AC"}, "channels[0].coupling", "Must be one of: ac, dc."),
    ({"quantity": "acceleration", "unit": "g", "coupling": "dc"}, "channels[0].coupling",
     "`coupling` may be 'dc' only for a force channel"),
    ({"unit": "counts", "coupling": "dc"}, "channels[0].counts_scale",
     "without a calibrated scale the channel cannot measure weight"),
])
def test_coupling_rules_name_the_field(channel, field, fragment):
    with pytest.raises(ValidationError) as error:
        AnalysisRequestSchema().load(_body({"samples": [1.0], **channel}))
    by_field = {e["field"]: e["detail"] for e in flatten_errors(error.value.messages)}
    assert set(by_field) == {field}
    assert fragment in by_field[field]


def test_a_valid_request_loads_into_typed_objects():
    request = AnalysisRequestSchema().load(_body(
        {"samples": [1.0, 2.0], "position_m": [0.25, -0.25]},
        subject={"body_mass_kg": 70.0},
        recording={"placement": "seat", "start_time": "2026-11-30T19:42:00+01:00"},
        options={"mains_hz": 50, "include": ["beats"], "rate_range_bpm": [40, 150]},
    ))
    assert request.channels[0].position_m == (0.25, -0.25)
    assert request.recording.start_time.utcoffset().total_seconds() == 3600
    assert request.options.include == frozenset({"beats"})
    assert request.options.mains_hz == 50
    assert request.options.rate_range_bpm == (40, 150)


def test_naive_start_time_and_reversed_rate_range_are_refused():
    with pytest.raises(ValidationError) as error:
        AnalysisRequestSchema().load(_body(
            {"samples": [1.0]}, recording={"start_time": "2026-11-30T19:42:00"}
        ))
    assert _fields(error.value) == {"recording.start_time"}
    with pytest.raises(ValidationError) as error:
        AnalysisRequestSchema().load(_body(
            {"samples": [1.0]}, options={"rate_range_bpm": [150, 40]}
        ))
    assert _fields(error.value) == {"options.rate_range_bpm"}


def test_pointer_escapes_per_rfc_6901():
    # RFC 6901 section 3: "~" is written "~0" and "/" is written "~1".
    assert pointer_of("a/b.c~d") == "#/a~1b/c~0d"
    assert pointer_of("channels[2].samples") == "#/channels/2/samples"
    assert pointer_of("body") == "#"


def test_csv_reader_drops_the_time_column_and_keeps_order():
    labels, data = read_csv_channels("time_s,left,right\n0,1.5,2\n0.004,3,4.25\n")
    assert labels == ["left", "right"]
    np.testing.assert_array_equal(data, [[1.5, 2.0], [3.0, 4.25]])


def test_csv_reader_accepts_a_byte_order_mark():
    labels, _ = read_csv_channels("\ufeffa\n1\n")
    assert labels == ["a"]


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("", "header row"),
        ("a,,b\n1,2,3\n", "header row"),
        ("a,b\n", "at least one data row"),
        ("a,b\n1,2\n3,x\n", "line 3, column 2"),
        ("a,b\n1,2,3\n", "as many columns"),
        ("time_s\n0\n", "1 to 8 channel columns"),
        (",".join(f"c{i}" for i in range(9)) + "\n" + ",".join("1" * 9) + "\n", "1 to 8"),
    ],
)
def test_csv_reader_errors(text, fragment):
    with pytest.raises(ValidationError, match=fragment):
        read_csv_channels(text)


def test_signalling_nan_widens_quietly_to_a_lost_sample():
    # IEEE 754 binary32 signalling NaN 0x7F800001 (exponent all ones, quiet bit clear):
    # widening it to float64 makes numpy warn; it must load as NaN (a gap) without one.
    text = base64.b64encode(bytes([0x01, 0x00, 0x80, 0x7F])).decode()
    assert np.isnan(decode_base64_samples(text, "float32", field="x")).all()


@pytest.mark.parametrize("values", [[True, 0.5], [0.5, 2.0, False], [0, 1, True]])
def test_booleans_are_refused_among_zeros_and_ones(values):
    # A boolean packs to 1.0 or 0.0 as a number would; its type must still be refused.
    with pytest.raises(ValidationError, match="bool"):
        SamplesField().deserialize(values)


def test_the_numbers_zero_and_one_load():
    loaded = SamplesField().deserialize([0, 1, 0.0, 1.0, 2.5])
    np.testing.assert_array_equal(loaded, [0.0, 1.0, 0.0, 1.0, 2.5])


_ELEMENTS = st.one_of(
    st.floats(allow_nan=False, allow_infinity=False, width=64),
    st.integers(min_value=-(2**53), max_value=2**53),
    st.sampled_from([0, 1, 0.0, 1.0, -0.0]),  # the values a boolean packs to
    st.none(),
    st.booleans(),
    st.just("1.5"),
)


@given(st.lists(_ELEMENTS, min_size=1, max_size=60))
@settings(max_examples=200, deadline=None)
def test_samples_accept_exactly_numbers_and_null(values):
    # The contract's rule (openapi.yaml, Channel.samples items: number or null): booleans
    # and strings are refused; numbers load as numpy converts them, null as NaN.
    odd = [v for v in values if isinstance(v, bool | str)]
    if odd:
        with pytest.raises(ValidationError, match="must hold only numbers"):
            SamplesField().deserialize(values)
        return
    loaded = SamplesField().deserialize(values)
    want = np.array([np.nan if v is None else v for v in values], dtype=np.float64)
    np.testing.assert_array_equal(loaded, want)  # NaN compares equal here
