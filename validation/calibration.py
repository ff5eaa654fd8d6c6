"""Calibration of the engine's confidences: fit (``--fit``) and report.

Usage::

    python -m validation.calibration --fit [--n-train N]   # refit features/calibration_table.py
    python -m validation.calibration [--n-test N] [--quick] [--figures DIR]
    python -m validation.calibration --fit --report         # both: refit, then the report
    (any of them with --jobs N: N worker processes, one per CPU by default)

A feature's confidence is meant as P(|reported - true| <= tolerance) (the tolerance of its
catalogue entry). Two simulated cohorts, drawn at random from :data:`TRAIN_RANGES` and
:data:`TEST_RANGES` with seeds that never overlap (training from :data:`TRAIN_SEED`, test from
:data:`TEST_SEED`), are analysed by the engine; every reported value of a calibrated feature
becomes one sample (evidence, hit) where hit = |reported - true| <= tolerance.

Fit: per feature, a logistic regression of the hit on a few evidence quantities
(:data:`MODEL_INPUTS`; :func:`features.calibration.evidence`) with every coefficient held
non-negative (the evidence is oriented so that larger is better, so the confidence is monotone
in each; the value's own size may take either sign) and a small L2 penalty, by
``scipy.optimize.minimize`` (L-BFGS-B): Platt scaling generalised to several inputs (Platt
1999). Its score is then mapped to probability by isotonic regression fitted on
out-of-fold scores (5 folds by case), which corrects the shape where the logistic link
is wrong (Niculescu-Mizil and Caruana, ICML 2005). RSA has a second model of the same kind
(:data:`LF_BAND_INPUTS`) for breathing inside the LF band, fitted on the training
recordings that breathe there, :func:`lf_band_cases` added to the training for it alone
(every other model learns from the main cohort). The
coefficients, the isotonic knots and the fit's provenance are written to
``features/calibration_table.py``.

Report (test cohort): per headline feature, the expected calibration error over
:data:`N_BINS` equal-width confidence bins (Guo et al., ICML 2017), the Brier score and that
of the constant predictor (the test cohort's own base rate), and a reliability diagram PNG.

Truths: heart rate, breathing rate, RSA and the I-J / J-K intervals as in
:mod:`validation.features_check`; SDNN, RMSSD and pNN50 from the simulator's true J instants,
over normal-to-normal intervals (both beats normal, no artifact span between them), with the
Task Force definitions (SDNN sample SD, ddof=1; RMSSD over adjacent NN pairs; pNN50 the
share of those differences above 50 ms).
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import os
import subprocess
import sys
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from scipy import optimize

from features.calibration import (
    EVIDENCE_NAMES,
    SIGNED_EVIDENCE,
    breathing_in_lf_band,
    evidence,
)
from features.conditioning import ChannelInput
from features.engine import AnalysisResult, Subject, analyze
from features.errors import EngineError
from features.feature_vector import family_confidence, feature_definition
from simulation import SimulatedRecording, SimulationSettings, SimulationTruth, simulate
from validation.cohort import _as_sensor
from validation.features_check import effective_rsa_ms

__all__ = [
    "HEADLINE",
    "LF_BAND_INPUTS",
    "MODEL_INPUTS",
    "N_BINS",
    "Sample",
    "brier_score",
    "build_cases",
    "collect",
    "expected_calibration_error",
    "fit_logistic",
    "main",
    "reliability_bins",
]

N_BINS = 10
"""Equal-width confidence bins of the ECE and the reliability diagrams (Guo et al. 2017
use 15 on ten thousands of samples; 10 keeps a few tens of samples per bin here)."""

TRAIN_SEED = 710_000
TRAIN_SEED_SPAN = 100_000
"""Seeds from ``TRAIN_SEED`` on, this many, are kept for training cohorts (``--n-train`` stays
below half of it, the LF-band recordings in the upper half); a report never draws from
them."""
TRAIN_LF_SEED = TRAIN_SEED + TRAIN_SEED_SPAN // 2
"""First seed of the training's added LF-band recordings (:func:`lf_band_cases`)."""
TRAIN_LF_SHARE = 0.6
"""Added LF-band recordings per training recording: with breathing drawn from 6-20 /min,
about a fifth of the training breathes inside the LF band; for 4,000 training recordings
the addition brings the LF-band model's RSA values to about 2,100 (from about 600)."""
TRAIN_LF_BREATHING = (6.0, 9.0)
"""Breathing of the added recordings (/min): the training's own lower limit up to the LF
band's upper edge (0.15 Hz)."""
TEST_SEED = 930_000
L2 = 1e-4
"""Ridge penalty on the standardised coefficients (not the intercept), per sample; keeps the
fit finite where a feature's hits are perfectly separated."""
N_FOLDS = 5
"""Folds (by case) of the out-of-fold scores the isotonic map is fitted on."""

