"""Calibrated confidence: the fitted table's provenance, monotonicity and the zero rule."""

from __future__ import annotations

import datetime
import math
from dataclasses import replace

import pytest

from features import ChannelInput, Subject, analyze
from features.calibration import (
    BAROREFLEX_HZ,
    EVIDENCE_NAMES,
    SIGNED_EVIDENCE,
    calibrated_confidence,
    evidence,
    is_calibrated,
    isotonic_map,
    logistic,
    result_evidence,
)
from features.calibration_table import FIT, LF_BAND_MODELS, MODELS
from features.feature_vector import FEATURES, family_confidence, feature_definition
from features.modulation import LF_BAND_HZ
from simulation import SimulationSettings, simulate

HEADLINE = ("heart_rate_mean_bpm", "breathing_rate_per_min", "sdnn_ms", "rmssd_ms",
            "ij_interval_ms", "jk_interval_ms", "rsa_ms")
EVERY_MODEL = [*MODELS.items(), *((f"{n} (LF band)", m) for n, m in LF_BAND_MODELS.items())]


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
    # Test seeds lie outside the training seeds (no leakage), the LF-band ones included,
    # and those two sets of training seeds do not meet either.
    lf_first, lf_last = int(FIT["lf_band_seed_first"]), int(FIT["lf_band_seed_last"])  # type: ignore[call-overload]
    assert lf_last - lf_first + 1 == FIT["lf_band_cases"]
    test = int(FIT["test_seed_first"])  # type: ignore[call-overload]
    assert not first <= test <= last and not lf_first <= test <= lf_last
    assert last < lf_first
    assert int(FIT["train_samples"]) >= sum(m.n_train for m in MODELS.values())  # type: ignore[call-overload]


def test_every_headline_feature_is_calibrated_with_known_evidence() -> None:
    for name in HEADLINE + ("pnn50_pct",):
        assert is_calibrated(name), name
    assert set(LF_BAND_MODELS) <= set(MODELS)
    for name, model in EVERY_MODEL:
        feature_definition(name.removesuffix(" (LF band)"))  # a catalogue name
        assert set(model.inputs) <= set(EVIDENCE_NAMES)
        assert len(model.coefficients) == len(model.inputs)
        assert 0.0 < model.base_rate < 1.0
        assert model.n_train >= 30


def test_models_are_monotone_in_every_evidence() -> None:
    # Every evidence quantity but the value's own size is oriented "larger is better": a
    # model may ignore one (coefficient 0) but never reward worse evidence.
    assert SIGNED_EVIDENCE < set(EVIDENCE_NAMES)
    for name, model in EVERY_MODEL:
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
    for name, model in EVERY_MODEL:
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


def _with_modulation(result, **changes):  # type: ignore[no-untyped-def]
    return replace(result, modulation=replace(result.modulation, **changes))


def test_split_precision_and_baroreflex_distance_by_hand(result) -> None:  # type: ignore[no-untyped-def]
    # Hand-worked: SE 3 ms and halves 8 ms apart -> sqrt(3^2 + 4^2) = 5 ms, log(10 / 5)
    # (half the halves' difference: the two-group jackknife's error, Efron and Tibshirani
    # 1993, ch. 11, from memory; baroreflex rhythm near 0.1 Hz: Julien 2006, from memory).
    # Exact up to rounding (log and hypot of small integers): 1e-12.
    ev = result_evidence(_with_modulation(result, rsa_se_ms=3.0, rsa_half_difference_ms=8.0))
    assert ev["rsa_split_precision"] == pytest.approx(math.log(2.0), abs=1e-12)
    ev = result_evidence(_with_modulation(result, rsa_se_ms=3.0, rsa_half_difference_ms=None))
    assert ev["rsa_split_precision"] == pytest.approx(math.log(10.0 / 3.0), abs=1e-12)
    ev = result_evidence(_with_modulation(result, rsa_se_ms=None, rsa_half_difference_ms=8.0))
    assert ev["rsa_split_precision"] == 0.0
    # Halves that disagree lower it below the standard error's own precision.
    ev = result_evidence(_with_modulation(result, rsa_se_ms=2.0, rsa_half_difference_ms=40.0))
    assert ev["rsa_split_precision"] < ev["rsa_precision"]
    # Distance from the baroreflex rhythm: 0 on it (6 /min), 1/2 halfway to the LF band's
    # upper edge, 1 at and beyond that edge, 0 when breathing is unknown.
    for f_hz, want in ((BAROREFLEX_HZ, 0.0), (0.125, 0.5), (LF_BAND_HZ[1], 1.0), (0.3, 1.0),
                       (None, 0.0)):
        ev = result_evidence(_with_modulation(result, breathing_frequency_hz=f_hz))
        assert ev["breathing_off_baroreflex"] == pytest.approx(want, abs=1e-12), f_hz


def test_rsa_in_the_lf_band_uses_its_own_model(result) -> None:  # type: ignore[no-untyped-def]
    # Below 0.15 Hz (LF band's upper edge, Task Force 1996) the LF-band model, above it the
    # general one: the same arithmetic as calibrated_confidence, written out.
    def by_hand(model, r, h):  # type: ignore[no-untyped-def]
        ev = evidence(r, h)
        z = model.intercept
        for key, w in zip(model.inputs, model.coefficients, strict=True):
            z += w * ev[key]
        return isotonic_map(z, model.knot_scores, model.knot_probabilities)

    assert "rsa_ms" in LF_BAND_MODELS
    for f_hz, model in ((0.1, LF_BAND_MODELS["rsa_ms"]), (0.149, LF_BAND_MODELS["rsa_ms"]),
                        (0.151, MODELS["rsa_ms"]), (0.25, MODELS["rsa_ms"])):
        r = _with_modulation(result, breathing_frequency_hz=f_hz)
        for h in (0.3, 0.8):
            assert calibrated_confidence("rsa_ms", h, r) == by_hand(model, r, h), (f_hz, h)
    # Only RSA has one: the heart rate's confidence does not depend on breathing's band.
    slow = _with_modulation(result, breathing_frequency_hz=0.1)
    assert calibrated_confidence("heart_rate_mean_bpm", 0.8, slow) == \
        calibrated_confidence("heart_rate_mean_bpm", 0.8, result)
