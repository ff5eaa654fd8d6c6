"""Frequency-domain heart-rate variability: Lomb-Scargle PSD and the Task Force bands.

VLF, LF, HF and total power, LF/HF, normalised units and peak frequencies, on an NN
series as described in :mod:`features.variability`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features.catalogue import NONNEGATIVE, REF_LOMB, REF_TASK_FORCE, FeatureDefinition
from features.errors import InvalidInputError
from features.intervals import validate_interval_series
from features.spectral import lomb_scargle_power
from features.variability._shared import _SHORT_TERM_S, _entry

__all__ = [
    "CATALOGUE", "FrequencyDomainResult", "frequency_domain", "lomb_psd_ms2_per_hz",
]

# Task Force (1996) band edges, Hz.
_VLF_BAND_HZ = (0.0033, 0.04)
_LF_BAND_HZ = (0.04, 0.15)
_HF_BAND_HZ = (0.15, 0.4)
# Task Force (1996), "Frequency domain methods": about 1 min for HF, 2 min for
# LF; VLF from recordings of 5 min or less is "a dubious measure".
_MIN_DURATION_S = {"vlf": 300.0, "lf": 120.0, "hf": 60.0}
# Frequency grid: points per 1/T, T the segment length. VanderPlas (2018)
# suggests 5-10 per peak width to locate peaks; band integrals of the
# smooth periodogram need fewer: with 4, a sinusoid anywhere in a band
# integrated to within 2 % of A^2/2 at every frequency we tried, at half
# the cost of 8.
_OVERSAMPLING = 4
# A segment with less data than this fraction of its span is skipped.
_MIN_SEGMENT_COVERAGE = 0.5


@dataclass(frozen=True)
class FrequencyDomainResult:
    """Task Force (1996) frequency-domain measures from a Lomb-Scargle PSD.

    Attributes
    ----------
    vlf_power_ms2, lf_power_ms2, hf_power_ms2
        Integral of the PSD over each band.
    total_power_ms2
        Integral from the low VLF edge to the high HF edge.
    lf_hf_ratio
        ``lf_power / hf_power``.
    lf_nu, hf_nu
        Normalised units: ``100 * LF / (total - VLF)`` and likewise for HF,
        with ``total - VLF`` the integral from the VLF high edge to the HF
        high edge (so it needs no VLF-length recording).
    lf_peak_hz, hf_peak_hz
        Frequency of the PSD maximum inside LF and HF.
    vlf_band_hz, lf_band_hz, hf_band_hz
        Bands used, Hz.
    frequencies_hz, psd_ms2_per_hz
        The (segment-averaged) one-sided PSD on its frequency grid; empty
        when no spectrum could be formed.
    n_intervals
        NN intervals used.
    n_segments
        Segments averaged (see Notes of :func:`frequency_domain`).
    segment_s
        Length of each segment, seconds.
    duration_s
        Time covered by the NN intervals of the segments used.
    confidence
        ``min(1, duration_s / 300) * coverage``, ``coverage`` being
        ``duration_s`` over the total span of the segments used.
    flags
        Reasons for None values, e.g. ``"lf_needs_120_s"``.
    """

    vlf_power_ms2: float | None
    lf_power_ms2: float | None
    hf_power_ms2: float | None
    total_power_ms2: float | None
    lf_hf_ratio: float | None
    lf_nu: float | None
    hf_nu: float | None
    lf_peak_hz: float | None
    hf_peak_hz: float | None
    vlf_band_hz: tuple[float, float]
    lf_band_hz: tuple[float, float]
    hf_band_hz: tuple[float, float]
    frequencies_hz: tuple[float, ...]
    psd_ms2_per_hz: tuple[float, ...]
    n_intervals: int
    n_segments: int
    segment_s: float
    duration_s: float
    confidence: float
    flags: tuple[str, ...]



def _check_band(band: Sequence[float], field: str) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in band)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(
            field, f"`{field}` must be a pair (low, high) in Hz; got {band!r}."
        ) from exc
    if not (math.isfinite(low) and math.isfinite(high) and 0 < low < high):
        raise InvalidInputError(field, f"`{field}` must satisfy 0 < low < high (Hz); got {band!r}.")
    return low, high


def lomb_psd_ms2_per_hz(
    times_s: NDArray[np.float64],
    values_ms: NDArray[np.float64],
    frequencies_hz: NDArray[np.float64],
    mean_step_s: float,
) -> NDArray[np.float64]:
    """One-sided Lomb-Scargle PSD scaled so its integral is the variance.

    ``PSD(f) = 2 * P(f) * mean_step_s`` where ``P`` is
    :func:`scipy.signal.lombscargle` (default "power" normalisation, computed
    by :func:`features.spectral.lomb_scargle_power`) of the mean-removed
    values and ``mean_step_s`` the mean sampling step (the mean NN interval
    in seconds). For even sampling ``P`` equals the classical
    periodogram ``|sum y exp(-i w t)|**2 / N`` at the Fourier frequencies, so
    the integral of the PSD from 0 to the Nyquist frequency ``1 / (2 dt)``
    is the variance (Parseval); a sinusoid of amplitude A integrates to
    ``A**2 / 2`` over its peak.
    """
    centred = values_ms - values_ms.mean()
    power = lomb_scargle_power(times_s, centred, frequencies_hz)
    return np.asarray(2.0 * power * mean_step_s, dtype=float)


def _band_integral(
    freqs: NDArray[np.float64], psd: NDArray[np.float64], band: tuple[float, float]
) -> float:
    inside = (freqs >= band[0] - 1e-12) & (freqs <= band[1] + 1e-12)
    f, p = freqs[inside], psd[inside]
    if f.size < 2:
        return 0.0
    return float(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(f)))


def _min_duration_s(name: str, band: tuple[float, float], default: tuple[float, float]) -> float:
    """Task Force minimum, lengthened in proportion when a band starts lower."""
    return _MIN_DURATION_S[name] * max(1.0, default[0] / band[0])


def frequency_domain(
    times_s: ArrayLike,
    nn_ms: ArrayLike,
    *,
    vlf_band_hz: tuple[float, float] = _VLF_BAND_HZ,
    lf_band_hz: tuple[float, float] = _LF_BAND_HZ,
    hf_band_hz: tuple[float, float] = _HF_BAND_HZ,
    segment_s: float = _SHORT_TERM_S,
) -> FrequencyDomainResult:
    """Task Force (1996) spectral measures from a Lomb-Scargle periodogram.

    Parameters
    ----------
    times_s, nn_ms
        The NN series, as for :func:`features.variability.time_domain`.
    vlf_band_hz, lf_band_hz, hf_band_hz
        ``(low, high)`` band edges in Hz, ordered and not overlapping
        (``vlf_high <= lf_low``, ``lf_high <= hf_low``). Defaults are the Task
        Force bands 0.0033-0.04, 0.04-0.15 and 0.15-0.4 Hz. A caller may pass
        the breathing band as ``hf_band_hz`` (and narrow ``lf_band_hz`` to
        keep them apart).
    segment_s
        Length of the segments averaged for long recordings, seconds, >= 60.
        Default 300, the Task Force short-term standard.

    Returns
    -------
    FrequencyDomainResult
        A band measure whose minimum length is not met is None with a flag
        such as ``"lf_needs_120_s"``.

    Raises
    ------
    InvalidInputError
        If the series breaks a rule of
        :func:`features.intervals.validate_interval_series`, a band is not
        ``0 < low < high``, bands overlap or are out of order, or
        ``segment_s < 60``.

    Notes
    -----
    1. The span from the first interval's start beat to the last end beat,
       ``T``, is cut into ``k = max(1, floor(T / segment_s))`` equal segments
       (each between ``segment_s`` and ``2 * segment_s`` long when
       ``k > 1``). Segments whose NN intervals cover less than half their
       span are skipped (flag ``"sparse_segments_skipped"``).
    2. In each segment the NN values at their end-beat times are mean-removed
       and passed to the Lomb-Scargle periodogram (the power of
       :func:`scipy.signal.lombscargle`, computed by the factorised kernel of
       :mod:`features.spectral`), on a grid from the VLF
       low edge to the HF high edge with step ``1 / (4 L)`` (``L`` the
       segment length) plus the band edges.
    3. Scaling: ``PSD = 2 * P * mean(NN) / 1000`` (ms^2/Hz), so that the
       integral of the PSD over frequency equals the variance (Parseval; see
       :func:`lomb_psd_ms2_per_hz`). Segment PSDs are averaged with weights
       equal to the time their NN intervals cover (Welch's averaging applied
       to Lomb-Scargle periodograms).
    4. Band powers are trapezoid integrals of the PSD over each band (ms^2);
       total power spans the VLF low edge to the HF high edge.
    5. Minimum durations (time covered by NN intervals, and segment length),
       from the Task Force: HF about 1 min, LF about 2 min; VLF from 5 min or
       less "should be avoided", so VLF and total power need 300 s. For a
       band starting below its default low edge, the minimum grows in
       proportion (the Task Force asks for about ten cycles of the band's
       lowest frequency).
    6. Peaks are the grid frequencies of the PSD maximum inside LF and HF;
       ``"lf_peak_at_band_edge"`` (or HF) flags a maximum on an edge, i.e. no
       interior peak.

    Lomb-Scargle works on the uneven beat times directly, avoiding the
    interpolation and resampling that bias HRV spectra (Clifford &
    Tarassenko 2005). Gaps are allowed but they leak power
    across frequencies; ``confidence`` falls with the fraction of the span
    not covered.

    References
    ----------
    .. [1] Task Force of the ESC and NASPE, "Heart rate variability:
       standards of measurement, physiological interpretation and clinical
       use", Circulation 93(5):1043-1065, 1996. doi:10.1161/01.CIR.93.5.1043
    .. [2] N. R. Lomb, "Least-squares frequency analysis of unequally spaced
       data", Astrophysics and Space Science 39:447-462, 1976.
       doi:10.1007/BF00648343
    .. [3] J. D. Scargle, "Studies in astronomical time series analysis. II.
       Statistical aspects of spectral analysis of unevenly spaced data",
       The Astrophysical Journal 263:835-853, 1982. doi:10.1086/160554
    .. [4] G. D. Clifford, L. Tarassenko, "Quantifying errors in spectral
       estimates of HRV due to beat replacement and resampling", IEEE
       Transactions on Biomedical Engineering 52(4):630-638, 2005.
    .. [5] J. T. VanderPlas, "Understanding the Lomb-Scargle periodogram",
       The Astrophysical Journal Supplement Series 236:16, 2018.
       doi:10.3847/1538-4365/aab766
    """
    times, nn = validate_interval_series(times_s, nn_ms)
    vlf = _check_band(vlf_band_hz, "vlf_band_hz")
    lf = _check_band(lf_band_hz, "lf_band_hz")
    hf = _check_band(hf_band_hz, "hf_band_hz")
    if vlf[1] > lf[0]:
        raise InvalidInputError(
            "lf_band_hz",
            f"`lf_band_hz` must start at or above the VLF high edge {vlf[1]} Hz; got {lf!r}.",
        )
    if lf[1] > hf[0]:
        raise InvalidInputError(
            "hf_band_hz",
            f"`hf_band_hz` must start at or above the LF high edge {lf[1]} Hz; got {hf!r}. "
            "Pass a narrower `lf_band_hz` to move the HF band down.",
        )
    if (
        isinstance(segment_s, bool)
        or not isinstance(segment_s, int | float)
        or not (math.isfinite(segment_s) and segment_s >= 60)
    ):
        raise InvalidInputError(
            "segment_s", f"`segment_s` must be a number of seconds >= 60; got {segment_s!r}."
        )
    return _frequency_domain(times, nn, vlf, lf, hf, float(segment_s))


def _segment_spectra(
    times: NDArray[np.float64],
    nn: NDArray[np.float64],
    f_low: float,
    f_high: float,
    edges_hz: Sequence[float],
    segment_s: float,
) -> tuple[NDArray[np.float64], NDArray[np.float64], int, float, float, float, bool]:
    """Average Lomb-Scargle PSD over equal segments (Notes 1-3)."""
    start = float(times[0] - nn[0] / 1000.0)
    span = float(times[-1]) - start
    k = max(1, int(span // segment_s))
    length = span / k
    seg = np.minimum(((times - start) / length).astype(np.int64), k - 1)
    step = 1.0 / (_OVERSAMPLING * length)
    grid = np.arange(f_low, f_high + 0.5 * step, step)
    grid = np.unique(np.concatenate([grid[grid <= f_high], np.asarray(edges_hz, dtype=float)]))
    total = np.zeros(grid.size)
    weight_sum = 0.0
    used = 0
    skipped = False
    bounds = np.searchsorted(seg, np.arange(k + 1))
    for s in range(k):
        lo, hi = int(bounds[s]), int(bounds[s + 1])
        covered = float(nn[lo:hi].sum()) / 1000.0
        if hi - lo < 3 or covered < _MIN_SEGMENT_COVERAGE * length:
            skipped = True
            continue
        if np.ptp(nn[lo:hi]) == 0.0:
            psd = np.zeros(grid.size)
        else:
            psd = lomb_psd_ms2_per_hz(times[lo:hi], nn[lo:hi], grid, covered / (hi - lo))
        total += covered * psd
        weight_sum += covered
        used += 1
    if used == 0:
        return grid, np.zeros(0), 0, length, 0.0, 0.0, skipped
    return grid, total / weight_sum, used, length, weight_sum, used * length, skipped


def _empty_frequency(
    n: int,
    bands: tuple[tuple[float, float], tuple[float, float], tuple[float, float]],
    segment_s: float,
    flags: list[str],
) -> FrequencyDomainResult:
    vlf, lf, hf = bands
    return FrequencyDomainResult(
        None, None, None, None, None, None, None, None, None,
        vlf, lf, hf, (), (), n, 0, segment_s, 0.0, 0.0, tuple(flags),
    )  # fmt: skip


def _frequency_domain(
    times: NDArray[np.float64],
    nn: NDArray[np.float64],
    vlf: tuple[float, float],
    lf: tuple[float, float],
    hf: tuple[float, float],
    segment_s: float,
) -> FrequencyDomainResult:
    n = nn.size
    flags: list[str] = []
    bands = (vlf, lf, hf)
    if n < 3:
        flags.append("too_few_intervals")
        return _empty_frequency(n, bands, segment_s, flags)
    edges = (*vlf, *lf, *hf)
    freqs, psd, n_seg, length, covered, span, skipped = _segment_spectra(
        times, nn, vlf[0], hf[1], edges, segment_s
    )
    if skipped:
        flags.append("sparse_segments_skipped")
    if n_seg == 0:
        flags.append("no_segment_with_enough_data")
        return _empty_frequency(n, bands, segment_s, flags)
    available = min(length, covered)

    def band_power(
        name: str, band: tuple[float, float], default: tuple[float, float]
    ) -> float | None:
        need = _min_duration_s(name, band, default)
        if available + 1e-9 < need:
            flags.append(f"{name}_needs_{math.ceil(need - 1e-6)}_s")
            return None
        return _band_integral(freqs, psd, band)

    vlf_p = band_power("vlf", vlf, _VLF_BAND_HZ)
    lf_p = band_power("lf", lf, _LF_BAND_HZ)
    hf_p = band_power("hf", hf, _HF_BAND_HZ)
    total = None
    if vlf_p is None:
        flags.append("total_power_needs_vlf")
    else:
        total = _band_integral(freqs, psd, (vlf[0], hf[1]))
    lf_hf = lf_nu = hf_nu = None
    if lf_p is not None and hf_p is not None:
        if hf_p > 0:
            lf_hf = lf_p / hf_p
        else:
            flags.append("lf_hf_ratio_undefined_zero_hf")
        above_vlf = _band_integral(freqs, psd, (vlf[1], hf[1]))
        if above_vlf > 0:
            lf_nu = 100.0 * lf_p / above_vlf
            hf_nu = 100.0 * hf_p / above_vlf
        else:
            flags.append("normalised_units_undefined_zero_power")

    def peak(name: str, band: tuple[float, float], power: float | None) -> float | None:
        if power is None:
            return None
        inside = np.flatnonzero((freqs >= band[0] - 1e-12) & (freqs <= band[1] + 1e-12))
        if power <= 0 or inside.size == 0:
            flags.append(f"{name}_peak_undefined_zero_power")
            return None
        best = inside[int(np.argmax(psd[inside]))]
        if best in (inside[0], inside[-1]):
            flags.append(f"{name}_peak_at_band_edge")
        return float(freqs[best])

    lf_peak = peak("lf", lf, lf_p)
    hf_peak = peak("hf", hf, hf_p)
    coverage = min(1.0, covered / span) if span > 0 else 0.0
    return FrequencyDomainResult(
        vlf_power_ms2=vlf_p,
        lf_power_ms2=lf_p,
        hf_power_ms2=hf_p,
        total_power_ms2=total,
        lf_hf_ratio=lf_hf,
        lf_nu=lf_nu,
        hf_nu=hf_nu,
        lf_peak_hz=lf_peak,
        hf_peak_hz=hf_peak,
        vlf_band_hz=vlf,
        lf_band_hz=lf,
        hf_band_hz=hf,
        frequencies_hz=tuple(freqs.tolist()),
        psd_ms2_per_hz=tuple(psd.tolist()),
        n_intervals=n,
        n_segments=n_seg,
        segment_s=float(length),
        duration_s=float(covered),
        confidence=float(min(1.0, covered / _SHORT_TERM_S) * coverage),
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------- catalogue


def _power_text(band: tuple[float, float], name: str) -> str:
    return (f"Lomb-Scargle power of the NN series in {band[0]:g}-{band[1]:g} Hz "
            f"(needs {_MIN_DURATION_S[name]:g} s).")


_FD = "frequency_domain"
CATALOGUE: tuple[FeatureDefinition, ...] = (
    _entry("vlf_power_ms2", _FD, "vlf_power_ms2", "ms2", _power_text(_VLF_BAND_HZ, "vlf"),
           NONNEGATIVE, REF_LOMB, ("vlf",)),
    _entry("lf_power_ms2", _FD, "lf_power_ms2", "ms2", _power_text(_LF_BAND_HZ, "lf"),
           NONNEGATIVE, REF_LOMB, ("lf",)),
    _entry("hf_power_ms2", _FD, "hf_power_ms2", "ms2", _power_text(_HF_BAND_HZ, "hf"),
           NONNEGATIVE, REF_LOMB, ("hf",)),
    _entry("lf_hf_ratio", _FD, "lf_hf_ratio", None, "LF power divided by HF power.",
           NONNEGATIVE, REF_TASK_FORCE, ("lf_hf_ratio", "lf", "hf")),
)
"""Catalogue entries of the frequency-domain family (see :mod:`features.catalogue`)."""