HEADLINE = ("heart_rate_mean_bpm", "breathing_rate_per_min", "sdnn_ms", "rmssd_ms",
            "ij_interval_ms", "jk_interval_ms", "rsa_ms")
"""Features of the report and of the acceptance line of issue 12."""

_BEATS = ("heuristic", "log_intervals", "log_usable_s", "beat_correlation",
          "log_beat_evidence", "interval_consistency", "hr_agreement")
MODEL_INPUTS: dict[str, tuple[str, ...]] = {
    "heart_rate_mean_bpm": _BEATS,
    "heart_rate_median_bpm": _BEATS,
    "mean_nn_ms": _BEATS,
    "sdnn_ms": (*_BEATS, "sdnn_over_jitter", "normal_fraction", "log_sdnn"),
    "rmssd_ms": (*_BEATS, "rmssd_over_jitter", "normal_fraction", "log_rmssd",
                 "log_rmssd_sq", "rmssd_over_sdnn"),
    "pnn50_pct": (*_BEATS, "rmssd_over_jitter", "normal_fraction"),
    "breathing_rate_per_min": ("heuristic", "log_usable_s", "breath_agreement", "log_breaths",
                               "breath_regularity"),
    "ij_interval_ms": ("heuristic", "log_intervals", "template_correlation", "template_snr",
                       "ij_precision"),
    "jk_interval_ms": ("heuristic", "log_intervals", "template_correlation", "template_snr",
                       "jk_precision"),
    "rsa_ms": ("heuristic", "log_breaths", "interval_consistency", "rsa_over_jitter",
               "coherence", "hr_agreement", "normal_fraction", "log_rsa", "rsa_precision",
               "rsa_half_agreement", "rsa_half_consistency", "breath_regularity",
               "breathing_above_lf", "breath_agreement"),
}
"""Evidence quantities of each calibrated feature's model. RSA's model adds to the family
confidence what that one number folds together or leaves out: the cosinor fit's own
precision, the agreement of the recording's two halves, and the quality of the breathing
phase the fit is against (breath regularity, counted against spectral breathing rate,
distance of breathing from the low-frequency band)."""

LF_BAND_INPUTS: dict[str, tuple[str, ...]] = {
    "rsa_ms": (*(("rsa_split_precision" if k == "rsa_precision" else k)
                 for k in MODEL_INPUTS["rsa_ms"]), "breathing_off_baroreflex"),
}
"""Evidence of the features' LF-band models (breathing below 0.15 Hz), fitted on the training
recordings that breathe there: RSA's, with the fit's precision taken from the standard error
and the halves' difference together (a slow rhythm in the residuals makes the standard
error alone too small) and the distance of breathing from the baroreflex rhythm."""


# --------------------------------------------------------------------------- cohorts

@dataclass(frozen=True)
class Ranges:
    """Ranges the cohort's settings are drawn from (uniformly, or from the choices)."""

    heart_rate_bpm: tuple[float, float]
    breathing_rate_per_min: tuple[float, float]
    rsa_depth_ms: tuple[float, float]
    snr_db: tuple[float, float]
    duration_s: tuple[float, ...]
    fs_hz: tuple[float, ...]
    supports: tuple[str, ...]
    body_mass_kg: tuple[float, float]
    lf_variability: tuple[float, float]
    movement_max: int
    ectopic_max: float
    sensors: tuple[str | None, ...]
    respiration_force_n: tuple[float, float] = (1.5, 1.5)
    """Breathing force on the support (N), drawn log-uniformly: shallow to heavy breathing,
    whose swing can dwarf the heartbeat (the simulator's default is 1.5 N)."""


TRAIN_RANGES = Ranges(
    heart_rate_bpm=(48.0, 105.0), breathing_rate_per_min=(6.0, 20.0),
    rsa_depth_ms=(0.0, 160.0), snr_db=(-2.0, 20.0), duration_s=(120.0, 180.0, 240.0, 300.0),
    fs_hz=(100.0, 250.0, 500.0), supports=("cushion", "firm", "rigid", "ringing"),
    body_mass_kg=(50.0, 120.0), lf_variability=(0.0, 0.08), movement_max=3,
    ectopic_max=0.08, sensors=(None, None, None, None, "uncalibrated", "ac_coupled"),
    respiration_force_n=(0.5, 8.0),
)
TEST_RANGES = Ranges(
    heart_rate_bpm=(42.0, 115.0), breathing_rate_per_min=(6.0, 24.0),
    rsa_depth_ms=(0.0, 160.0), snr_db=(0.0, 24.0), duration_s=(150.0, 210.0, 270.0, 360.0),
    fs_hz=(125.0, 200.0, 400.0), supports=("cushion", "firm", "rigid", "ringing"),
    body_mass_kg=(45.0, 140.0), lf_variability=(0.0, 0.08), movement_max=4,
    ectopic_max=0.1, sensors=(None, None, None, None, "uncalibrated", "ac_coupled", "one_corner"),
    respiration_force_n=(0.4, 12.0),
)
"""Test ranges: other durations and sampling rates, and wider than training on every axis
but three: RSA depth and slow variability reach the same 160 ms and 0.08 in training, and
breathing starts at 6 /min in both (a narrower training left RMSSD underconfident on the
larger values here and RSA underconfident at slow breathing: docs/validation.md)."""


