"""Response schemas on a real engine result of the demo scenario's trace.

The families are also replaced one at a time (absent, non-finite) to check
that the document stays valid JSON that the contract accepts.
"""

from __future__ import annotations

import dataclasses
import json
import types
from pathlib import Path

import pytest
import yaml
from jsonschema import Draft202012Validator

import features
from features.conditioning import ChannelInput
from schemas.catalogue import FeatureValueSchema, dump_feature_values
from schemas.responses import NOTICE, AnalysisReport, AnalysisResponseSchema, dump_report
from service.demo import DEMO_SETTINGS
from simulation import simulate

ROOT = Path(__file__).resolve().parents[2]



def contract():
    return yaml.safe_load((ROOT / "openapi.yaml").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def full_result():
    recording = simulate(DEMO_SETTINGS)
    channels = [ChannelInput(trace, label, "force", "N")
                for trace, label in zip(recording.channels, recording.labels, strict=True)]
    return features.analyze(channels, recording.fs_hz)


def _with(result, **changes):
    values = {f.name: getattr(result, f.name) for f in dataclasses.fields(result)}
    values.update(changes)
    return types.SimpleNamespace(**values)


def _validate(document):
    validator = Draft202012Validator(
        {"components": contract()["components"], "$ref": "#/components/schemas/Analysis"}
    )
    errors = list(validator.iter_errors(document))
    assert not errors, [f"{list(e.absolute_path)}: {e.message}" for e in errors[:5]]


def test_full_result_dumps_to_a_document_the_contract_accepts(full_result):
    include = frozenset({"beats", "template", "signals", "windows"})
    document = AnalysisResponseSchema().dump(AnalysisReport(full_result, include))
    json.dumps(document, allow_nan=False)
    _validate(document)
    assert document["notice"] == NOTICE
    assert document["respiration"]["rate_per_min"] == full_result.respiration.rate_per_min
    assert document["respiration"]["modulation"]["rsa_ms"] == full_result.modulation.rsa_ms
    assert [w["name"] for w in document["morphology"]["waves"]] == [
        w.name for w in full_result.morphology.waves
    ]
    # With morphology, the template is the morphology's ensemble and carries its start.
    assert document["template"]["start_s"] == full_result.morphology.template_start_s
    breathing_signal = full_result.respiration.breathing_signal
    assert len(document["signals"]["breathing_signal"]) == breathing_signal.size
    assert not any(w.startswith(("morphology:", "respiration:")) for w in document["warnings"])


def test_infinity_anywhere_becomes_null_and_is_reported(full_result):
    respiration = dataclasses.replace(full_result.respiration, rise_fall_ratio=float("inf"))
    document = AnalysisResponseSchema().dump(AnalysisReport(_with(full_result,
                                                                  respiration=respiration)))
    json.dumps(document, allow_nan=False)
    assert document["respiration"]["rise_fall_ratio"] is None
    assert any("respiration.rise_fall_ratio" in w for w in document["warnings"])


def test_feature_values_written_out_match_their_schema(full_result):
    # FeatureValueSchema is the contract's FeatureValue; the written-out dump must give
    # the same members, types and order, null values and reasons included.
    values = full_result.feature_vector.features
    assert any(v.value is None for v in values) and any(v.value is not None for v in values)
    want = FeatureValueSchema(many=True).dump(values)
    got = dump_feature_values(values)
    assert json.dumps(got) == json.dumps(want)


def test_the_cached_schema_dumps_each_report_alone(full_result):
    # One schema instance serves every analysis: what one report asked for must not
    # leak into the next one's document.
    with_beats = dump_report(AnalysisReport(full_result, frozenset({"beats"})))
    plain = dump_report(AnalysisReport(full_result))
    assert "beats" in with_beats and "beats" not in plain
    fresh = AnalysisResponseSchema().dump(AnalysisReport(full_result, frozenset(),
                                                         plain["analysis_id"]))
    assert json.dumps(plain) == json.dumps(fresh)
