"""Smoke tests of the validation cohort runner and the naive baseline."""

from __future__ import annotations

import json

import numpy as np
import pytest

from simulation import SimulationSettings
from validation.baseline import detect_beats_baseline
from validation.cohort import (
    CaseSpec,
    _score_case,
    baseline_detector,
    build_cases,
    engine_detector,
    format_report,
    main,
    run_cohort,
)


def test_full_cohort_composition() -> None:
    cases = build_cases()
    assert 40 <= len(cases) <= 80
    assert len({c.name for c in cases}) == len(cases)
    settings = [c.settings for c in cases]
    assert {s.fs_hz for s in settings} >= {100.0, 250.0, 500.0, 1000.0}
    assert {s.snr_db for s in settings} >= {20.0, 10.0, 6.0, 3.0, 0.0}
    assert min(s.heart_rate_bpm for s in settings) == 40.0
    assert max(s.heart_rate_bpm for s in settings) == 120.0
    assert all(120.0 <= s.duration_s <= 300.0 for s in settings)
    assert sum(s.body_mass_kg is None for s in settings) >= 3
    assert any(not c.with_subject and c.settings.body_mass_kg is not None for c in cases)
    assert any(s.quantity == "acceleration" for s in settings)
    assert any(s.n_channels == 4 and s.inverted_channel is not None
               and s.noisy_channel is not None for s in settings)
    # Issue 12: supports resonating at 3.5-5 Hz, damped and lightly damped (ringing).
    soft = [s for s in settings if s.support_natural_hz is not None
            and 3.5 <= s.support_natural_hz <= 5.0]
    assert len(soft) >= 3
    assert any((s.support_damping_ratio or 1.0) <= 0.1 for s in soft)
    assert any((s.support_damping_ratio or 0.0) >= 0.25 for s in soft)
    assert build_cases(seed=3) == build_cases(seed=3)
    assert build_cases(seed=3) != build_cases(seed=4)


def test_baseline_on_clean_fast_trace() -> None:
    # At 120 bpm (0.5 s cycle) the 0.3 s peak distance leaves one peak per beat on a clean
    # trace, so the naive detector should find the truth beats.
    case = CaseSpec("clean", "clean", SimulationSettings(duration_s=60.0, heart_rate_bpm=120.0,
                                                         snr_db=20.0, seed=2))
    report = run_cohort(engine=None, cases=[case])
    row = report.cases[0]
    assert row.baseline_se is not None and row.baseline_se > 0.97
    assert row.baseline_hr_error_bpm is not None and abs(row.baseline_hr_error_bpm) < 2.0
    assert row.engine_se is None


def test_quick_cohort_with_baseline_as_engine(tmp_path: object) -> None:
    report = run_cohort(quick=True, seed=0, engine=baseline_detector)
    assert len(report.cases) == 12
    assert report.n_empty == 2
    assert report.n_errors == 0
    # The same detector in both columns must give the same pooled scores.
    assert report.engine_se == pytest.approx(report.baseline_se)
    assert report.engine_ppv == pytest.approx(report.baseline_ppv)
    assert report.calibration_fraction is None  # the baseline reports no confidence
    text = format_report(report)
    assert "OVERALL" in text and "Calibration" in text and "rate_68" in text


def test_cli_writes_json(tmp_path: pytest.TempPathFactory, capsys: pytest.CaptureFixture[str],
                         monkeypatch: pytest.MonkeyPatch) -> None:
    import validation.cohort as cohort

    small = build_cases(quick=True)[:2]
    monkeypatch.setattr(cohort, "build_cases", lambda quick=False, seed=0: small)
    path = f"{tmp_path}/report.json"
    assert main(["--quick", "--baseline-only", "--json", path]) == 0
    out = capsys.readouterr().out
    assert "OVERALL" in out
    with open(path, encoding="utf-8") as fh:
        data = json.load(fh)
    assert len(data["cases"]) == 2 and data["tolerance_ms"] == 150.0


def test_quick_cohort_with_engine() -> None:
    # Smoke test of the real engine through the adapter. Bounds are the project's acceptance
    # targets for clean-to-moderate cases (common practice for beat detectors: Se and +P
    # above 0.9 under EC57-style matching), not values the code computed.
    report = run_cohort(quick=True, seed=0)
    assert report.engine_name == "engine_detector"
    assert report.n_errors == 0
    assert report.engine_se is not None and report.engine_se > 0.9
    assert report.engine_ppv is not None and report.engine_ppv > 0.9
    assert report.n_empty_unoccupied == report.n_empty == 2
    assert report.n_empty_hr_none == 2


@pytest.mark.parametrize("seed", [1, 2])
def test_hard_mix_keeps_pauses_after_premature_beats_free_of_false_beats(seed: int) -> None:
    # The cohort's hardest case (4 cells, 3 dB, a 6-Hz ringing support, movement, 5 %
    # premature beats): weak picks inside the compensatory pause after a premature beat
    # (noise or a ring wave, a pause left room for) brought positive predictivity to
    # 0.922 and 0.935 on these two draws. Issue 12's acceptance: sensitivity and positive
    # predictivity at least 0.95 in every case, scored as the cohort scores it (ANSI/AAMI
    # EC57 one-to-one matching within 150 ms, validation.matching).
    spec = next(c for c in build_cases(seed=seed) if c.name == "hard_mix")
    result = _score_case(spec, engine_detector)
    assert result.engine_ppv is not None and result.engine_ppv >= 0.95
    assert result.engine_se is not None and result.engine_se >= 0.95


def test_baseline_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="`band_hz` must"):
        detect_beats_baseline([np.zeros(100)], 30.0)
    with pytest.raises(ValueError, match="`channels` must"):
        detect_beats_baseline([np.zeros(100), np.zeros(50)], 250.0)