@dataclass(frozen=True)
class Case:
    settings: SimulationSettings
    sensor: str | None


def build_cases(ranges: Ranges, n: int, seed: int) -> tuple[Case, ...]:
    """``n`` cases drawn from ``ranges``; case ``i`` simulates with seed ``seed + i``."""
    rng = np.random.default_rng(seed)
    cases = []
    for i in range(n):
        def u(lo_hi: tuple[float, float]) -> float:
            return float(rng.uniform(*lo_hi))
        sensor = ranges.sensors[int(rng.integers(len(ranges.sensors)))]
        n_channels = 4 if sensor == "one_corner" or (sensor is None and rng.random() < 0.3) else 1
        settings = SimulationSettings(
            duration_s=float(rng.choice(ranges.duration_s)),
            fs_hz=float(rng.choice(ranges.fs_hz)),
            heart_rate_bpm=u(ranges.heart_rate_bpm),
            breathing_rate_per_min=u(ranges.breathing_rate_per_min),
            rsa_depth_ms=u(ranges.rsa_depth_ms),
            snr_db=u(ranges.snr_db),
            support=str(rng.choice(ranges.supports)),
            body_mass_kg=u(ranges.body_mass_kg),
            lf_variability=u(ranges.lf_variability),
            movement_count=int(rng.integers(ranges.movement_max + 1)),
            ectopic_fraction=float(rng.uniform(0.0, ranges.ectopic_max)) * (rng.random() < 0.5),
            irregular_rhythm=bool(rng.random() < 0.08),
            respiration_force_n=float(np.exp(rng.uniform(*np.log(ranges.respiration_force_n)))),
            n_channels=n_channels,
            seed=seed + i,
        )
        cases.append(Case(settings, sensor))
    return tuple(cases)


# --------------------------------------------------------------------------- truths

def _nn_truth(t: SimulationTruth) -> tuple[np.ndarray, np.ndarray]:
    """True NN intervals (ms) and their adjacent-pair differences (ms)."""
    j = np.asarray(t.j_times_s, dtype=float)
    normal = np.array([k == "normal" for k in t.beat_kinds], dtype=bool)
    iv = np.diff(j) * 1000.0
    ok = normal[1:] & normal[:-1]
    for span in t.artifact_spans:
        ok &= ~((j[1:] > span.start_s) & (j[:-1] < span.end_s))
    diffs = np.diff(iv)[ok[1:] & ok[:-1]]
    return iv[ok], diffs


def _truth(name: str, t: SimulationTruth, s: SimulationSettings, sensor: str | None
           ) -> float | None:
    if t.body_mass_kg is None:
        return None
    if name in ("heart_rate_mean_bpm", "heart_rate_median_bpm"):
        return t.heart_rate_bpm
    if name == "breathing_rate_per_min":
        return t.breathing_rate_per_min
    if name == "rsa_ms":
        return effective_rsa_ms(t, s)
    if name in ("ij_interval_ms", "jk_interval_ms"):
        if t.ensemble_template is None or sensor not in (None, "uncalibrated"):
            return None  # another sensor's front end reshapes the complex
        attr = "i_j_interval_ms" if name == "ij_interval_ms" else "j_k_interval_ms"
        return float(getattr(t.ensemble_template, attr))
    nn, diffs = _nn_truth(t)
    if len(nn) < 3 or len(diffs) < 2:
        return None
    if name == "mean_nn_ms":
        return float(nn.mean())
    if name == "sdnn_ms":
        return float(nn.std(ddof=1))
    if name == "rmssd_ms":
        return float(np.sqrt(np.mean(diffs**2)))
    if name == "pnn50_pct":
        return 100.0 * float(np.mean(np.abs(diffs) > 50.0))
    raise KeyError(name)


