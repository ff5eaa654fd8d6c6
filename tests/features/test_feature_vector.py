"""The feature vector: catalogue rules, one value per entry, honest Nones, units, confidences."""

from __future__ import annotations

import math
import re
from dataclasses import replace

import pytest

from features.calibration import is_calibrated
from features.conditioning import ChannelInput
from features.engine import FEATURE_SET_VERSION, AnalysisResult, Subject, analyze
from features.feature_vector import (
    FEATURE_NAMES,
    FEATURES,
    FeatureVector,
    catalogue_fingerprint,
    feature_definition,
    feature_vector,
)
from features.morphology import _WAVE_RULES
from simulation import SimulationSettings, SimulationTruth, simulate

# When a definition changes, bump FEATURE_SET_VERSION in features/engine.py and add the new
# fingerprint here: an old version must never name a different catalogue.
KNOWN_CATALOGUES = {
    "1": "685e2aa15a0118e023edef148b73f06951eddf96cb32a3aeffe087e4e26d991c",
    # 2: I-J / J-K interval and amplitude confidences include their split-ensemble precision.
    "2": "2c971e440e0bae534f73c73a10dd31895faae38508e790c39606b9cf6c35e37d",
    # 3: breathing_rate_per_min is the fused (Smart Fusion) rate; the counted rate is its own.
    "3": "b5b32088ca5803e31b792db5f7218bb1570b65646e45c8d11f9c331f63e139fa",
    # 4: usable_fraction also leaves out gaps (samples the device lost, with 1 s either side);
    # a heartbeat overrules a load that says "empty" (per-channel coupling, ac sensors), and
    # no breathing is reported without an occupant.
    "4": "93317820dc3c94b9566c62069a804c27ac8960e506d7ab1364244944f3f4aad8",
    # 5: rsa_ms is the cosinor fit against the breathing phase with a slow trend removed.
    "5": "9b6b7d42135a69921ff00afb095bae38a400804afcac4ffd1159e45b667f5c51",
    # 6: every feature names a tolerance; a calibrated feature's confidence is the fitted
    # probability of lying within it (issue 12), per feature rather than per family.
    "6": "df9632c050e841502d3c8e013db2b0c02887208550e875615993523548243a63",
}

# UCUM symbols for the unit suffixes (Unified Code for Units of Measure, ucum.org; from
# memory): ms, /min, %, ms2 (ms^2), /h, s.
SUFFIX_UNITS = {"_ms": "ms", "_ms2": "ms2", "_bpm": "/min", "_per_min": "/min", "_pct": "%",
                "_per_hour": "/h", "_s": "s"}


def _analyse(**kw: object) -> tuple[AnalysisResult, SimulationTruth]:
    rec = simulate(SimulationSettings(**kw))  # type: ignore[arg-type]
    channels = [
        ChannelInput(samples=s, label=lab, quantity=rec.quantity, unit=rec.unit,
                     position_m=None if rec.positions_m is None else rec.positions_m[i])
        for i, (s, lab) in enumerate(zip(rec.channels, rec.labels, strict=True))
    ]
    mass = rec.truth.body_mass_kg
    subject = Subject(body_mass_kg=mass) if mass is not None else None
    return analyze(channels, rec.fs_hz, subject=subject), rec.truth


@pytest.fixture(scope="module")
def seated() -> tuple[AnalysisResult, SimulationTruth]:
    return _analyse(duration_s=180.0, seed=21)


# --------------------------------------------------------------------------- the catalogue


def test_names_are_unique_snake_case_and_carry_their_unit() -> None:
    assert len(set(FEATURE_NAMES)) == len(FEATURE_NAMES)
    for d in FEATURES:
        assert re.fullmatch(r"[a-z][a-z0-9]*(_[a-z0-9]+)*", d.name), d.name
        for suffix, unit in SUFFIX_UNITS.items():
            if d.name.endswith(suffix):
                assert d.unit == unit, d.name
        if d.unit in SUFFIX_UNITS.values():
            assert any(d.name.endswith(s) for s, u in SUFFIX_UNITS.items() if u == d.unit), d.name


