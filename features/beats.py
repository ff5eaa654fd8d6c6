"""Wavelet-based beat detection in body-recoil (BCG) traces.

The detector finds the J wave of every heartbeat in a fused, conditioned
trace, refines each J time against an ensemble template to a fraction of a
sample, and says how much it trusts each beat.

References
----------
.. [1] Sadek I, Abdulrazak B. A comparison of three heart rate detection
   algorithms over ballistocardiogram signals. Biomedical Signal Processing
   and Control 70:103017, 2021. doi:10.1016/j.bspc.2021.103017
.. [2] Brueser C, Stadlthanner K, de Waele S, Leonhardt S. Adaptive
   beat-to-beat heart rate estimation in ballistocardiograms. IEEE
   Transactions on Information Technology in Biomedicine 15(5):778-786, 2011.
   doi:10.1109/TITB.2011.2128337
.. [3] Percival DB, Walden AT. Wavelet Methods for Time Series Analysis.
   Cambridge University Press, 2000. doi:10.1017/CBO9780511841040
.. [4] Inan OT, Migeotte PF, Park KS, et al. Ballistocardiography and
   seismocardiography: a review of recent advances. IEEE Journal of Biomedical
   and Health Informatics 19(4):1414-1427, 2015. doi:10.1109/JBHI.2014.2361732
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage, signal

from features._checks import check_sampling_rate, check_trace, check_usable
from features._correlate import BlockSpectra
from features._numeric import (
    clip,
    count_in,
    lane_median,
    mean,
    median_1d,
    quantile,
    robust_sd,
    vertex_offset,
    windows,
)
from features.errors import InvalidInputError
from features.filters import bridge_masked, polyphase_fir, rate_ratio
from features.limits import DEFAULT_RATE_RANGE_BPM, MAX_RATE_BPM, MIN_RATE_BPM
from features.wavelets import WAVELET, levels_for_band, swt_component

WORK_RATE_HZ = 125.0
"""Rate the detector works at; J times are refined to a fraction of a sample."""

BEAT_BAND_HZ = (1.5, 16.0)
"""Band of the J-wave complex kept by the wavelet stage (Inan et al. 2015)."""

RATE_RANGE_BPM = DEFAULT_RATE_RANGE_BPM
"""Plausible heart rates; they set the refractory period and search ranges."""

TEMPLATE_WINDOW_S = (-0.35, 0.45)
"""Template span around the J wave: H-I before it, K-L after it."""

ENVELOPE_WINDOW_S = 0.15
"""Smoothing of the energy envelope: about the length of the I-J-K complex."""

MIN_DURATION_S = 10.0

CORE_WINDOW_S = (0.15, 0.2)
"""Core of the complex (before, after J), I to the K-L junction, for beats closely followed."""

CORE_ACCEPT = 0.7
"""Correlation on the core that accepts a candidate whose long-window match is spoiled."""

PERIODIC_STRENGTH = 0.4
"""Envelope autocorrelation at the beat lag below which no dominant period is claimed.

A regular beat train keeps it well above 0.5 down to 0 dB in the beat band; an
irregular rhythm (atrial-fibrillation-like intervals) decorrelates the envelope
to about 0.2, and then the period would only mislead the refractory period and
the heart-rate cross-check.
"""
ENVELOPE_CLIP = 2.0
"""The envelope is clipped at this multiple of its 95th percentile for the period search.

Beat peaks of the energy envelope sit at or below the 95th percentile times about 1.5
(beat-to-beat amplitude changes of a few tens of percent), so they are kept whole; a
large swing of a few seconds (under 5 % of a record) is cut to the height of a beat.
Winsorising before an autocorrelation is common practice for robust periodicity."""
TREND_MIN_BEATS = 30
"""Fewest beats with a preceding interval from which the J-timing trend is fitted."""
TREND_Z = 2.0
"""The trend is removed only when its slope is this many standard errors from zero."""

#: Samples per block of the envelope autocorrelation, and blocks per FFT batch (37 500
#: samples, 253 lags: 2048-sample blocks 227 us, 8192 297 us, scipy 1.17).
_AC_BLOCK = 2048
_AC_GROUP = 64

LARGE_WAVE_FRACTION = 0.75
"""A wave at least this share of the largest counts as large (polarity, J choice).

J is the largest wave of a normal complex, with I about half of it (Inan et
al. 2015, Fig. 1; from memory); a lightly damped support can make K deeper
than J, but J still leads. The first wave within 75 % of the largest is J.
"""

RHYTHM_SIMILARITY = 0.7
"""Median correlation of the picked beats with their template that a regular rhythm needs.