def within_tolerance(name: str, value: float, truth: float) -> bool:
    """|value - truth| <= the catalogue tolerance of ``name`` (relative ones in % of truth)."""
    d = feature_definition(name)
    if d.tolerance_relative:
        return truth > 0 and abs(value - truth) <= d.tolerance / 100.0 * truth
    return abs(value - truth) <= d.tolerance


# --------------------------------------------------------------------------- collection

@dataclass(frozen=True)
class Sample:
    """One reported value of one feature: its evidence, confidences and whether it hit."""

    feature: str
    case: int
    evidence: dict[str, float]
    heuristic: float
    confidence: float
    hit: bool


def _analyse(case: Case) -> tuple[SimulatedRecording, AnalysisResult | None]:
    rec = simulate(case.settings)
    if case.sensor is not None:
        rec = _as_sensor(rec, case.sensor)
    channels = [ChannelInput(samples=x, label=lab, quantity=rec.quantity, unit=rec.unit,
                             position_m=None if rec.positions_m is None else rec.positions_m[i])
                for i, (x, lab) in enumerate(zip(rec.channels, rec.labels, strict=True))]
    subject = None
    if case.sensor is None and rec.truth.body_mass_kg is not None:
        subject = Subject(body_mass_kg=rec.truth.body_mass_kg)
    try:
        return rec, analyze(channels, rec.fs_hz, subject=subject)
    except EngineError:
        return rec, None


def _case_samples(i: int, case: Case, features: Sequence[str]) -> list[Sample]:
    """The samples of case ``i``: one per reported feature with a truth and a non-zero
    family confidence."""
    rec, result = _analyse(case)
    if result is None:
        return []
    samples = []
    for name in features:
        fv = result.feature_vector.get(name)
        truth = _truth(name, rec.truth, case.settings, case.sensor)
        if fv.value is None or truth is None:
            continue
        h = family_confidence(feature_definition(name), result)
        if h <= 0.0:
            continue  # confidence 0 by rule; nothing to calibrate
        samples.append(Sample(name, i, evidence(result, h), h, fv.confidence,
                              within_tolerance(name, fv.value, truth)))
    return samples


def collect(cases: Sequence[Case], features: Sequence[str], *,
            progress: Callable[[int], None] | None = None, jobs: int = 1) -> list[Sample]:
    """Analyse every case and return one :class:`Sample` per reported value, in case order.

    ``jobs`` > 1 analyses the cases in that many worker processes; every case is simulated
    from its own seed, so the samples are the same as with one.
    """
    def show(i: int) -> None:
        if progress is not None:
            progress(i)

    samples: list[Sample] = []
    if jobs <= 1:
        for i, case in enumerate(cases):
            samples += _case_samples(i, case, features)
            show(i)
        return samples
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        parts = pool.map(_case_samples, range(len(cases)), cases,
                         [tuple(features)] * len(cases), chunksize=4)
        for i, part in enumerate(parts):
            samples += part
            show(i)
    return samples


# --------------------------------------------------------------------------- fit

def fit_logistic(x: np.ndarray, y: np.ndarray, *, l2: float = L2,
                 signed: Sequence[bool] | None = None) -> tuple[np.ndarray, float]:
    """Logistic regression with non-negative coefficients and a ridge penalty.

    The inputs are standardised (mean 0, SD 1 over the samples) for the fit, so that the
    ridge weighs every input alike; the returned coefficients apply to the raw inputs.
    Minimises the mean log loss plus ``l2 * |w|^2`` (on the standardised scale) over
    w >= 0 (w free where ``signed``) and a free intercept (L-BFGS-B). Returns (w, intercept).
    """
    n, k = x.shape
    mu = x.mean(axis=0)
    sd = x.std(axis=0)
    sd[sd == 0.0] = 1.0
    xs = (x - mu) / sd

    def loss(theta: np.ndarray) -> tuple[float, np.ndarray]:
        w, b = theta[:k], theta[k]
        z = xs @ w + b
        p = 1.0 / (1.0 + np.exp(-z))
        # log(1 + e^z) - y z, stable for either sign of z
        ll = np.logaddexp(0.0, z) - y * z
        g = p - y
        grad = np.concatenate([xs.T @ g / n + 2.0 * l2 * w, [g.mean()]])
        return float(ll.mean() + l2 * w @ w), grad

    theta0 = np.zeros(k + 1)
    free = signed if signed is not None else [False] * k
    bounds = [(None, None) if f else (0.0, None) for f in free] + [(None, None)]
    res = optimize.minimize(loss, theta0, jac=True, method="L-BFGS-B", bounds=bounds,
                            options={"maxiter": 5000})
    w = res.x[:k] / sd
    return w, float(res.x[k] - w @ mu)