def test_catalogue_holds_the_issue_names() -> None:
    # Names required by the feature-engine issue (part 2) and served by the API.
    for name in ("heart_rate_mean_bpm", "sdnn_ms", "rmssd_ms", "ij_interval_ms",
                 "jk_interval_ms", "ij_amplitude", "jk_amplitude", "breathing_rate_per_min",
                 "rsa_ms", "amplitude_index", "usable_fraction"):
        assert name in FEATURE_NAMES


def test_every_entry_is_documented_with_range_and_reference() -> None:
    for d in FEATURES:
        assert d.definition.endswith(".") and len(d.definition) > 20, d.name
        assert d.reference, d.name
        lo, hi = d.valid_range
        assert lo is None or hi is None or lo < hi, d.name


def test_wave_interval_ranges_follow_the_morphology_search_windows() -> None:
    # The valid ranges are the search windows of features.morphology widened by 2 x 8 ms.
    rules = {name: (lo, hi) for name, _, _, lo, hi in _WAVE_RULES}
    i_lo, i_hi = -rules["I"][1] * 1e3, -rules["I"][0] * 1e3
    k_lo, k_hi = rules["K"][0] * 1e3, rules["K"][1] * 1e3
    assert feature_definition("ij_interval_ms").valid_range == pytest.approx(
        (i_lo - 16, i_hi + 16))
    assert feature_definition("jk_interval_ms").valid_range == pytest.approx(
        (k_lo - 16, k_hi + 16))


def test_version_is_the_engines_and_pins_the_catalogue() -> None:
    assert FEATURE_SET_VERSION in KNOWN_CATALOGUES, (
        f"add the fingerprint of feature set {FEATURE_SET_VERSION}: {catalogue_fingerprint()}")
    assert catalogue_fingerprint() == KNOWN_CATALOGUES[FEATURE_SET_VERSION], (
        "the catalogue changed: bump FEATURE_SET_VERSION and record the new fingerprint "
        f"{catalogue_fingerprint()}")


def test_unknown_names_raise_key_error(seated: tuple[AnalysisResult, SimulationTruth]) -> None:
    with pytest.raises(KeyError):
        feature_definition("heart_rate")
    with pytest.raises(KeyError):
        feature_vector(seated[0]).get("nope")


# --------------------------------------------------------------------------- the vector


def _assert_well_formed(vector: FeatureVector) -> None:
    assert tuple(f.name for f in vector.features) == FEATURE_NAMES
    for f, d in zip(vector.features, FEATURES, strict=True):
        assert 0.0 <= f.confidence <= 1.0, f.name
        if f.value is None:
            assert isinstance(f.reason, str) and f.reason, f.name
            assert f.confidence == 0.0, f.name
        else:
            assert f.reason is None and math.isfinite(f.value), f.name
            lo, hi = d.valid_range
            assert (lo is None or f.value >= lo) and (hi is None or f.value <= hi), f.name


def test_vector_of_a_seated_recording_tracks_the_truth(
    seated: tuple[AnalysisResult, SimulationTruth],
) -> None:
    result, truth = seated
    vector = feature_vector(result)
    _assert_well_formed(vector)
    assert vector.feature_set_version == result.feature_set_version == FEATURE_SET_VERSION
    v = vector.as_dict()
    assert list(v) == list(FEATURE_NAMES)
    # Truth of the simulator; tolerances are the acceptance lines of the engine issues
    # (3 bpm heart rate; 1 /min breathing; 10 ms wave intervals; 15 % amplitudes).
    assert truth.heart_rate_bpm is not None and truth.template is not None
    assert abs(v["heart_rate_mean_bpm"] - truth.heart_rate_bpm) <= 3.0  # type: ignore
    assert abs(v["breathing_rate_per_min"] - truth.breathing_rate_per_min) <= 1.0  # type: ignore
    assert abs(v["ij_interval_ms"] - truth.template.i_j_interval_ms) <= 10.0  # type: ignore
    assert abs(v["jk_amplitude"] / truth.template.j_k_amplitude - 1) <= 0.15  # type: ignore
    # Normal adult resting breathing is 12-20 per minute (common practice); the simulator
    # breathes at 14.
    assert 12.0 <= v["breathing_rate_per_min"] <= 20.0  # type: ignore[operator]
    assert vector.get("ij_amplitude").unit == "N"
    assert vector.get("ij_amplitude_per_kg").unit == "N/kg"
    assert vector.get("heart_rate_mean_bpm").unit == "/min"