Second road to "a heartbeat is present" (see ``_rhythm_evidence``), for sensors whose
complex the envelope cannot align (an oscillating seismocardiogram, a film sensor's
derivative response). On sign-symmetric, pink, breathing-only and mains-only traces the
picked "beats" correlate 0.41-0.58 with their self-made template (measured on 60-s traces,
seeds 0-2, and the project's empty-support cases); a correlation r is a beat-band
signal-to-noise ratio r^2 / (1 - r^2), so 0.7 is about 0 dB (common practice: r^2 is the
explained share of the epoch's variance).
"""
RHYTHM_CONSISTENCY = 0.7
"""Share of successive interval differences under ``RHYTHM_STEP`` needed for regularity.

Noise and the empty-support cases give 0.29-0.42 (the picks fall at random distances
beyond the refractory period); a sinus rhythm with respiratory arrhythmia stays near 1.
"""
RHYTHM_STEP = 0.2
"""Successive intervals that differ by under 20 % of the median interval count as regular.

Larger than sinus arrhythmia at rest (the deepest RSA in the cohort is 150 ms on 880 ms,
17 %); the same 20 % band that classic interval screening uses (Malik M et al.,
Pacing Clin Electrophysiol 12:1989, 20 % rule; from memory)."""
RHYTHM_AGREEMENT = 0.1
RHYTHM_MAX_SINUSOID = 0.8
"""Largest share of the template's energy that one sinusoid at the beat rate may hold.

A heartbeat is a short complex repeating once a period (the I-J-K complex lasts about
0.15 s; Inan et al. 2015), so its energy spreads over many harmonics of the rate; a
steady vibration (a motor, a rocking support) is close to one sinusoid and fits it
almost wholly. Measured: 0.90-1.00 for pure sines of 0.8-2 Hz, under 0.01 for the
simulator's complexes through every front end of ``simulation/front_ends.py`` and 0.0003
on the SensSmartTech chest recording."""
"""Largest relative gap between the picked beats' median interval and the envelope period."""

TWO_WAVE_SHAPE_GAP = 0.15
"""Drop in correlation between the mean waves of alternate picks that shows two waves a beat.

With one pick per beat, the mean epoch of the even picks and that of the odd picks are
two estimates of the same complex: their correlation equals, up to noise, that of two
halves of one class (split again by alternation). With two picks per beat the classes
hold different waves of the complex and correlate less. 0.15 is well above the spread
of such split-half correlations of 10 or more epochs at 0 dB (their standard error is
under 0.05; Fisher z of 0.9 with 10 epochs, common practice)."""
LEAD_WAVE_S = 0.34
"""How far before the matched wave a leading large wave is looked for, s: two waves of
one complex lie up to a third of a second apart (the I-J-K complex lasts about 0.15 s and
the later H-M waves reach about 0.5 s; Inan et al. 2015, Fig. 1; from memory); the
template window starts 0.35 s before J."""
TWO_WAVE_COMPARABLE = 0.4
"""The weaker class of picks must reach this share of the stronger's median size: two
comparable waves, not a beat and the noise between beats."""
TWO_WAVE_MIN_PICKS = 24
"""Fewest picks, over runs of at least 6, on which the two-wave test is made."""

GIVE_BACK_QUANTILE = 0.9
"""Quantile of the usable part's beat-band envelope that stands for a typical beat peak.

The envelope (0.15-s window) is near a beat's peak for some 15-30 % of the time at 30-200
bpm, so its 90th percentile lies among the beats' peaks, and unmasked motion must cover
a tenth of the usable record to raise it (a higher quantile follows the motion sooner)."""
GIVE_BACK_ENERGY = 2.0
"""Beat-band energy envelope, over ``GIVE_BACK_QUANTILE``, up to which a masked movement or
posture sample is given back (step 0): a wave up to 1.4 times a typical beat's size (our
choice; beat sizes vary by some tens of percent with breathing)."""
GIVE_BACK_GUARD_S = 0.5
"""Distance from any louder sample that a given-back sample keeps, s: about half a beat,
so that the complex of a beat next to a disturbance stays out (our choice)."""

EXTRA_BEAT_SPAN = 1.3
"""Span of two intervals, in local median intervals, under which the beat between them may
be an extra pick (step 7, ``_drop_extra``): regular rhythm varies by some tens of percent
from beat to beat, so two true intervals rarely sum to less (our choice)."""
MISSED_BEAT_SPAN = 1.6
"""Interval, in local median intervals, from which a beat may have been missed inside it
(step 7): a premature beat and its compensatory pause span about two intervals, so a span
under 1.6 is a pause and holds no beat; over it, one is looked for (our choice, between the
longest sinus pause of regular rhythm and two intervals)."""

EVIDENCE_THRESHOLD = 10.0
"""Coherence statistic above which a repeating, consistently signed beat is present.

Under the null of sign-symmetric noise the statistic has mean near 1 (see
``_coherence``); 10 leaves a wide margin for the overlap of neighbouring
epochs, which inflates it under the null.
"""


@dataclass(frozen=True)
class BeatDetection:
    """Beats found in a trace.

    Attributes
    ----------
    times_s
        J-wave times in seconds from the first sample, sorted.
    confidence
        Per-beat confidence in [0, 1] (template agreement and amplitude).
    correlation
        Per-beat Pearson correlation with the ensemble template.
    amplitude
        Per-beat projection on the unit-norm template, in the trace's unit.
    run_ids
        Beats that share an id lie in one unmasked run; intervals are formed
        only within a run.
    polarity
        +1 when the J wave is positive in the input, -1 when the trace is
        inverted, 0 when no beat evidence was found.
    template, template_fs_hz
        Ensemble template of the wavelet component (J at the centre, J
        positive) and its sampling rate.
    period_s
        Dominant beat period from the envelope autocorrelation (independent
        of the beat picking), or None.
    evidence
        Coherence statistic of the consistently signed beat waveform (about 1
        for noise); see ``EVIDENCE_THRESHOLD``.
    has_beats
        True when the evidence shows a repeating beat waveform (coherence) or a
        regular rhythm of similar beats (see ``_rhythm_evidence``); when False no
        beat is reported (``times_s`` is empty).
    n_candidates, n_rejected, n_recovered
        Template-match candidates, those rejected, beats added by the
        targeted search in long gaps.
    levels, wavelet
        Detail levels (at ``template_fs_hz``) and wavelet of the SWT stage.
    flags
        What the detector adapted or could not do.
    """

    times_s: NDArray[np.float64]
    confidence: NDArray[np.float64]
    correlation: NDArray[np.float64]
    amplitude: NDArray[np.float64]
    run_ids: NDArray[np.int64]
    polarity: int
    template: NDArray[np.float64]
    template_fs_hz: float
    period_s: float | None
    evidence: float
    has_beats: bool
    n_candidates: int
    n_rejected: int
    n_recovered: int
    levels: tuple[int, ...]
    wavelet: str
    flags: tuple[str, ...]


def detect_beats(
    trace: ArrayLike,
    fs_hz: float,
    *,
    usable: ArrayLike | None = None,
    rate_range_bpm: tuple[float, float] = RATE_RANGE_BPM,
    recoverable: ArrayLike | None = None,
    trace_median: float | None = None,
) -> BeatDetection:
    """Find the J wave of every heartbeat in a conditioned recoil trace.

    Parameters
    ----------
    trace
        1-D fused trace in kinetic form (force or acceleration), any unit,
        any polarity, at least ``MIN_DURATION_S`` long.
    fs_hz
        Sampling rate, Hz, within ``features.limits.MIN_FS_HZ`` to ``MAX_FS_HZ``.
    usable
        Boolean mask, True where the trace is free of artifacts. No beat is
        reported whose complex touches a masked sample.
    rate_range_bpm
        Plausible heart-rate range in beats per minute (default 30-200).
    recoverable
        Boolean mask, same length, True where a masked sample was masked only for body
        movement or a posture step (not clipping, a flat line or an empty support); such
        samples are given back to the detector where the beat band stays quiet (step 0).
    trace_median
        ``numpy.median(trace)`` when the caller has it (the engine computes it once for this
        stage and the breathing stage, :func:`features.respiration.breathing`); else computed
        here. Step 1 removes it before resampling.

    Returns
    -------
    BeatDetection

    Raises
    ------
    InvalidInputError
        On a trace that is not 1-D and finite, too short, a rate out of range,
        a mask of the wrong length or an invalid rate range.

    Notes
    -----
    0. Masked samples marked ``recoverable`` are given back where the beat-band
       component of the unbridged trace (step 2's levels) keeps its energy envelope
       (step 3's smoothing) under ``GIVE_BACK_ENERGY`` times the ``GIVE_BACK_QUANTILE``
       quantile of the usable part's, ``GIVE_BACK_GUARD_S`` away from any louder sample
       (flag): a posture
       step or a breathing swing many times the cardiac wave is masked as movement by
       its broadband energy, yet most of it lies below the beat band and the beats on
       either side of its core still time well.
    1. Resample to ``WORK_RATE_HZ`` with a polyphase anti-aliasing filter,
       so that the wavelet levels and all windows mean the same frequencies
       and durations at any input rate.
    2. Stationary wavelet transform (sym4, ``norm=True``: MODWT up to a
       shift) and reconstruction from the detail levels covering
       ``BEAT_BAND_HZ`` alone (MODWT multiresolution component, zero phase)
       [1]_, [3]_. Masked spans are bridged by a straight line before the
       transform (so a movement's energy cannot leak into the component next
       to it) and set to zero after it (widened by 0.1 s); the component is
       scaled by its robust standard deviation (``MAD_TO_SD`` x MAD).
    3. Energy envelope: the squared component smoothed over
       ``ENVELOPE_WINDOW_S``. Its autocorrelation gives the dominant beat
       period (first strong peak in the plausible lag range, claimed only
       when the autocorrelation there reaches ``PERIODIC_STRENGTH``), an
       estimate independent of beat picking in the spirit of [2]_; the
       envelope is first clipped at ``ENVELOPE_CLIP`` times its 95th
       percentile so that one large swing cannot own it. The refractory
       period is 0.4 of it (never shorter than 0.9 of the fastest plausible
       beat, which is the refractory period when no period is claimed).
       The period is then settled on the whole stretch before the beats are
       picked: when the envelope peaks come two a beat (``_second_waves``: the
       mean waves of alternate peaks differ in shape while each class agrees
       with itself, and both are of comparable size), the period and the
       refractory period are doubled (flag).
    4. Envelope peaks are candidates. Epochs of the signed component around
       the stronger half are averaged: the ratio of the mean epoch's energy
       to the mean epoch energy, times the number of epochs, is near 1 for
       sign-symmetric noise and large for a repeating beat. The sign of
       the first large wave of the mean epoch (at least
       ``LARGE_WAVE_FRACTION`` of the largest) gives the polarity: the J
       wave leads the complex, and a lightly damped support can ring after
       it with a deeper K trough than the J peak.
    5. Template matching, twice: a normalised cross-correlation trace of the
       component with the template (overlap-save FFT blocks of the component, transformed once
       for every template, and running sums, linear
       in length up to a log factor); its peaks, one per refractory period,
       are the candidates; the template is rebuilt as the median of the
       best-matching epochs and re-centred on its J wave (the first large
       positive wave). The polarity is checked once more on this sharper
       template; if it disagrees, the matching starts again flipped.
    6. Candidates are kept when their correlation reaches an adaptive level
       (0.55 times the median of the best matches, clipped to 0.3-0.5), or
       when the correlation of the template's core (``CORE_WINDOW_S``) reaches
       ``CORE_ACCEPT`` (a beat closely followed by the next shares the long
       window with it), and their amplitude a quarter of the median. J times are refined by
       parabolic interpolation of the correlation peak (sub-sample). The template match
       times the complex as a whole; when the beat's shape changes with its filling time
       (a short preceding interval shortens ejection, so the J wave moves within the
       complex, as in irregular rhythm and after ectopic beats), that time drifts from the
       J peak. So, after steps 7 and 8, the offset of each beat's J peak (3-point parabola
       within +/-2 working samples on the component) from its matched time is regressed on
       the beat's preceding interval (same run, at most the longest plausible period) by
       least squares over all beats (at least 30); when the slope is at least 2 standard
       errors from zero, the fitted trend (slope x (preceding interval - its mean)) is
       added to every beat with a preceding interval (flag). Only the trend is used, never
       the per-beat peak, whose noise the template match exists to avoid.
    7. Extra beats: a beat that splits one interval into two short ones
       (summing to under ``EXTRA_BEAT_SPAN`` local medians) goes when its match score is
       weak (under 0.75 of the median); with a settled period, after the slips below, a
       weak pick inside the compensatory pause after a premature beat goes too
       (``_drop_in_pauses``). Missed beats: where an interval is ``MISSED_BEAT_SPAN``
       or more local medians, the correlation trace is searched around each expected
       position with relaxed levels (0.8 of the acceptance correlation,
       0.2 of the median amplitude): a beat is expected there.
    8. Beats whose complex (-0.25 to +0.35 s around J) touches a masked
       sample are dropped; runs of beats are numbered between masked spans.
       The two-wave test of step 3 is made once more on the picks; when it
       holds, the class with the smaller waves (not J) is dropped (flag).
    9. A heartbeat is present when the coherence of step 4 reaches
       ``EVIDENCE_THRESHOLD`` or, for waveforms the envelope cannot align
       (an oscillating seismocardiogram, a film's derivative response), when
       the rhythm shows it: an envelope period, a median template correlation
       of at least ``RHYTHM_SIMILARITY``, regular intervals agreeing with the
       period (``_rhythm_evidence``), and a mean beat that is not one sinusoid
       (``RHYTHM_MAX_SINUSOID``: a steady vibration repeats too). Otherwise no
       beat is reported.

    Departures from the cited methods: [1] picks peaks on the MODWT
    component directly; here the component only feeds the envelope and the
    template match, which copes with inverted and ringing traces. [2]
    estimates each interval by fusing three estimators in a sliding window;
    here only the autocorrelation period is used, to set the refractory
    period and as the independent check of the heart rate.
    """
    x, mask = _validate(trace, fs_hz, usable, rate_range_bpm)
    flags: list[str] = []
    comp, fs_w, usable_w, levels = _beat_band(x, fs_hz, mask, recoverable, flags, trace_median)
    # the whole component when every sample is usable: no masked copy
    scale = robust_sd(comp if usable_w.all() else comp[usable_w]) if usable_w.any() else 0.0
    if not np.isfinite(scale) or scale <= 0.0:
        return _empty(fs_w, levels, flags + ["no_signal_in_beat_band"])
    w = _Work(comp=comp / scale, fs=fs_w, usable=usable_w, levels=levels,
              half=(int(round(-TEMPLATE_WINDOW_S[0] * fs_w)),
                    int(round(TEMPLATE_WINDOW_S[1] * fs_w))),
              reach_j=int(round(0.15 * fs_w)), min_period=60.0 / rate_range_bpm[1],
              max_period=60.0 / rate_range_bpm[0], flags=flags)
    settled = _settle_period(w)
    if isinstance(settled, BeatDetection):
        return settled
    period, dist, env, peaks = settled
    evidence, polarity, template = _first_template(w, env, peaks)
    # Block spectra and running sums of the component, shared by every match below.
    matcher = _Matcher(w.comp, w.half[0] + w.half[1] + 1)
    refined = _refine_template(w, matcher, polarity, template, dist)
    if refined is None:
        return _empty(fs_w, levels, flags + ["too_few_candidates"], period=period,
                      evidence=evidence)
    polarity, template = _lead_wave(w, *refined, period)
    comp = w.comp * polarity
    corr, amp = _match(matcher, polarity, template, w.half[0])
    picks = _pick(w, matcher, polarity, template, corr, amp, dist, period)
    beats, run_ids, period = _drop_second_waves(w, comp, picks.beats, amp, period)
    offset = _parabolic_offset(corr, beats)
    offset, trend = _preceding_interval_trend(comp, beats, offset, run_ids, fs_w, w.max_period)
    if trend is not None:
        flags.append("j_timing_trend_with_preceding_interval_removed")
    times = (beats + offset) / fs_w
    r = corr[beats]
    a = amp[beats] * scale
    has_beats = evidence >= EVIDENCE_THRESHOLD
    if not has_beats and _rhythm_evidence(times, run_ids, r, period) and \
            _sinusoid_share(comp, beats, fs_w, period) < RHYTHM_MAX_SINUSOID:
        has_beats = True
        flags.remove("no_repeating_beat_waveform")
        flags.append("beats_accepted_on_rhythm_evidence")
    conf = np.clip((r - 0.2) / 0.7, 0.0, 1.0) * np.clip(a / (0.5 * picks.amp_ref * scale),
                                                        0.0, 1.0)
    if not has_beats:
        # No heartbeat: the picks are noise, and no beat is reported from them.
        return _empty(fs_w, levels, flags, period=period, evidence=evidence)
    return BeatDetection(
        times_s=times.astype(np.float64),
        confidence=conf.astype(np.float64),
        correlation=r.astype(np.float64),
        amplitude=a.astype(np.float64),
        run_ids=run_ids,
        polarity=int(polarity),
        template=template * scale,
        template_fs_hz=fs_w,
        period_s=period,
        evidence=float(evidence),
        has_beats=bool(has_beats),
        n_candidates=picks.n_candidates,
        n_rejected=picks.n_rejected,
        n_recovered=picks.n_recovered,
        levels=levels,
        wavelet=WAVELET,
        flags=tuple(flags),
    )


# --- detector steps -------------------------------------------------------


@dataclass
class _Work:
    """What every step of the detector reads: the scaled component and its settings."""

    comp: NDArray[np.float64]
    """Beat-band component at the working rate, scaled to unit robust SD (input sign)."""
    fs: float
    usable: NDArray[np.bool_]
    levels: tuple[int, ...]
    half: tuple[int, int]
    """Template samples before and after the J wave."""
    reach_j: int
    """Samples either side of the centre searched for the J wave."""
    min_period: float
    max_period: float
    flags: list[str]


@dataclass(frozen=True)
class _Picks:
    """Accepted beats of step 6-8 (sample indices at the working rate) and their counts."""

    beats: NDArray[np.intp]
    amp_ref: float
    n_candidates: int
    n_rejected: int
    n_recovered: int


def _beat_band(x: NDArray[np.float64], fs_hz: float, mask: NDArray[np.bool_],
               recoverable: ArrayLike | None, flags: list[str], centre: float | None = None
               ) -> tuple[NDArray[np.float64], float, NDArray[np.bool_], tuple[int, ...]]:
    """Steps 0-2: the beat-band component at the working rate, zeroed where masked.

    Returns the (unscaled) component, the working rate, its usable mask and the levels.
    """
    xw, fs_w, usable_w = _to_work_rate(x, fs_hz, mask, centre)
    levels = levels_for_band(fs_w, BEAT_BAND_HZ)
    comp = swt_component(bridge_masked(xw, usable_w), levels=levels, wavelet=WAVELET)
    if recoverable is not None and not usable_w.all():
        candidate = _work_mask(mask | check_usable(recoverable, x.size, of="trace"), fs_hz,
                               fs_w, xw.size) & ~usable_w
        given = _give_back(xw, fs_w, levels, usable_w, candidate)
        if given is not None:
            # The unbridged component where it is quiet: bridging the shorter masked core
            # would join the levels on either side of a posture step by a steep ramp.
            quiet, raw = given
            comp = np.where(quiet, raw, comp)
            usable_w = usable_w | quiet
            flags.append("masked_movement_with_quiet_beat_band_given_back")
    return _zero_masked(comp, usable_w, int(round(0.1 * fs_w))), fs_w, usable_w, levels


def _settle_period(w: _Work) -> tuple[float | None, int, NDArray[np.float64],
                                      NDArray[np.intp]] | BeatDetection:
    """Step 3: the envelope, its period, the refractory distance and the envelope peaks.

    Returns ``(period_s, refractory distance in samples, envelope, peaks)``, or the empty
    detection when fewer than 4 envelope peaks are found.
    """
    fs_w, comp, half = w.fs, w.comp, w.half
    env = ndimage.uniform_filter1d(comp * comp, max(1, int(round(ENVELOPE_WINDOW_S * fs_w))))
    period = _envelope_period(env, fs_w, w.min_period, w.max_period)
    if period is None:
        w.flags.append("no_dominant_period")
    refractory = max(0.9 * w.min_period, 0.4 * period) if period is not None \
        else 0.9 * w.min_period
    dist = max(1, int(round(refractory * fs_w)))
    peaks, _ = signal.find_peaks(env, distance=dist)
    peaks = peaks[(peaks >= half[0]) & (peaks < comp.size - half[1])]
    if peaks.size < 4:
        return _empty(fs_w, w.levels, w.flags + ["too_few_candidates"], period=period)
    # Settle the period on the whole stretch before the beats are picked: envelope
    # peaks two a beat (a complex with two comparable waves) halve the envelope period.
    peak_runs = count_in(~w.usable, 0, peaks + 1).astype(np.int64)  # masked samples so far
    if period is not None and period * fs_w < 0.75 * _pair_span(peaks, peak_runs) and \
            _second_waves(comp, peaks, peak_runs, env, half,
                          int(w.min_period * fs_w)) is not None:
        period = 2.0 * period
        refractory = max(0.9 * w.min_period, 0.4 * period)
        dist = max(1, int(round(refractory * fs_w)))
        w.flags.append("envelope_period_doubled_two_waves_per_beat")
    return period, dist, env, peaks


def _first_template(w: _Work, env: NDArray[np.float64], peaks: NDArray[np.intp]
                    ) -> tuple[float, int, NDArray[np.float64]]:
    """Step 4: coherence evidence, polarity and the envelope-aligned first template."""
    strong = peaks[env[peaks] >= median_1d(env[peaks])]
    epochs = _epochs(w.comp, strong, w.half)
    evidence = _coherence(epochs)
    mean_epoch = mean(epochs, axis=0)
    polarity = _polarity(mean_epoch, w.half[0], w.reach_j)
    if not evidence >= EVIDENCE_THRESHOLD:
        w.flags.append("no_repeating_beat_waveform")
    return evidence, polarity, _recentre(polarity * mean_epoch, w.half[0], w.reach_j)


def _refine_template(w: _Work, matcher: _Matcher, polarity: int,
                     template: NDArray[np.float64], dist: int
                     ) -> tuple[int, NDArray[np.float64]] | None:
    """Step 5: two rounds of matching and median templates, the polarity checked once.

    Returns the polarity and the template, or None when a round finds under 4 candidates.
    """
    half, reach_j, n = w.half, w.reach_j, w.comp.size
    for attempt in range(2):
        for _ in range(2):
            corr, _ = _match(matcher, polarity, template, half[0])
            cand, _ = signal.find_peaks(corr, distance=dist, height=0.2)
            cand = cand[(cand >= half[0]) & (cand < n - half[1])]
            if cand.size < 4:
                return None
            best = cand[corr[cand] >= quantile(corr[cand], 0.5)]
            # numpy.median over the epochs, from one sort of each template sample's lane;
            # the lanes of the signed component (a sign change is exact and commutes
            # with the median), without a signed copy of the whole component
            lanes = _lanes(w.comp, best, half)
            if polarity < 0:
                np.negative(lanes, out=lanes)
            template = _recentre(lane_median(lanes), half[0], reach_j)
        # The aligned template is sharper than the envelope-aligned mean:
        # check the polarity on it once, and start again flipped if needed.
        if attempt == 0 and _polarity(template, half[0], reach_j) < 0:
            polarity = -polarity
            template = _recentre(-template, half[0], reach_j)
            w.flags.append("polarity_revised_on_template")
            continue
        break
    return polarity, template


def _lead_wave(w: _Work, polarity: int, template: NDArray[np.float64], period: float | None
               ) -> tuple[int, NDArray[np.float64]]:
    """Step 5, last: the fiducial on the leading large wave of a two-wave complex.

    A complex with two comparable waves: the template match may have locked on the later
    one. J leads the complex, so a large wave up to LEAD_WAVE_S earlier (and under half the
    period, so never the previous beat's) takes the fiducial.
    """
    if period is None:
        return polarity, template
    half, reach_j = w.half, w.reach_j
    back = min(int(round(min(LEAD_WAVE_S, 0.4 * period) * w.fs)), half[0] - 1)
    # A lightly damped support rings after J with waves as large as J, and the match
    # can settle on one of them with either sign; the first large wave of either
    # sign over the same reach is J and sets the polarity (ringing supports).
    first = _first_large(template, half[0], reach_j, back=back)
    if template[first] < 0:
        polarity, template = -polarity, -template
        w.flags.append("polarity_revised_on_leading_wave")
    lead = _recentre(template, half[0], reach_j, back=back)
    if not np.array_equal(lead, template):
        template = lead
        w.flags.append("fiducial_moved_to_leading_wave")
    return polarity, template


def _pick(w: _Work, matcher: _Matcher, polarity: int, template: NDArray[np.float64],
          corr: NDArray[np.float64], amp: NDArray[np.float64], dist: int,
          period: float | None) -> _Picks:
    """Steps 6-8: accepted candidates, extra and slipped picks, missed beats, masked ones."""
    fs_w, half, n = w.fs, w.half, w.comp.size
    cand, _ = signal.find_peaks(corr, distance=dist, height=0.2)
    cand = cand[(cand >= 1) & (cand < n - 1)]
    n_candidates = int(cand.size)
    top = corr[cand][corr[cand] >= quantile(corr[cand], 0.5)]
    accept = clip(0.55 * median_1d(top), 0.3, 0.5)
    amp_ref = median_1d(amp[cand][corr[cand] >= accept]) if np.any(
        corr[cand] >= accept) else median_1d(amp[cand])
    # A beat followed closely by the next one (fast irregular rhythm) shares the long
    # template window with it; judge it again on the core of the complex alone.
    core = (half[0] - int(round(CORE_WINDOW_S[0] * fs_w)),
            half[0] + int(round(CORE_WINDOW_S[1] * fs_w)) + 1)
    corr_core = _match_at(matcher, polarity, template[core[0]:core[1]], half[0] - core[0],
                          cand)
    matched = (corr[cand] >= accept) | (corr_core >= max(accept, CORE_ACCEPT))
    keep = matched & (amp[cand] >= 0.25 * amp_ref)
    beats = cand[keep]
    n_rejected = n_candidates - int(beats.size)

    scores = _Scores(corr, amp, fs_w)
    beats = _drop_extra(beats, corr, amp, fs_w, scores)
    if period is not None:
        beats, n_slipped = _repair_slips(beats, corr, amp, fs_w, accept, scores)
        if n_slipped:
            w.flags.append("slipped_beat_pairs_replaced")
        paused = _drop_in_pauses(beats, corr, amp, fs_w, scores)
        if paused.size < beats.size:
            # With the pause's pick gone, a pick that split the pause in two is judged
            # against its true neighbours.
            beats = _drop_extra(paused, corr, amp, fs_w, scores)
    beats, n_recovered = _recover_missed(beats, corr, amp, fs_w, 0.8 * accept,
                                         0.2 * amp_ref, dist, w.usable)
    inside = _complex_usable(beats, w.usable, fs_w)
    return _Picks(beats=beats[inside], amp_ref=amp_ref, n_candidates=n_candidates,
                  n_rejected=n_rejected, n_recovered=n_recovered)


def _drop_second_waves(w: _Work, comp: NDArray[np.float64], beats: NDArray[np.intp],
                       amp: NDArray[np.float64], period: float | None
                       ) -> tuple[NDArray[np.intp], NDArray[np.int64], float | None]:
    """Step 8, last: run ids, and the second wave of each complex dropped when picked.

    Returns the beats, their run ids and the period (doubled when it was the waves').
    """
    fs_w = w.fs
    run_ids = count_in(~w.usable, 0, beats + 1).astype(np.int64)  # masked samples so far
    second = _second_waves(comp, beats, run_ids, amp, w.half, int(w.min_period * fs_w),
                           None if period is None else period * fs_w)
    if second is not None:
        beats, run_ids = beats[~second], run_ids[~second]
        w.flags.append("second_wave_of_each_complex_dropped")
        same = run_ids[1:] == run_ids[:-1]
        if period is not None and same.any() and \
                period * fs_w < 0.75 * median_1d(np.diff(beats)[same]):
            period = 2.0 * period  # the envelope period was that of the waves
            w.flags.append("envelope_period_doubled_two_waves_per_beat")
    return beats, run_ids, period


# --- validation -----------------------------------------------------------


def _validate(
    trace: ArrayLike,
    fs_hz: float,
    usable: ArrayLike | None,
    rate_range_bpm: tuple[float, float],
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    fs_hz = check_sampling_rate(fs_hz)
    x = check_trace(trace, name="trace", fs_hz=fs_hz, min_duration_s=MIN_DURATION_S)
    lo, hi = rate_range_bpm
    if not (MIN_RATE_BPM <= lo < hi <= MAX_RATE_BPM):
        raise InvalidInputError(
            "rate_range_bpm", f"`rate_range_bpm` must be increasing within "
            f"{MIN_RATE_BPM:g}-{MAX_RATE_BPM:g} bpm; got {rate_range_bpm}.",
        )
    return x, check_usable(usable, x.size, of="trace")


# --- kernels --------------------------------------------------------------


def _to_work_rate(
    x: NDArray[np.float64], fs_hz: float, mask: NDArray[np.bool_], centre: float | None = None
) -> tuple[NDArray[np.float64], float, NDArray[np.bool_]]:
    up, down = rate_ratio(WORK_RATE_HZ, fs_hz)
    if (up, down) == (1, 1):
        xw = x.copy()
    else:
        # scipy's own default design (``polyphase_fir``), made once per rate pair
        xw = signal.resample_poly(x - (median_1d(x) if centre is None else centre), up, down,
                                  window=polyphase_fir(up, down))
    fs_w = fs_hz * up / down
    return xw, fs_w, _work_mask(mask, fs_hz, fs_w, xw.size)


def _work_mask(mask: NDArray[np.bool_], fs_hz: float, fs_w: float, n_w: int
               ) -> NDArray[np.bool_]:
    """A working sample is usable only where every input sample near it is."""
    bad = ~mask
    if not bad.any():
        return np.ones(n_w, dtype=bool)
    spread = max(1, int(np.ceil(fs_hz / fs_w)))
    bad = ndimage.binary_dilation(bad, iterations=spread)
    idx = np.minimum(np.round(np.arange(n_w) * fs_hz / fs_w).astype(np.int64), mask.size - 1)
    out: NDArray[np.bool_] = ~bad[idx]
    return out


def _give_back(xw: NDArray[np.float64], fs_w: float, levels: tuple[int, ...],
               usable: NDArray[np.bool_], candidate: NDArray[np.bool_]
               ) -> tuple[NDArray[np.bool_], NDArray[np.float64]] | None:
    """The quiet part of ``candidate`` (step 0) and the unbridged component; None if none."""
    if not candidate.any() or usable.sum() < MIN_DURATION_S * fs_w:
        return None
    raw = swt_component(xw, levels=levels, wavelet=WAVELET)
    env = ndimage.uniform_filter1d(raw * raw, max(1, int(round(ENVELOPE_WINDOW_S * fs_w))))
    level = quantile(env[usable], GIVE_BACK_QUANTILE)
    if not level > 0.0:
        return None
    guard = 2 * int(round(GIVE_BACK_GUARD_S * fs_w)) + 1
    loud = ndimage.maximum_filter1d((env > GIVE_BACK_ENERGY * level).astype(np.int8), guard)
    back = candidate & (loud == 0)
    return (back, raw) if back.any() else None


def _zero_masked(comp: NDArray[np.float64], usable: NDArray[np.bool_], widen: int) -> NDArray[
        np.float64]:
    if usable.all():
        return comp
    bad = ndimage.binary_dilation(~usable, iterations=widen)
    out = comp.copy()
    out[bad] = 0.0
    return out


def _envelope_period(
    env: NDArray[np.float64], fs: float, min_period: float, max_period: float
) -> float | None:
    # Winsorise: a swing that escaped the mask (a posture change tens of times the
    # cardiac wave) would otherwise own the autocorrelation; beat peaks stay whole.
    env = np.minimum(env, ENVELOPE_CLIP * quantile(env, 0.95))
    ac = _autocorrelation(env - mean(env), int(max_period * fs) + 2)
    if ac[0] <= 0:
        return None
    ac = ac / ac[0]
    lo, hi = int(min_period * fs), min(int(max_period * fs), ac.size - 2)
    if hi <= lo + 2:
        return None
    seg = ac[lo : hi + 1]
    pk, _ = signal.find_peaks(seg)
    if pk.size == 0:
        return None
    best = seg[pk].max()
    if best < PERIODIC_STRENGTH:
        return None
    first = pk[seg[pk] >= 0.7 * best][0]
    return float((lo + first + _vertex(seg, first)) / fs)


def _autocorrelation(e: NDArray[np.float64], lags: int) -> NDArray[np.float64]:
    """``sum_i e[i] e[i + k]`` for ``0 <= k < lags`` (zero beyond the end), linear in length.

    The series is cut into blocks of ``_AC_BLOCK`` samples; each block's spectrum is
    multiplied by the conjugate spectrum of itself extended by ``lags`` samples, and the
    products of all blocks are summed before one inverse transform (the transform is
    linear, so this is the sum of the blocks' lag sums). Only the first lags are ever
    needed, so no transform of the whole series is made.
    """
    n = e.size
    block = _AC_BLOCK
    nb = -(-n // block)
    padded = np.zeros(nb * block + lags)
    padded[:n] = e
    nfft = scipy.fft.next_fast_len(block + lags, real=True)
    heads = padded[: nb * block].reshape(nb, block)
    tails = windows(padded, block + lags, block)
    total = np.zeros(nfft // 2 + 1, dtype=np.complex128)
    for a in range(0, nb, _AC_GROUP):
        spec = scipy.fft.rfft(tails[a : a + _AC_GROUP], nfft, axis=1)
        spec *= np.conj(scipy.fft.rfft(heads[a : a + _AC_GROUP], nfft, axis=1))
        total += spec.sum(axis=0)
    ac: NDArray[np.float64] = scipy.fft.irfft(total, nfft)[:lags]
    return ac


def _vertex(y: NDArray[np.float64], i: int) -> float:
    if i <= 0 or i >= y.size - 1:
        return 0.0
    return float(vertex_offset(y[i - 1], y[i], y[i + 1]))


def _epochs(comp: NDArray[np.float64], centres: NDArray[np.intp], half: tuple[int, int]) -> NDArray[
        np.float64]:
    offs = np.arange(-half[0], half[1] + 1)
    idx = centres[:, None] + offs[None, :]
    out: NDArray[np.float64] = comp[idx]
    return out


def _lanes(comp: NDArray[np.float64], centres: NDArray[np.intp], half: tuple[int, int]
           ) -> NDArray[np.float64]:
    """``_epochs(comp, centres, half).T`` gathered C-contiguous: one row per epoch sample."""
    offs = np.arange(-half[0], half[1] + 1)
    out: NDArray[np.float64] = comp[offs[:, None] + centres[None, :]]
    return out


def _coherence(epochs: NDArray[np.float64]) -> float:
    """Number of epochs times the energy share of their mean (about 1 for noise).

    Each epoch is scaled to unit energy first, so a few large ones (a
    movement that escaped the mask) cannot dominate. For k epochs of
    sign-symmetric noise the mean of k unit vectors has expected squared norm
    1/k, so the statistic is near 1; a waveform that repeats with a
    consistent sign gives a value that grows with k.
    """
    norms = np.sqrt(np.sum(epochs * epochs, axis=1))
    ok = norms > 0
    if ok.sum() < 2:
        return 0.0
    unit = epochs[ok] / norms[ok, None]
    mean_unit = mean(unit, axis=0)
    return float(ok.sum() * np.sum(mean_unit * mean_unit))


def _rhythm_evidence(times: NDArray[np.float64], run_ids: NDArray[np.int64],
                     corr: NDArray[np.float64], period: float | None) -> bool:
    """True when the picked beats form a regular rhythm of similar beats (any waveform).

    Three pieces of evidence that hold for any sensor, all required: periodicity (the
    envelope autocorrelation claimed a period, ``PERIODIC_STRENGTH``), beat-to-beat
    similarity and signal-to-noise (median template correlation at least
    ``RHYTHM_SIMILARITY``), and a regular rhythm that agrees with that period (successive
    intervals within ``RHYTHM_STEP`` of each other for ``RHYTHM_CONSISTENCY`` of them, and a
    median interval within ``RHYTHM_AGREEMENT`` of the period). The envelope period is found
    without picking beats (Brueser et al. 2011, [2]_), so a self-made template cannot
    supply it. An irregular rhythm fails here and needs the coherence statistic.
    """
    if period is None or times.size < 10 or median_1d(corr) < RHYTHM_SIMILARITY:
        return False
    same = run_ids[1:] == run_ids[:-1]
    iv = np.diff(times)[same]
    if iv.size < 8:
        return False
    med = median_1d(iv)
    steady = float(np.mean(np.abs(np.diff(iv)) < RHYTHM_STEP * med)) if iv.size > 1 else 0.0
    return steady >= RHYTHM_CONSISTENCY and abs(med / period - 1.0) <= RHYTHM_AGREEMENT


def _second_waves(comp: NDArray[np.float64], picks: NDArray[np.intp],
                  run_ids: NDArray[np.int64], amp: NDArray[np.float64], half: tuple[int, int],
                  min_period: int, period_n: float | None = None) -> NDArray[np.bool_] | None:
    """Mask of picks that are the second wave of a complex, or None (one pick a beat).

    Within each run (at least 6 picks) the picks are split by parity. The mean epochs of
    the two classes are compared with each other and, as a reference for the noise, each
    with itself split by alternation again. When the classes correlate
    ``TWO_WAVE_SHAPE_GAP`` less than the split halves, every other pick is another wave
    of the same complex: the class with the larger median amplitude holds J (the largest
    wave, Inan et al. 2015 [4]_) and the other is dropped, provided the weaker class is
    comparable (``TWO_WAVE_COMPARABLE``) and a pair of picks spans a plausible beat (at
    least ``min_period`` samples).

    With the settled beat period ``period_n`` (samples) given, picks that come steadily
    twice a period (median interval within ``RHYTHM_AGREEMENT`` of half of it, successive
    intervals regular as in ``_rhythm_evidence``) are two picks a beat whatever their
    shapes: on a lightly damped support the ring after J repeats the complex's shape, so
    the shape test cannot see it, and the ring is weaker than J by its decay, so the
    comparability test does not apply either. Then, largest match amplitude first, each
    kept pick drops the other picks of its run within 0.7 of the period (a missed or
    extra pick would swap alternating classes, so no parity is used).
    """
    cls = np.full(picks.size, -1)
    for run in np.unique(run_ids):
        idx = np.flatnonzero(run_ids == run)
        if idx.size >= 6:
            cls[idx] = np.arange(idx.size) % 2
    inside = (picks >= half[0]) & (picks < comp.size - half[1])
    ok = (cls >= 0) & inside
    if int(ok.sum()) < TWO_WAVE_MIN_PICKS:
        return None
    ep = _epochs(comp, picks[ok], half)
    c = cls[ok]
    means = [mean(ep[c == k], axis=0) for k in (0, 1)]
    between = _pearson(means[0], means[1])
    within = min(_pearson(mean(ep[c == k][0::2], axis=0), mean(ep[c == k][1::2], axis=0))
                 for k in (0, 1))
    if period_n is not None and _twice_a_period(picks, run_ids, period_n) and \
            _pair_span(picks, run_ids) >= min_period:
        return _weaker_within(picks, run_ids, amp[picks], 0.7 * period_n)
    if between > within - TWO_WAVE_SHAPE_GAP:
        return None
    size = [median_1d(amp[picks[ok & (cls == k)]]) for k in (0, 1)]
    keep = int(size[1] > size[0])
    if size[1 - keep] < TWO_WAVE_COMPARABLE * size[keep] or \
            _pair_span(picks, run_ids) < min_period:
        return None
    first_wave: NDArray[np.bool_] = (cls >= 0) & (cls != keep)
    return first_wave


def _twice_a_period(picks: NDArray[np.intp], run_ids: NDArray[np.int64],
                    period_n: float | None) -> bool:
    """True when the picks come steadily at half the settled period (see _second_waves)."""
    if period_n is None:
        return False
    iv = np.diff(picks)[run_ids[1:] == run_ids[:-1]].astype(float)
    if iv.size < 8:
        return False
    med = median_1d(iv)
    steady = float(np.mean(np.abs(np.diff(iv)) < RHYTHM_STEP * med))
    return abs(2.0 * med / period_n - 1.0) <= RHYTHM_AGREEMENT and steady >= RHYTHM_CONSISTENCY


def _weaker_within(picks: NDArray[np.intp], run_ids: NDArray[np.int64],
                   size: NDArray[np.float64], span: float) -> NDArray[np.bool_]:
    """Mask of picks dropped by a larger pick of the same run less than ``span`` away."""
    dropped = np.zeros(picks.size, dtype=bool)
    for i in np.argsort(-size, kind="stable"):
        if dropped[i]:
            continue
        lo = np.searchsorted(picks, picks[i] - span, side="right")
        hi = np.searchsorted(picks, picks[i] + span, side="left")
        near = np.arange(lo, hi)
        near = near[(near != i) & (run_ids[near] == run_ids[i])]
        dropped[near] = True
    return dropped


def _pair_span(picks: NDArray[np.intp], run_ids: NDArray[np.int64]) -> float:
    """Median span of two consecutive intervals within a run, samples (0 when none)."""
    same = run_ids[2:] == run_ids[:-2]
    return median_1d((picks[2:] - picks[:-2])[same]) if same.any() else 0.0


def _pearson(a: NDArray[np.float64], b: NDArray[np.float64]) -> float:
    a = a - mean(a)
    b = b - mean(b)
    den = float(np.sqrt(np.sum(a * a) * np.sum(b * b)))
    return float(np.sum(a * b) / den) if den > 0 else 0.0


def _sinusoid_share(comp: NDArray[np.float64], beats: NDArray[np.intp], fs: float,
                    period: float | None) -> float:
    """Share of the mean beat's energy (about its mean) in the best sinusoid at 1/period.

    The mean of the component over one period centred on each beat, fitted by least
    squares with cos and sin at the beat frequency.
    """
    if period is None or beats.size < 3:
        return 1.0
    half = int(round(period * fs / 2.0))
    ok = beats[(beats >= half) & (beats + half <= comp.size)]
    if ok.size < 3 or half < 2:
        return 1.0
    seg = mean(_epochs(comp, ok, (half, half - 1)), axis=0)
    seg = seg - mean(seg)
    energy = float(np.sum(seg * seg))
    if energy <= 0.0:
        return 1.0
    w = 2.0 * np.pi * np.arange(-half, half) / (period * fs)
    basis = np.stack((np.cos(w), np.sin(w)), axis=1)
    coef, *_ = np.linalg.lstsq(basis, seg, rcond=None)
    fit = basis @ coef
    return float(np.sum(fit * fit) / energy)


def _first_large(epoch: NDArray[np.float64], centre: int, reach: int,
                 sign: float = 0.0, back: int | None = None) -> int:
    """Index of the earliest extreme reaching ``LARGE_WAVE_FRACTION`` of the largest.

    With ``sign`` 0 both signs count (peaks of the magnitude); with +1 only
    maxima. The J wave is the first large wave of the complex: whatever a
    lightly damped support adds rings after it. The search spans ``back``
    samples before the centre (``reach`` when None) and ``reach`` after it.
    """
    back = reach if back is None else back
    lo, hi = max(1, centre - back), min(epoch.size - 1, centre + reach + 1)
    core = epoch[lo:hi]
    mag = np.abs(core) if sign == 0.0 else np.maximum(sign * core, 0.0)
    pk, _ = signal.find_peaks(np.concatenate(([0.0], mag, [0.0])))
    pk = pk - 1
    if pk.size == 0 or mag.max() <= 0:
        return centre
    big = pk[mag[pk] >= LARGE_WAVE_FRACTION * mag.max()]
    return int(lo + big[0])


def _polarity(mean_epoch: NDArray[np.float64], centre: int, reach: int) -> int:
    i = _first_large(mean_epoch, centre, reach)
    return 1 if mean_epoch[i] >= 0 else -1


def _recentre(template: NDArray[np.float64], centre: int, reach: int,
              back: int | None = None) -> NDArray[np.float64]:
    shift = _first_large(template, centre, reach, sign=1.0, back=back) - centre
    k = -shift % template.size  # numpy.roll(template, -shift), without its wrapper
    out = np.concatenate((template[template.size - k:], template[: template.size - k]))
    if shift > 0:
        out[-shift:] = 0.0
    elif shift < 0:
        out[:-shift] = 0.0
    return out


class _Matcher:
    """What every template match of one component shares (steps 5 and 6).

    The block spectra of the component (:class:`features._correlate.BlockSpectra`), the
    running sums of it and of its square (with a leading 0), and the window spread
    (``sqrt`` of the window's sum of squares about its mean) for each template length and
    centre already used. The spread does not depend on the sign of the trace (``s1 * s1``
    is the same for ``-s1``), so the matches of either polarity share it.
    """

    def __init__(self, comp: NDArray[np.float64], max_len: int) -> None:
        self.n = comp.size
        self.comp = comp
        self.spectra = BlockSpectra(comp, max_len)
        # Both running sums in one pass, as the real and imaginary parts of one complex
        # running sum: each part is added as its own float, so the same numbers as two
        # cumsums, and numpy's running sum, one element after another, waits on each
        # addition's latency where the complex one carries two additions per step
        # (numpy 2.4, 37 500 samples: 151 against 227 us with the copies).
        both = np.empty(self.n, dtype=np.complex128)
        both.real = comp
        np.square(comp, out=both.imag)
        np.cumsum(both, out=both)
        self.c1 = np.zeros(self.n + 1)
        self.c2 = np.zeros(self.n + 1)
        self.c1[1:] = both.real
        self.c2[1:] = both.imag
        self._spread: dict[tuple[int, int], NDArray[np.float64]] = {}

    def spread(self, centre: int, m: int) -> NDArray[np.float64]:
        """Root of the sum of squares about the mean over ``[i - centre, i - centre + m)``."""
        key = (centre, m)
        if key not in self._spread:
            self._spread[key] = _spread_from_sums(_window_sums(self.c1, centre, m),
                                                  _window_sums(self.c2, centre, m), m)
        return self._spread[key]


def _spread_from_sums(s1: NDArray[np.float64], s2: NDArray[np.float64], m: int
                      ) -> NDArray[np.float64]:
    """``sqrt`` of a window's sum of squares about its mean, from its sum and sum of squares
    over ``m`` samples (0 where rounding leaves it below 0)."""
    return np.sqrt(np.maximum(s2 - s1 * s1 / m, 0.0))


def _unit_template(template: NDArray[np.float64]) -> NDArray[np.float64] | None:
    """The template less its mean, scaled to unit norm; None for a flat one."""
    t = template - mean(template)
    norm = np.sqrt(np.sum(t * t))
    return None if norm <= 0 else t / norm


def _ratio(num: NDArray[np.float64], den: NDArray[np.float64]) -> NDArray[np.float64]:
    """``num / den`` clipped to [-1, 1], and 0 where the spread is nil (under 1e-6: the
    component is scaled to unit robust SD before matching)."""
    corr = np.zeros(num.size)
    np.divide(num, den, out=corr, where=den > 1e-6)
    np.clip(corr, -1.0, 1.0, out=corr)
    return corr


def _match(matcher: _Matcher, sign: int, template: NDArray[np.float64], centre: int
           ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Normalised cross-correlation and template amplitude at every sample.

    The trace matched is ``sign`` times the component of ``matcher``. Index ``i`` of both
    outputs describes the template placed with its sample ``centre`` (the J wave) on
    sample ``i`` of the trace; the correlation's denominator comes from running sums over
    the same window.
    """
    t = _unit_template(template)
    if t is None:
        z = np.zeros(matcher.n)
        return z, z
    num = matcher.spectra.correlate(t, centre)
    if sign < 0:
        np.negative(num, out=num)
    return _ratio(num, matcher.spread(centre, t.size)), num


def _match_at(matcher: _Matcher, sign: int, template: NDArray[np.float64], centre: int,
              at: NDArray[np.intp]) -> NDArray[np.float64]:
    """The correlation of :func:`_match` at the samples ``at`` only.

    The numerator is a direct dot product of each window (the trace zero outside) with the
    template instead of the blocks' FFT, so it can differ from :func:`_match`'s in the last
    bits; the denominator is the same arithmetic on the same running sums. For a template
    read only at the candidates (the core match of step 6), this skips a transform, the
    spread and the division over the whole trace.
    """
    n = matcher.n
    t = _unit_template(template)
    if t is None or at.size == 0:
        return np.zeros(at.size)
    m = t.size
    idx = at[:, None] + np.arange(-centre, m - centre)[None, :]
    inside = (idx >= 0) & (idx < n)
    windows = np.where(inside, matcher.comp[np.clip(idx, 0, n - 1)], 0.0)
    num = windows @ t
    if sign < 0:
        np.negative(num, out=num)
    hi = np.minimum(at + (m - centre), n)
    lo = np.maximum(at - centre, 0)
    return _ratio(num, _spread_from_sums(matcher.c1[hi] - matcher.c1[lo],
                                         matcher.c2[hi] - matcher.c2[lo], m))


def _window_sums(csum: NDArray[np.float64], centre: int, m: int) -> NDArray[np.float64]:
    """``csum[hi] - csum[lo]`` for the window ``[i - centre, i - centre + m)`` at every ``i``.

    ``csum`` is a running sum with a leading zero (length ``n + 1``); the window
    is clipped to ``[0, n]``. Built from slices instead of gathered indices.
    """
    n = csum.size - 1
    ahead = m - centre  # hi = i + ahead, lo = i - centre, both clipped
    k = max(0, min(n, n + 1 - ahead))  # hi is csum[i + ahead] below k, csum[n] from k
    j = min(centre, n)  # lo is csum[0] below j, csum[i - centre] from j
    out = np.empty(n)
    # One subtraction per stretch where each end is a slice or a constant: the same
    # csum[hi] - csum[lo] per sample, without two full-length temporaries.
    for a, b in ((0, min(j, k)), (min(j, k), max(j, k)), (max(j, k), n)):
        if b <= a:
            continue
        hi = csum[a + ahead : b + ahead] if b <= k else (csum[n] if a >= k else None)
        lo = csum[0] if b <= j else (csum[a - centre : b - centre] if a >= j else None)
        assert hi is not None and lo is not None  # stretches are split at j and k
        np.subtract(hi, lo, out=out[a:b])
    return out


def _local_median(values: NDArray[np.float64], half: int = 5) -> NDArray[np.float64]:
    if values.size == 0:
        return values
    out: NDArray[np.float64] = ndimage.median_filter(values, size=2 * half + 1, mode="nearest")
    return out


def _scored(beats: NDArray[np.intp], corr: NDArray[np.float64], amp: NDArray[np.float64],
            fs: float) -> tuple[NDArray[np.float64], NDArray[np.bool_], NDArray[np.float64]]:
    """Each pick's match score, whether it is strong, and the reference interval at it.

    The score is the correlation times the amplitude relative to the median (capped at
    1.5); a pick is strong at 0.75 of the median score or more; the reference is the local
    median interval between strong beats (``_reference_interval``), s.
    """
    score = corr[beats] * np.minimum(amp[beats] / median_1d(amp[beats]), 1.5)
    strong = score >= 0.75 * median_1d(score)
    return score, strong, _reference_interval(beats, strong, fs)


class _Scores:
    """:func:`_scored` of one match (``corr``, ``amp`` at rate ``fs``), the last picks' kept:
    the clean-up steps of step 7 mostly hand each other the picks unchanged."""

    def __init__(self, corr: NDArray[np.float64], amp: NDArray[np.float64], fs: float) -> None:
        self.corr, self.amp, self.fs = corr, amp, fs
        self._last: tuple[NDArray[np.intp], tuple[NDArray[np.float64], NDArray[np.bool_],
                                                  NDArray[np.float64]]] | None = None

    def __call__(self, beats: NDArray[np.intp]
                 ) -> tuple[NDArray[np.float64], NDArray[np.bool_], NDArray[np.float64]]:
        if self._last is None or not np.array_equal(self._last[0], beats):
            self._last = (beats.copy(), _scored(beats, self.corr, self.amp, self.fs))
        return self._last[1]


def _drop_in_pauses(beats: NDArray[np.intp], corr: NDArray[np.float64],
                    amp: NDArray[np.float64], fs: float, scores: _Scores | None = None
                    ) -> NDArray[np.intp]:
    """Drop weak picks inside the compensatory pause after a premature beat.

    A premature beat (its interval shorter than the reference by more than
    ``RHYTHM_STEP`` of it) is followed by a pause that holds no beat: a pick inside it is
    noise or a ring wave that the pause left room for. A pick goes when the beat before it
    is premature, the span between its neighbours is ``EXTRA_BEAT_SPAN`` to
    ``MISSED_BEAT_SPAN`` reference intervals (shorter spans are ``_drop_extra``'s; a
    longer one may hold a missed beat), it is weak (score under 0.75 of the median, as in
    ``_drop_extra``) and it scores below both neighbours. The beat after the pause, and
    the normal beat before a premature one, are not inside a pause and stay.
    """
    if beats.size < 5:
        return beats
    score, strong, ref = (scores or _Scores(corr, amp, fs))(beats)
    iv = np.diff(beats) / fs
    # Pick j (2 .. n-2): intervals iv[j-2] (into the beat before it), iv[j-1], iv[j].
    j = np.arange(2, beats.size - 1)
    m = ref[j]
    span = iv[j - 1] + iv[j]
    premature = iv[j - 2] < (1.0 - RHYTHM_STEP) * ref[j - 1]
    lowest = (score[j] < score[j - 1]) & (score[j] < score[j + 1])
    pause = (span >= EXTRA_BEAT_SPAN * m) & (span < MISSED_BEAT_SPAN * m)
    drop = j[premature & pause & lowest & ~strong[j]]
    return np.delete(beats, drop) if drop.size else beats


def _drop_extra(beats: NDArray[np.intp], corr: NDArray[np.float64], amp: NDArray[np.float64],
                fs: float, scores: _Scores | None = None) -> NDArray[np.intp]:
    """Drop weak beats that split one interval into two short ones.

    A beat is suspect when its two intervals sum to less than ``EXTRA_BEAT_SPAN`` reference
    intervals and the shorter is under 0.6 of it; it goes only when its match
    score is under 0.75 of the median score, so a true premature beat or a
    run of short irregular intervals with good matches stays. The reference
    is the local median interval between strong beats (score at least 0.75
    of the median), so a run of extra beats cannot drag it down.
    """
    scored = scores or _Scores(corr, amp, fs)
    for _ in range(3):
        if beats.size < 5:
            return beats
        _, strong, ref = scored(beats)
        iv = np.diff(beats) / fs
        before, after = iv[:-1], iv[1:]
        m = ref[1:-1]
        suspect = ((before + after) < EXTRA_BEAT_SPAN * m) & (np.minimum(before, after) < 0.6 * m)
        drop = np.flatnonzero(suspect & ~strong[1:-1]) + 1
        if drop.size == 0:
            return beats
        beats = np.delete(beats, drop)
    return beats


def _repair_slips(beats: NDArray[np.intp], corr: NDArray[np.float64],
                  amp: NDArray[np.float64], fs: float, level: float,
                  scores: _Scores | None = None) -> tuple[NDArray[np.intp], int]:
    """Replace two picks that stand where one beat should by the best match between.

    On a lightly damped support the match is nearly as good one ring period from J, and
    the picks can slip: one beat's J is missed while a ring wave of the previous beat and
    one of this beat are picked (three intervals where two belong). Two picks i, i + 1 are
    such a slip when the span from pick i - 1 to pick i + 2 is 1.8-2.2 reference intervals
    (``_reference_interval``) and each of the three intervals differs from the reference
    by more than ``RHYTHM_STEP`` of it; they are replaced by the largest correlation within
    ``RHYTHM_STEP`` reference intervals of the span's middle, when it reaches ``level``.
    Used only when the envelope settled a period (a regular rhythm); premature beats with
    their compensatory pause span three intervals and are left alone.
    """
    if beats.size < 6:
        return beats, 0
    ref = (scores or _Scores(corr, amp, fs))(beats)[2] * fs
    out = beats
    replaced = 0
    # Picks i = 1, 2, ... in order, a replacement shifting the later ones down by one; the
    # test is made for every position at once and made again only after a replacement.
    slipped = _slip_positions(out, ref)
    i = 1
    while (hits := np.flatnonzero(slipped[i - 1:])).size:
        i += int(hits[0])
        a, d, m = int(out[i - 1]), int(out[i + 2]), float(ref[i])
        mid, reach = (a + d) / 2.0, RHYTHM_STEP * m
        lo, hi = int(np.ceil(mid - reach)), int(np.floor(mid + reach)) + 1
        j = lo + int(np.argmax(corr[lo:hi]))
        if corr[j] >= level:
            out = np.concatenate((out[:i], np.asarray([j], dtype=beats.dtype), out[i + 2:]))
            replaced += 1
            slipped = _slip_positions(out, ref)
        i += 1
    return out, replaced


def _slip_positions(picks: NDArray[np.intp], ref: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Entry ``i - 1`` is True when picks ``i, i + 1`` are a slip (``_repair_slips``).

    The span from pick ``i - 1`` to ``i + 2`` is 1.8-2.2 reference intervals ``ref[i]``
    (samples) and each of its three intervals is off the reference by more than
    ``RHYTHM_STEP`` of it.
    """
    a, b, c, d = picks[:-3], picks[1:-2], picks[2:-1], picks[3:]
    m = ref[1: picks.size - 2]
    step = RHYTHM_STEP * m
    off = (np.abs((b - a) - m) > step) & (np.abs((c - b) - m) > step) & \
        (np.abs((d - c) - m) > step)
    span = d - a
    slipped: NDArray[np.bool_] = (1.8 * m <= span) & (span <= 2.2 * m) & off
    return slipped


def _reference_interval(beats: NDArray[np.intp], strong: NDArray[np.bool_],
                        fs: float) -> NDArray[np.float64]:
    """Local median interval between consecutive strong beats, at every beat."""
    sb = beats[strong]
    if sb.size < 3:
        iv = np.diff(beats) / fs
        return np.full(beats.size, median_1d(iv) if iv.size else 1.0)
    siv = np.diff(sb) / fs
    # Consecutive strong beats may have a weak one between them: count such a
    # pair's interval only when no beat lies between (adjacent in ``beats``).
    pos = np.flatnonzero(strong)
    adjacent = np.diff(pos) == 1
    if adjacent.sum() >= 2:
        siv, mids = siv[adjacent], (sb[:-1][adjacent] + sb[1:][adjacent]) / 2
    else:
        mids = (sb[:-1] + sb[1:]) / 2
    local = _local_median(siv)
    return np.interp(beats, mids, local)


def _recover_missed(
    beats: NDArray[np.intp],
    corr: NDArray[np.float64],
    amp: NDArray[np.float64],
    fs: float,
    level: float,
    min_amp: float,
    dist: int,
    usable: NDArray[np.bool_],
) -> tuple[NDArray[np.intp], int]:
    if beats.size < 4:
        return beats, 0
    iv = np.diff(beats) / fs
    med = _local_median(iv)
    gaps = np.flatnonzero(iv >= MISSED_BEAT_SPAN * med)
    added: list[int] = []
    for g in gaps:
        a, b = int(beats[g]), int(beats[g + 1])
        if not usable[a:b].all():
            continue
        k = int(round((b - a) / (med[g] * fs)))
        if k < 2:
            continue
        step = (b - a) / k
        reach = int(0.25 * med[g] * fs)
        for j in range(1, k):
            p = int(round(a + j * step))
            lo, hi = max(a + dist // 2, p - reach), min(b - dist // 2, p + reach)
            if hi <= lo:
                continue
            i = lo + int(np.argmax(corr[lo:hi]))
            if corr[i] >= level and amp[i] >= min_amp and 0 < i < corr.size - 1 \
                    and corr[i] >= corr[i - 1] and corr[i] >= corr[i + 1]:
                added.append(i)
    if not added:
        return beats, 0
    return np.unique(np.concatenate((beats, np.asarray(added, dtype=beats.dtype)))), len(added)


def _complex_usable(beats: NDArray[np.intp], usable: NDArray[np.bool_], fs: float) -> NDArray[
        np.bool_]:
    """True where no masked sample lies within -0.25..+0.35 s of the J wave.

    The window is clipped to the recording, so a beat whose J wave is inside
    the record but whose complex runs past an end is kept.
    """
    before, after = int(round(0.25 * fs)), int(round(0.35 * fs))
    lo_c = np.clip(beats - before, 0, usable.size)
    hi_c = np.clip(beats + after + 1, 0, usable.size)
    ok: NDArray[np.bool_] = count_in(~usable, lo_c, hi_c) == 0
    return ok


def _preceding_interval_trend(
    comp: NDArray[np.float64],
    beats: NDArray[np.intp],
    offset: NDArray[np.float64],
    run_ids: NDArray[np.int64],
    fs_w: float,
    max_period_s: float,
) -> tuple[NDArray[np.float64], float | None]:
    """Remove the trend of (J peak - matched time) with the preceding interval (step 6).

    Returns the corrected offsets (samples) and the slope (s of J shift per s of
    preceding interval), or the offsets unchanged and None when no significant trend.
    """
    n = beats.size
    t = (beats + offset) / fs_w
    prev = np.full(n, np.nan)
    if n > 1:
        same = run_ids[1:] == run_ids[:-1]
        gaps = np.diff(t)
        prev[1:] = np.where(same & (gaps <= max_period_s), gaps, np.nan)
    w = np.arange(-2, 3)
    inside = (beats >= 3) & (beats < comp.size - 3)
    k = np.argmax(comp[np.clip(beats[:, None] + w[None, :], 0, comp.size - 1)], axis=1)
    peak = np.clip(beats + w[k], 1, comp.size - 2)
    den = comp[peak - 1] - 2.0 * comp[peak] + comp[peak + 1]
    good = inside & (k > 0) & (k < w.size - 1) & (den < 0) & np.isfinite(prev)
    if int(good.sum()) < TREND_MIN_BEATS:
        return offset, None
    j_peak = w[k[good]] + _parabolic_offset(comp, peak[good])
    x = prev[good]
    y = (j_peak - offset[good]) / fs_w
    xm, ym = float(x.mean()), float(y.mean())
    sxx = float(np.sum((x - xm) ** 2))
    if sxx <= 0.0:
        return offset, None
    slope = float(np.sum((x - xm) * (y - ym)) / sxx)
    resid = y - ym - slope * (x - xm)
    se = float(np.sqrt(np.sum(resid**2) / (x.size - 2) / sxx))
    if not abs(slope) >= TREND_Z * se:
        return offset, None
    shift = slope * np.where(np.isfinite(prev), prev - xm, 0.0)
    return offset + shift * fs_w, slope


def _parabolic_offset(y: NDArray[np.float64], idx: NDArray[np.intp]) -> NDArray[np.float64]:
    if idx.size == 0:
        return np.zeros(0)
    return np.clip(vertex_offset(y[idx - 1], y[idx], y[idx + 1]), -0.5, 0.5)


def _empty(
    fs_w: float,
    levels: tuple[int, ...],
    flags: list[str],
    *,
    period: float | None = None,
    evidence: float = 0.0,
) -> BeatDetection:
    z = np.zeros(0)
    return BeatDetection(
        times_s=z, confidence=z, correlation=z, amplitude=z, run_ids=np.zeros(0, dtype=np.int64),
        polarity=0, template=z, template_fs_hz=fs_w, period_s=period, evidence=evidence,
        has_beats=False, n_candidates=0, n_rejected=0, n_recovered=0, levels=levels,
        wavelet=WAVELET, flags=tuple(flags),
    )