def fit_isotonic_map(z: np.ndarray, y: np.ndarray, folds: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Knots (score, probability) of the isotonic regression of the hits on a score.

    Isotonic regression (pool adjacent violators, ``scipy.optimize.isotonic_regression``)
    of ``y`` on ``z`` sorted; each constant block becomes one knot at its mean score, and
    the probabilities are clipped to [0.01, 0.99] (a finite cohort cannot show certainty).
    Niculescu-Mizil and Caruana (ICML 2005), sec. 2.2. ``folds`` is unused here: the
    caller passes out-of-fold scores.
    """
    del folds
    order = np.argsort(z, kind="stable")
    levels = optimize.isotonic_regression(y[order]).x
    zs = z[order]
    kz = np.array([zs[levels == v].mean() for v in np.unique(levels)])
    kp = np.clip(np.unique(levels), 0.01, 0.99)
    order = np.argsort(kz)
    return kz[order], kp[order]


def predict(x: np.ndarray, w: np.ndarray, b: float) -> np.ndarray:
    """The fitted probabilities."""
    return 1.0 / (1.0 + np.exp(-(x @ w + b)))


def _matrix(samples: Sequence[Sample], inputs: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    x = np.array([[s.evidence[k] for k in inputs] for s in samples], dtype=float)
    y = np.array([s.hit for s in samples], dtype=float)
    return x.reshape(len(samples), len(inputs)), y


_Fitted = tuple[tuple[str, ...], np.ndarray, float, int, float, np.ndarray, np.ndarray]


def _write_table(models: dict[str, _Fitted], lf_models: dict[str, _Fitted],
                 fit: dict[str, object], path: Path) -> None:
    lines = [
        '"""Fitted calibration models (generated by ``python -m validation.calibration --fit``).',
        "",
        "Do not edit by hand: rerun the fit. See :mod:`features.calibration`.",
        '"""',
        "",
        "from __future__ import annotations",
        "",
        "from dataclasses import dataclass",
        "",
        '__all__ = ["FIT", "LF_BAND_MODELS", "MODELS", "LogisticModel"]',
        "",
        "",
        "@dataclass(frozen=True)",
        "class LogisticModel:",
        '    """P(within tolerance): the score intercept + sum(coefficients * evidence), mapped',
        "    through the isotonic knots (linear between them, constant beyond).",
        '    """',
        "",
        "    inputs: tuple[str, ...]",
        "    coefficients: tuple[float, ...]",
        "    intercept: float",
        "    n_train: int",
        "    base_rate: float",
        "    knot_scores: tuple[float, ...]",
        "    knot_probabilities: tuple[float, ...]",
        "",
        "",
        "FIT: dict[str, object] = {",
    ]
    for k, v in fit.items():
        lines.append(f"    {k!r}: {v!r},")
    lines += ["}", '"""Provenance of the fit: date, script, seeds, cohort sizes and ranges."""',
              "", "MODELS: dict[str, LogisticModel] = {"]
    def field(key: str, items: Sequence[str]) -> list[str]:
        return [f"        {key}=(", *(f"            {v}," for v in items), "        ),"]

    def entries(table: dict[str, _Fitted]) -> None:
        for name, (inputs, w, b, n, base, kz, kp) in table.items():
            lines.append(f"    {name!r}: LogisticModel(")
            lines.extend(field("inputs", [repr(k) for k in inputs]))
            lines.extend(field("coefficients", [f"{float(c):.6g}" for c in w]))
            lines.append(f"        intercept={b:.6g}, n_train={n}, base_rate={base:.4f},")
            lines.extend(field("knot_scores", [f"{float(v):.6g}" for v in kz]))
            lines.extend(field("knot_probabilities", [f"{float(v):.4f}" for v in kp]))
            lines.append("    ),")

    entries(models)
    lines += ["}", '"""Catalogue name -> fitted model."""', "",
              "LF_BAND_MODELS: dict[str, LogisticModel] = {"]
    entries(lf_models)
    lines += ["}", '"""Catalogue name -> the model used instead when breathing lies inside the LF',
              'band (below 0.15 Hz), fitted on those training recordings alone."""', ""]
    path.write_text("\n".join(lines), encoding="utf-8")


def _cached_collect(cases: Sequence[Case], features: Sequence[str], cache: Path | None,
                    jobs: int = 1) -> list[Sample]:
    """:func:`collect`, kept in ``cache`` (JSON) for reruns with the same cases and evidence."""
    key = {"seeds": [c.settings.seed for c in cases], "features": list(features),
           "evidence": list(EVIDENCE_NAMES)}
    if cache is not None and cache.exists():
        data = json.loads(cache.read_text(encoding="utf-8"))
        if data["key"] == key:
            return [Sample(**row) for row in data["samples"]]
    samples = collect(cases, features, progress=_progress(len(cases)), jobs=jobs)
    if cache is not None:
        cache.write_text(json.dumps({"key": key, "samples": [vars(s) for s in samples]}),
                         encoding="utf-8")
    return samples