def test_amplitude_unit_follows_the_input() -> None:
    result, _ = _analyse(duration_s=120.0, seed=22, quantity="acceleration")
    vector = feature_vector(result)
    _assert_well_formed(vector)
    assert vector.get("jk_amplitude").unit == "m/s^2"
    assert vector.get("jk_amplitude_per_kg").unit == "m/s^2/kg"


def test_empty_support_gives_nones_with_reasons() -> None:
    result, _ = _analyse(duration_s=60.0, seed=23, body_mass_kg=None)
    vector = feature_vector(result)
    _assert_well_formed(vector)
    for name in ("heart_rate_mean_bpm", "sdnn_ms", "ij_interval_ms", "jk_amplitude", "rsa_ms"):
        assert vector.get(name).value is None, name


def test_short_recording_names_the_missing_band(
    seated: tuple[AnalysisResult, SimulationTruth],
) -> None:
    # Task Force (1996): VLF needs at least 5 min of recording; the seated trace is 3 min.
    vlf = feature_vector(seated[0]).get("vlf_power_ms2")
    assert vlf.value is None and vlf.reason is not None and vlf.reason.startswith("vlf")


def test_non_finite_and_out_of_range_values_become_none(
    seated: tuple[AnalysisResult, SimulationTruth],
) -> None:
    result = seated[0]
    morph = replace(result.morphology, ij_interval_ms=float("nan"), jk_amplitude=-1.0,
                    jk_interval_ms=500.0)
    vector = feature_vector(replace(result, morphology=morph))
    _assert_well_formed(vector)
    assert vector.get("ij_interval_ms").reason == "not_finite"
    assert vector.get("jk_amplitude").reason == "outside_valid_range"
    assert vector.get("jk_interval_ms").reason == "outside_valid_range"


def test_wave_confidence_caps_only_the_features_that_use_the_wave(
    seated: tuple[AnalysisResult, SimulationTruth],
) -> None:
    result = seated[0]
    waves = tuple(replace(w, confidence=0.05) if w.name == "I" else w
                  for w in result.morphology.waves)
    vector = feature_vector(replace(result, morphology=replace(result.morphology, waves=waves)))
    before_vector = feature_vector(result)
    # A calibrated feature (issue 12) takes the capped family confidence as one input of
    # its fitted model, monotone in it: lower, though not necessarily to the cap.
    assert is_calibrated("ij_interval_ms")
    assert (vector.get("ij_interval_ms").confidence
            < before_vector.get("ij_interval_ms").confidence)
    assert not is_calibrated("ij_amplitude")
    assert vector.get("ij_amplitude").confidence <= 0.05
    before = before_vector.get("jk_interval_ms").confidence
    assert vector.get("jk_interval_ms").confidence == before > 0.05


def test_breathing_from_centre_of_pressure_drops_the_unit_dependent_features(
    seated: tuple[AnalysisResult, SimulationTruth],
) -> None:
    result = seated[0]
    resp = replace(result.respiration, source="centre_of_pressure")
    vector = feature_vector(replace(result, respiration=resp))
    for name in ("breathing_amplitude", "baseline_modulation_ratio"):
        f = vector.get(name)
        assert f.value is None and f.reason == "breathing_from_centre_of_pressure"
    assert vector.get("breathing_rate_per_min").value is not None
