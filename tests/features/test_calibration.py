"""Calibrated confidence: the fitted table's provenance, monotonicity and the zero rule."""

from __future__ import annotations

import datetime
import math
from dataclasses import replace

import pytest

from features import ChannelInput, Subject, analyze
from features.calibration import (
    EVIDENCE_NAMES,
    SIGNED_EVIDENCE,
    calibrated_confidence,
    evidence,
    is_calibrated,
    isotonic_map,
    logistic,
    result_evidence,
)
from features.calibration_table import FIT, MODELS
from features.feature_vector import FEATURES, family_confidence, feature_definition
from simulation import SimulationSettings, simulate

HEADLINE = ("heart_rate_mean_bpm", "breathing_rate_per_min", "sdnn_ms", "rmssd_ms",
            "ij_interval_ms", "jk_interval_ms", "rsa_ms")


@pytest.fixture(scope="module")
def result():  # type: ignore[no-untyped-def]
    rec = simulate(SimulationSettings(duration_s=120.0, seed=42))
    channels = [ChannelInput(samples=x, label=lab, quantity=rec.quantity, unit=rec.unit)
                for x, lab in zip(rec.channels, rec.labels, strict=True)]
    return analyze(channels, rec.fs_hz, subject=Subject(body_mass_kg=rec.truth.body_mass_kg))


def test_provenance_fields() -> None:
    datetime.date.fromisoformat(str(FIT["date"]))
    assert FIT["script"] == "python -m validation.calibration --fit"
    first, last = int(FIT["train_seed_first"]), int(FIT["train_seed_last"])  # type: ignore[call-overload]
    assert last - first + 1 == FIT["train_cases"]
    assert int(FIT["train_cases"]) >= 500  # type: ignore[call-overload]
    # Test seeds lie outside the training seeds (no leakage).
    assert not first <= int(FIT["test_seed_first"]) <= last  # type: ignore[call-overload]
    assert int(FIT["train_samples"]) >= sum(m.n_train for m in MODELS.values())  # type: ignore[call-overload]


def test_every_headline_feature_is_calibrated_with_known_evidence() -> None:
    for name in HEADLINE + ("pnn50_pct",):
        assert is_calibrated(name), name
    for name, model in MODELS.items():
        feature_definition(name)  # a catalogue name
        assert set(model.inputs) <= set(EVIDENCE_NAMES)
        assert len(model.coefficients) == len(model.inputs)
        assert 0.0 < model.base_rate < 1.0
        assert model.n_train >= 30


def test_models_are_monotone_in_every_evidence() -> None:
    # Every evidence quantity but the value's own size is oriented "larger is better": a
    # model may ignore one (coefficient 0) but never reward worse evidence.
    assert SIGNED_EVIDENCE < set(EVIDENCE_NAMES)
    for name, model in MODELS.items():
        for key, w in zip(model.inputs, model.coefficients, strict=True):
            assert w >= 0.0 or key in SIGNED_EVIDENCE, (name, key)


def test_confidence_rises_with_the_family_confidence(result) -> None:  # type: ignore[no-untyped-def]
    for name in MODELS:
        low = calibrated_confidence(name, 0.2, result)
        high = calibrated_confidence(name, 0.9, result)
        assert 0.0 < low <= high < 1.0, name
    # And strictly somewhere: the family confidence is evidence, not ignored everywhere.
    assert any(calibrated_confidence(n, 0.05, result) < calibrated_confidence(n, 1.0, result)
               for n in MODELS)


def test_zero_family_confidence_stays_zero(result) -> None:  # type: ignore[no-untyped-def]
    # The rule that keeps "no heartbeat" at confidence 0 (issue 12 acceptance).
    for name in MODELS:
        assert calibrated_confidence(name, 0.0, result) == 0.0


def test_evidence_is_finite_and_complete(result) -> None:  # type: ignore[no-untyped-def]
    ev = evidence(result, 0.7)
    assert tuple(ev) == EVIDENCE_NAMES
    assert all(math.isfinite(v) for v in ev.values())
    assert ev["heuristic"] == 0.7
    # An analysis whose beats correlate better gives at least as high a confidence.
    worse = replace(result, beats=replace(result.beats, correlation=result.beats.correlation * 0.5))
    for name, model in MODELS.items():
        if "beat_correlation" in model.inputs:
            h = family_confidence(feature_definition(name), result)
            assert calibrated_confidence(name, h, worse) <= calibrated_confidence(name, h, result)


def test_feature_vector_reports_the_calibrated_confidence(result) -> None:  # type: ignore[no-untyped-def]
    for d in FEATURES:
        fv = result.feature_vector.get(d.name)
        if fv.value is None or not is_calibrated(d.name):
            continue
        want = calibrated_confidence(d.name, family_confidence(d, result), result)
        assert fv.confidence == pytest.approx(want, abs=1e-12)  # same arithmetic, same order