def _fit_model(own: Sequence[Sample], inputs: tuple[str, ...]) -> _Fitted:
    """One model: the logistic score, then its isotonic map on out-of-fold scores."""
    x, y = _matrix(own, inputs)
    signed = [k in SIGNED_EVIDENCE for k in inputs]
    w, b = fit_logistic(x, y, signed=signed)
    # The isotonic map is fitted on scores of models that did not see the sample.
    fold = np.array([s.case % N_FOLDS for s in own])
    oof = np.empty(len(y))
    for f in range(N_FOLDS):
        m = fold == f
        wf, bf = fit_logistic(x[~m], y[~m], signed=signed)
        oof[m] = x[m] @ wf + bf
    kz, kp = fit_isotonic_map(oof, y, fold)
    return inputs, w, b, len(own), float(y.mean()), kz, kp


def _fittable(name: str, own: Sequence[Sample]) -> bool:
    ys = {s.hit for s in own}
    if len(own) < 30 or len(ys) < 2:
        print(f"{name}: {len(own)} samples, not fitted", file=sys.stderr)
        return False
    return True


def lf_band_cases(n_train: int) -> tuple[Case, ...]:
    """The training's added recordings with breathing inside the LF band (see
    :data:`TRAIN_LF_BREATHING`)."""
    ranges = replace(TRAIN_RANGES, breathing_rate_per_min=TRAIN_LF_BREATHING)
    return build_cases(ranges, round(TRAIN_LF_SHARE * n_train), TRAIN_LF_SEED)


def run_fit(n_train: int, table: Path, cache: Path | None = None, jobs: int = 1
            ) -> dict[str, object]:
    """Collect the training cohort, fit every model and write ``table``."""
    cases = build_cases(TRAIN_RANGES, n_train, TRAIN_SEED)
    extra = lf_band_cases(n_train)
    samples = _cached_collect(cases + extra, tuple(MODEL_INPUTS), cache, jobs)
    main = [s for s in samples if s.case < n_train]
    models = {}
    for name, inputs in MODEL_INPUTS.items():
        own = [s for s in main if s.feature == name]
        if _fittable(name, own):
            models[name] = _fit_model(own, inputs)
    lf_models = {}
    for name, inputs in LF_BAND_INPUTS.items():
        # The added LF-band recordings train the LF-band models alone.
        own = [s for s in samples if s.feature == name and breathing_in_lf_band(s.evidence)]
        if _fittable(f"{name} (LF band)", own):
            lf_models[name] = _fit_model(own, inputs)
    fit = {
        "date": datetime.date.today().isoformat(),
        "script": "python -m validation.calibration --fit",
        "method": f"logistic score (w >= 0, ridge {L2:g}), isotonic map ({N_FOLDS} folds)",
        "train_seed_first": TRAIN_SEED,
        "train_seed_last": TRAIN_SEED + n_train - 1,
        "train_cases": n_train,
        "lf_band_seed_first": TRAIN_LF_SEED,
        "lf_band_seed_last": TRAIN_LF_SEED + len(extra) - 1,
        "lf_band_cases": len(extra),
        "lf_band_breathing_per_min": TRAIN_LF_BREATHING,
        "train_samples": len(samples),
        "test_seed_first": TEST_SEED,
        "ranges": "validation.calibration.TRAIN_RANGES (test: TEST_RANGES)",
    }
    _write_table(models, lf_models, fit, table)
    return fit


# --------------------------------------------------------------------------- report

def reliability_bins(confidence: np.ndarray, hit: np.ndarray, n_bins: int = N_BINS
                     ) -> list[tuple[int, float, float]]:
    """(count, mean confidence, hit rate) of each equal-width bin of [0, 1].

    Bin k holds confidences in (k/n, (k+1)/n], the first also 0 (Guo et al. 2017, sec. 2).
    """
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    idx = np.clip(np.searchsorted(edges, confidence, side="left") - 1, 0, n_bins - 1)
    out = []
    for k in range(n_bins):
        m = idx == k
        count = int(m.sum())
        out.append((count, float(confidence[m].mean()) if count else math.nan,
                    float(hit[m].mean()) if count else math.nan))
    return out


