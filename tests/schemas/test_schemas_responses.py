"""Response schemas on real engine results, including families the engine will attach.

The morphology, respiration and modulation results come from the engine's own
functions on the demo scenario's trace; they are attached beside the result of
``features.analyze`` as the engine's entry point will attach them, so the
response shape is checked before that wiring lands.
"""

from __future__ import annotations

import dataclasses
import json
import types
from pathlib import Path

import numpy as np
import pytest
import yaml
from jsonschema import Draft202012Validator

import features
from features.conditioning import ChannelInput
from features.modulation import respiratory_modulation
from features.morphology import beat_morphology
from features.respiration import breathing
from features.simulation import simulate
from schemas.responses import NOTICE, AnalysisReport, AnalysisResponseSchema
from service.demo import DEMO_SETTINGS

ROOT = Path(__file__).resolve().parents[2]



def contract():
    return yaml.safe_load((ROOT / "openapi.yaml").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def full_result():
    recording = simulate(DEMO_SETTINGS)
    channels = [ChannelInput(trace, label, "force", "N")
                for trace, label in zip(recording.channels, recording.labels, strict=True)]
    result = features.analyze(channels, recording.fs_hz)
    total = np.sum(recording.channels, axis=0)
    morphology = beat_morphology(total - total.mean(), recording.fs_hz, result.beats.times_s,
                                 body_mass_kg=DEMO_SETTINGS.body_mass_kg)
    respiration = breathing(total, recording.fs_hz)
    modulation = respiratory_modulation(
        respiration.breathing_signal, respiration.breathing_fs_hz,
        beat_times_s=result.beats.times_s, breath_times_s=respiration.breath_times_s,
    )
    values = {f.name: getattr(result, f.name) for f in dataclasses.fields(result)}
    return types.SimpleNamespace(**values, morphology=morphology, respiration=respiration,
                                 modulation=modulation)


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


def test_missing_families_are_null_and_named(full_result):
    values = dict(vars(full_result))
    values.update(morphology=None, respiration=None, modulation=None)
    document = AnalysisResponseSchema().dump(AnalysisReport(types.SimpleNamespace(**values)))
    _validate(document)
    assert document["morphology"] is None and document["respiration"] is None
    assert "morphology: not computed by this engine version" in document["warnings"]
    assert "respiration: not computed by this engine version" in document["warnings"]


def test_infinity_anywhere_becomes_null_and_is_reported(full_result):
    values = dict(vars(full_result))
    values["respiration"] = dataclasses.replace(full_result.respiration,
                                                rise_fall_ratio=float("inf"))
    document = AnalysisResponseSchema().dump(AnalysisReport(types.SimpleNamespace(**values)))
    json.dumps(document, allow_nan=False)
    assert document["respiration"]["rise_fall_ratio"] is None
    assert any("respiration.rise_fall_ratio" in w for w in document["warnings"])
