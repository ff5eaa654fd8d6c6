"""The request body parser gives what the standard library's parser gives."""

from __future__ import annotations

import json

import numpy as np
import pytest
from werkzeug.exceptions import BadRequest

from service.bodies import parse_json


def _body(seed: int) -> bytes:
    rng = np.random.default_rng(seed)
    samples = np.round(rng.standard_normal(5000) * 300.0, 3).tolist()
    samples += (rng.standard_normal(500) * 10.0 ** rng.integers(-300, 300, 500)).tolist()
    doc = {"sampling_rate_hz": 250, "channels": [{"label": "seat", "samples": samples}],
           "text": "caf\u00e9 \u2764", "flags": [True, False, None], "big": 2**63 - 1}
    return json.dumps(doc).encode()


def test_documents_equal_the_standard_parser_to_the_bit() -> None:
    for seed in (1, 2):
        body = _body(seed)
        # reference library: json.loads (Python standard library); floats compared by repr
        ref, got = json.loads(body), parse_json(body)
        assert got == ref
        assert [repr(v) for v in got["channels"][0]["samples"]] == \
            [repr(v) for v in ref["channels"][0]["samples"]]


def test_what_the_fast_parser_refuses_goes_to_the_standard_one() -> None:
    # json.loads detects UTF-16 (RFC 8259 section 8.1 allows readers to) and keeps lone
    # surrogate escapes; the answer must not depend on which parser ran
    assert parse_json('{"a": [1, 2.5]}'.encode("utf-16")) == {"a": [1, 2.5]}
    assert parse_json(b'["\\ud800"]') == ["\ud800"]


@pytest.mark.parametrize("text", ["[NaN]", "[1, Infinity]", "[-Infinity]", "{", "[1,]"])
def test_invalid_documents_are_bad_requests(text: str) -> None:
    # RFC 8259 section 6: NaN and Infinity are not JSON numbers; trailing commas are not JSON
    with pytest.raises(BadRequest, match="valid JSON"):
        parse_json(text.encode())


def test_deep_nesting_keeps_the_standard_parsers_answer() -> None:
    # 1000 levels: refused by json.loads (recursion limit) though orjson would accept it
    with pytest.raises(BadRequest, match="nested too deeply"):
        parse_json(b"[" * 1000 + b"]" * 1000)
    assert parse_json(b"[" * 20 + b"]" * 20) == json.loads("[" * 20 + "]" * 20)