def expected_calibration_error(confidence: Sequence[float], hit: Sequence[bool],
                               n_bins: int = N_BINS) -> float:
    """ECE = sum over bins of (n_b / n) |hit rate_b - mean confidence_b| (Guo et al. 2017)."""
    c = np.asarray(confidence, dtype=float)
    h = np.asarray(hit, dtype=float)
    if len(c) == 0:
        return math.nan
    return float(sum(n / len(c) * abs(acc - conf)
                     for n, conf, acc in reliability_bins(c, h, n_bins) if n))


def brier_score(confidence: Sequence[float], hit: Sequence[bool]) -> float:
    """Mean of (confidence - hit)^2 (Brier 1950)."""
    c = np.asarray(confidence, dtype=float)
    h = np.asarray(hit, dtype=float)
    return float(np.mean((c - h) ** 2))


CAUTION = ("Not a medical device; not a diagnosis. Simulated recordings only. "
           "Defer to clinicians and local regulation.")


def _diagram(name: str, conf: np.ndarray, hit: np.ndarray, ece: float, path: Path) -> None:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    d = feature_definition(name)
    tol = (f"{d.tolerance:g} % of truth" if d.tolerance_relative
           else f"{d.tolerance:g} {d.tolerance_unit}")
    bins = reliability_bins(conf, hit)
    fig, ax = plt.subplots(figsize=(5.0, 5.0), dpi=90)
    ax.plot([0, 1], [0, 1], color="0.6", lw=1, ls="--", label="perfect calibration")
    mids = (np.arange(N_BINS) + 0.5) / N_BINS
    xs = [m for (n, c, a), m in zip(bins, mids, strict=True) if n]
    accs = [a for n, c, a in bins if n]
    counts = [n for n, c, a in bins if n]
    ax.bar(xs, accs, width=1.0 / N_BINS, edgecolor="k", color="#8db3d9",
           label="share within tolerance")
    for x, a, n in zip(xs, accs, counts, strict=True):
        ax.text(x, a + 0.02, str(n), ha="center", fontsize=7)
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1.08)
    ax.set_xlabel("reported confidence")
    ax.set_ylabel("share within tolerance")
    ax.set_title(f"{name} (tolerance {tol})\nECE {ece:.3f}, {len(conf)} values, "
                 f"{N_BINS} bins", fontsize=9)
    ax.legend(loc="upper left", fontsize=7)
    fig.text(0.5, 0.015, CAUTION, ha="center", fontsize=7.5, wrap=True)
    fig.subplots_adjust(bottom=0.2)
    fig.savefig(path)
    plt.close(fig)


def report(samples: Sequence[Sample], features: Sequence[str], figures: Path | None
           ) -> list[dict[str, object]]:
    """Per feature: n, base rate, ECE, Brier, Brier of the base rate; diagrams when asked."""
    rows = []
    for name in features:
        own = [s for s in samples if s.feature == name]
        conf = np.array([s.confidence for s in own], dtype=float)
        hit = np.array([s.hit for s in own], dtype=float)
        if len(own) == 0:
            rows.append({"feature": name, "n": 0})
            continue
        base = float(hit.mean())
        ece = expected_calibration_error(conf, hit)
        row = {"feature": name, "n": len(own), "base_rate": base,
               "mean_confidence": float(conf.mean()), "ece": ece,
               "brier": brier_score(conf, hit), "brier_constant": base * (1.0 - base),
               "ece_heuristic": expected_calibration_error([s.heuristic for s in own], hit)}
        rows.append(row)
        if figures is not None:
            figures.mkdir(parents=True, exist_ok=True)
            _diagram(name, conf, hit, ece, figures / f"reliability_{name}.png")
    return rows


def format_rows(rows: Sequence[dict[str, object]]) -> str:
    out = [CAUTION, "",
           f"Test cohort; ECE over {N_BINS} equal-width bins; Brier vs the constant predictor "
           "(base rate).",
           "(base: share within tolerance; conf: mean confidence, above base when overconfident)",
           f"{'feature':26s} {'n':>5s} {'base':>6s} {'conf':>6s} {'ECE':>6s} {'Brier':>7s} "
           f"{'const':>7s} {'ECE heur.':>9s}  pass"]
    for r in rows:
        if not r["n"]:
            out.append(f"{r['feature']:26s}     0  (no values)  FAIL")
            continue
        ok = r["ece"] <= 0.05 and r["brier"] < r["brier_constant"]  # type: ignore[operator]
        out.append(f"{r['feature']:26s} {r['n']:5d} {r['base_rate']:6.3f} "
                   f"{r['mean_confidence']:6.3f} {r['ece']:6.3f} "
                   f"{r['brier']:7.4f} {r['brier_constant']:7.4f} {r['ece_heuristic']:9.3f}  "
                   f"{'ok' if ok else 'FAIL'}")
    return "\n".join(out)