def test_evidence_shared_across_features_gives_the_same_confidences(result) -> None:  # type: ignore[no-untyped-def]
    memo: dict[str, float] = {}
    for name in MODELS:
        for h in (0.05, 0.5, 1.0):
            # The same sum of the same products in the same order: equal bit for bit.
            assert calibrated_confidence(name, h, result, memo=memo) == \
                calibrated_confidence(name, h, result)
    assert memo == result_evidence(result)
    assert evidence(result, 0.5) == {"heuristic": 0.5, **result_evidence(result)}


def test_variability_features_no_longer_share_one_confidence(result) -> None:  # type: ignore[no-untyped-def]
    # SDNN, RMSSD and pNN50 share one family confidence but each has its own fitted model,
    # so somewhere each pair must part. A single clean recording is not enough: there every
    # model may sit at the isotonic ceiling together (the fit's top bin), which says nothing
    # about whether the models are one. So a hard recording too (0 dB, 8 % ectopic beats,
    # three movements), where the evidence is mid-range, and a grid of family confidences.
    rec = simulate(SimulationSettings(duration_s=120.0, seed=1, snr_db=0.0,
                                      ectopic_fraction=0.08, movement_count=3))
    channels = [ChannelInput(samples=x, label=lab, quantity=rec.quantity, unit=rec.unit)
                for x, lab in zip(rec.channels, rec.labels, strict=True)]
    hard = analyze(channels, rec.fs_hz, subject=Subject(body_mass_kg=rec.truth.body_mass_kg))
    names = ("sdnn_ms", "rmssd_ms", "pnn50_pct")
    grid = [(h, r) for h in (0.1, 0.3, 0.5, 0.7, 0.9) for r in (result, hard)]
    conf = {n: [round(calibrated_confidence(n, h, r), 3) for h, r in grid] for n in names}
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            assert conf[a] != conf[b], (a, b, conf[a])


def test_tolerances_no_looser_than_issue_12() -> None:
    # Bounds stated in issue 12 ("Confidence that means what it says"), item 1.
    bounds = {"heart_rate_mean_bpm": (2.0, False), "breathing_rate_per_min": (1.0, False),
              "sdnn_ms": (10.0, True), "rmssd_ms": (15.0, True), "pnn50_pct": (10.0, False),
              "lf_power_ms2": (25.0, True), "hf_power_ms2": (25.0, True),
              "ij_interval_ms": (10.0, False), "jk_interval_ms": (10.0, False),
              "ij_amplitude": (15.0, True), "jk_amplitude": (15.0, True),
              "rsa_ms": (10.0, False)}
    for name, (tol, relative) in bounds.items():
        d = feature_definition(name)
        assert d.tolerance_relative is relative, name
        assert 0.0 < d.tolerance <= tol, name
    for d in FEATURES:
        assert d.tolerance > 0.0 and d.tolerance_unit and d.tolerance_note, d.name
        assert d.tolerance_unit == ("%" if d.tolerance_relative else (d.unit or "1")), d.name


def test_logistic_is_stable() -> None:
    # Textbook values: logistic(0) = 1/2; symmetric; no overflow at +-1000.
    assert logistic(0.0) == 0.5
    assert logistic(3.0) + logistic(-3.0) == pytest.approx(1.0, abs=1e-15)  # rounding
    assert logistic(1000.0) == 1.0 and logistic(-1000.0) == 0.0


def test_isotonic_maps_are_monotone_and_bounded() -> None:
    # Isotonic regression (Niculescu-Mizil and Caruana, ICML 2005) gives a non-decreasing
    # map; the fit keeps its probabilities within [0.01, 0.99].
    for name, model in MODELS.items():
        ks, kp = model.knot_scores, model.knot_probabilities
        assert len(ks) == len(kp) >= 1, name
        assert all(a < b for a, b in zip(ks, ks[1:], strict=False)), name
        assert all(a <= b for a, b in zip(kp, kp[1:], strict=False)), name
        assert 0.01 <= kp[0] and kp[-1] <= 0.99, name


def test_isotonic_map_interpolates_between_knots() -> None:
    # Hand-worked: halfway between knots (0, 0.2) and (2, 0.6) is 0.4; constant beyond.
    ks, kp = (0.0, 2.0, 3.0), (0.2, 0.6, 0.9)
    assert isotonic_map(1.0, ks, kp) == pytest.approx(0.4, abs=1e-12)  # rounding only
    assert isotonic_map(-5.0, ks, kp) == 0.2
    assert isotonic_map(7.0, ks, kp) == 0.9