def empty_check(n: int, seed: int) -> tuple[int, float]:
    """Empty supports: (cases, highest confidence of any reported feature)."""
    worst = 0.0
    for i in range(n):
        settings = SimulationSettings(duration_s=120.0, body_mass_kg=None, seed=seed + i,
                                      snr_db=float(np.random.default_rng(seed + i)
                                                   .uniform(0.0, 20.0)),
                                      n_channels=1 + 3 * (i % 2), floor_vibration=i % 3 == 0)
        _, result = _analyse(Case(settings, None))
        if result is None:
            continue
        for fv in result.feature_vector.features:
            if fv.value is not None and fv.name in MODEL_INPUTS:
                worst = max(worst, fv.confidence)
    return n, worst


def _progress(total: int) -> Callable[[int], None]:
    def show(i: int) -> None:
        if (i + 1) % 50 == 0 or i + 1 == total:
            print(f"  {i + 1}/{total} cases", file=sys.stderr, flush=True)
    return show


def _without_option(argv: list[str], names: tuple[str, ...]) -> list[str]:
    """``argv`` without the options ``names`` and their values (``--x v`` or ``--x=v``)."""
    out: list[str] = []
    skip = False
    for a in argv:
        if skip:
            skip = False
        elif a in names:
            skip = True
        elif not a.startswith(tuple(n + "=" for n in names)):
            out.append(a)
    return out


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m validation.calibration",
                                     description=__doc__.split("\n")[0])
    parser.add_argument("--fit", action="store_true", help="refit the calibration table")
    parser.add_argument("--n-train", type=int, default=4000)
    parser.add_argument("--report", action="store_true",
                        help="with --fit: then run the report on the new table")
    parser.add_argument("--n-test", type=int, default=1500)
    parser.add_argument("--quick", action="store_true", help="120 test cases")
    parser.add_argument("--figures", type=Path, default=Path("docs/calibration"))
    parser.add_argument("--json", type=Path, default=None)
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1,
                        help="worker processes for the analyses (default: one per CPU)")
    parser.add_argument("--cache", type=Path, default=None,
                        help="keep the training samples here (JSON) and reuse them")
    parser.add_argument("--breathing", type=float, nargs=2, metavar=("LO", "HI"),
                        default=None,
                        help="report on a slice: the test ranges with the breathing rate "
                             "drawn from LO-HI /min instead")
    parser.add_argument("--seed", type=int, default=TEST_SEED,
                        help=f"first test seed (default {TEST_SEED}); seeds that meet "
                             f"{TRAIN_SEED}-{TRAIN_SEED + TRAIN_SEED_SPAN - 1}, kept for "
                             "training, are refused")
    args = parser.parse_args(argv)
    if not 0 < args.n_train <= TRAIN_SEED_SPAN // 2:
        parser.error(f"--n-train must be 1-{TRAIN_SEED_SPAN // 2}")
    if args.fit:
        table = Path(__file__).resolve().parent.parent / "features" / "calibration_table.py"
        fit = run_fit(args.n_train, table, args.cache, args.jobs)
        print(json.dumps(fit, indent=1), flush=True)
        if not args.report:
            return 0
        # The table just written is read by a fresh interpreter (this one holds the old).
        again = [a for a in (argv if argv is not None else sys.argv[1:])
                 if a not in ("--fit", "--report")]
        again = _without_option(again, ("--n-train", "--cache"))
        return subprocess.call([sys.executable, "-m", "validation.calibration", *again])
    n = 120 if args.quick else args.n_test
    ranges = TEST_RANGES
    if args.breathing is not None:
        lo, hi = args.breathing
        if not 0.0 < lo < hi:
            parser.error("--breathing needs 0 < LO < HI")
        ranges = replace(TEST_RANGES, breathing_rate_per_min=(lo, hi))
        print(f"Slice: breathing {lo:g}-{hi:g} /min, the test ranges otherwise.")
    if args.seed < TRAIN_SEED + TRAIN_SEED_SPAN and args.seed + n > TRAIN_SEED:
        parser.error("--seed: these test cases would reuse training seeds")
    cases = build_cases(ranges, n, args.seed)
    samples = collect(cases, HEADLINE + ("pnn50_pct",), progress=_progress(n), jobs=args.jobs)
    rows = report(samples, HEADLINE + ("pnn50_pct",), None if args.quick else args.figures)
    print(format_rows(rows))
    n_empty, worst = empty_check(20, TEST_SEED + 50_000)
    print(f"\nEmpty supports: {n_empty} cases, highest confidence of a reported calibrated "
          f"feature {worst:.3f} (must stay below 0.5)")
    if args.json is not None:
        args.json.write_text(json.dumps(rows, indent=1), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
