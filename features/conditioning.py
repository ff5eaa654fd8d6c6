"""Input conditioning: validation, SI units, kinetic form, mains-hum removal, static load.

``condition_channels`` is the first stage of the engine. It turns raw sensor traces
(force, acceleration, velocity or displacement, in any supported unit or in ADC
counts) into float64 traces in SI units and in kinetic form (force in N or
acceleration in m/s^2), with the mains hum and the static/slow part removed. For
force channels it also reports the static load, the supported mass, a slow load
trace and an occupancy estimate, which the artifact stage uses.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features._checks import check_sampling_rate
from features._numeric import median_1d
from features.errors import InvalidInputError
from features.filters import (
    FloatArray,
    apply_frequency_response,
    block_factor,
    block_means,
    lowpass,
    raised_cosine_lowpass,
    raised_cosine_notches,
    subtract_block_series,
)
from features.gaps import check_enough_samples, fill_gaps
from features.limits import (
    COUNTS_UNIT,
    COUPLINGS,
    MAINS_AUTO,
    MAINS_HZ,
    MAX_CHANNELS,
    MAX_DURATION_S,
    MAX_OCCUPANT_KG,
    MAX_SAMPLE_MAGNITUDE,
    MIN_DURATION_S,
    MIN_OCCUPANT_KG,
    STANDARD_GRAVITY_M_S2,
    UNIT_FACTORS,
    mains_choices,
    resolve_coupling,
    units_of,
)
from features.spectral import welch_spectra

#: Cut-off of the static/slow part removed from every trace, Hz.
BASELINE_CUTOFF_HZ = 0.05
#: Cut-off of the slow load trace handed to the artifact stage, Hz.
LOAD_CUTOFF_HZ = 0.5
#: Rate of the block-mean series used for slow components (baseline, load), Hz.
SLOW_FS_HZ = 10.0
#: Band-limited differentiator: exact 2*pi*f gain up to PASS, cosine taper to 0 at STOP.
DIFFERENTIATOR_PASS_HZ = 25.0
DIFFERENTIATOR_STOP_HZ = 35.0
#: Mains notch: zero gain within +-0.5 Hz of each harmonic (covers the +-0.2 Hz
#: grid-frequency tolerance, common practice), cosine taper back to 1 over 1 Hz.
MAINS_STOP_HALFWIDTH_HZ = 0.5
MAINS_TAPER_HZ = 1.0
#: The rate must exceed 2 * (mains + margin) before the hum is notched.
MAINS_MARGIN_HZ = 5.0
#: Auto-detection: narrow-band peak power over the median of its neighbourhood.
MAINS_PEAK_RATIO = 10.0

#: Per quantity (the keys are ``QUANTITIES``; tests/features/test_conditioning.py checks
#: it): the unit of the kinetic signal it becomes, and how many times it is differentiated
#: to get there.
_KINETIC_UNIT = {"force": "N", "acceleration": "m/s^2", "velocity": "m/s^2",
                 "displacement": "m/s^2"}
_DERIVATIVES = {"force": 0, "acceleration": 0, "velocity": 1, "displacement": 2}


@dataclass(frozen=True)
class CountsScale:
    """Scale of a channel recorded in ADC counts: ``value = (counts - offset_counts) * per_count``.

    Parameters
    ----------
    unit
        Physical unit of ``per_count`` (one of the units valid for the channel quantity).
    per_count
        Physical value of one count, in ``unit``; finite and non-zero.
    offset_counts
        Count value that corresponds to zero (the ADC zero or a tare), counts.
    """

    unit: str
    per_count: float
    offset_counts: float = 0.0


@dataclass(frozen=True)
class ChannelInput:
    """One sensor trace as sent by the caller.

    Parameters
    ----------
    samples
        1-D array-like of numbers, one per sample; NaN marks a sample the device lost
        (a dropout, masked as a gap); infinity is refused.
    label
        Unique channel name, for example ``"cell_front_left"``.
    quantity
        One of ``features.limits.QUANTITIES``.
    unit
        Unit of ``samples`` (see :func:`features.limits.units_of`) or ``"counts"`` with
        ``counts_scale``.
    counts_scale
        Required when ``unit == "counts"``, otherwise None.
    position_m
        (x, y) position of the sensor on the support, m; given for every channel or none.
    coupling
        ``"dc"``, ``"ac"`` or None for the default (see ``COUPLINGS``). ``"dc"`` needs a
        force channel in a force unit or in counts with ``counts_scale``; an ``"ac"``
        channel may be in counts without a scale (its amplitudes are then in counts).
    """

    samples: ArrayLike
    label: str
    quantity: str
    unit: str
    counts_scale: CountsScale | None = None
    position_m: tuple[float, float] | None = None
    coupling: str | None = None


@dataclass(frozen=True)
class ConditionedInput:
    """Traces in SI kinetic form plus the static-load evidence, ready for fusion.

    Attributes
    ----------
    signals
        (n_channels, n) float64: force in N or acceleration in m/s^2 with the mains
        hum and the part below ``BASELINE_CUTOFF_HZ`` removed.
    fs_hz
        Sampling rate, Hz.
    labels, quantities
        Per channel, as given.
    couplings
        Per channel, ``"dc"`` or ``"ac"`` (the default resolved; see ``COUPLINGS``).
    units
        Per channel, ``"N"``, ``"m/s^2"``, or ``"counts"`` for counts without a scale
        (unit of ``signals`` and ``baseline_si``).
    positions_m
        (n_channels, 2) sensor positions in m, or None.
    raw_signals
        Per channel, a read-only view of the samples exactly as received (original
        units and dtype, no copy) for clipping and flat-line detection.
    baseline_si
        (n_channels, m) slow part that was removed, at ``baseline_fs_hz`` (sample ``k``
        is the mean of samples ``k*F .. k*F+F-1`` with ``F = fs_hz / baseline_fs_hz``),
        in ``units``. Adding it back to ``signals`` gives the total force of a cell.
    baseline_fs_hz
        Rate of ``baseline_si`` and ``load_trace_n``, Hz.
    static_load_n
        Per channel, median force in N for ``dc`` channels, None otherwise.
    supported_mass_kg
        Total static force of the ``dc`` channels / g minus ``empty_load_kg``; None
        without a ``dc`` channel.
    load_trace_n
        Total ``dc`` force low-passed below ``LOAD_CUTOFF_HZ`` minus the empty-support
        load, N, at ``baseline_fs_hz``; None without a ``dc`` channel.
    occupancy_from_load
        True/False from the occupant mass bounds; None without a ``dc`` channel or when
        the load is implausible (see flags).
    mains_hz_removed
        The mains frequency (one of ``MAINS_HZ``) when the hum was notched, else None.
    confidence
        Fraction of channels that carry a signal (not constant after conditioning).
    flags
        Everything adapted or noticed, as plain strings.
    gap
        (n,) True where any channel's sample was missing (NaN) and was filled
        (:func:`features.gaps.fill_gaps`) before filtering; None when none was.
    raw_ranges
        Per channel, the (min, max) of ``raw_signals`` as read by the sample checks, where
        it is exact as a float (None for a channel with a filled gap or of a 64-bit
        integer type): the later checks of the raw samples start from it instead of
        reducing the channel again.
    """

    signals: FloatArray
    fs_hz: float
    labels: tuple[str, ...]
    quantities: tuple[str, ...]
    couplings: tuple[str, ...]
    units: tuple[str, ...]
    positions_m: FloatArray | None
    raw_signals: tuple[NDArray[np.generic], ...]
    baseline_si: FloatArray
    baseline_fs_hz: float
    static_load_n: tuple[float | None, ...]
    supported_mass_kg: float | None
    load_trace_n: FloatArray | None
    occupancy_from_load: bool | None
    mains_hz_removed: int | None
    confidence: float
    flags: tuple[str, ...]
    gap: NDArray[np.bool_] | None = None
    raw_ranges: tuple[tuple[float, float] | None, ...] = ()


def valid_units(quantity: str) -> list[str]:
    """Sorted units accepted for ``quantity`` (``"counts"`` included)."""
    return units_of(quantity)


def si_factor(quantity: str, unit: str) -> float:
    """Factor that converts ``unit`` to the SI unit of ``quantity`` (NIST SP 811 values)."""
    return UNIT_FACTORS[quantity][unit]


def occupancy_from_mass(mass_kg: float | None) -> tuple[bool | None, tuple[str, ...]]:
    """Occupied True/False/None from a supported mass and the plausible occupant bounds."""
    if mass_kg is None:
        return None, ("occupancy_unknown_no_force_channel",)
    if mass_kg > MAX_OCCUPANT_KG:
        return None, ("load_above_plausible_occupant_mass",)
    if mass_kg < -MIN_OCCUPANT_KG:
        return None, ("load_below_empty_support_load",)
    return bool(mass_kg >= MIN_OCCUPANT_KG), ()


def condition_channels(channels: Sequence[ChannelInput], fs_hz: float, *,
                       mains_hz: str | float | None = MAINS_AUTO,
                       empty_load_kg: float = 0.0) -> ConditionedInput:
    """Validate raw channels and bring them to SI kinetic form without hum or static part.

    Parameters
    ----------
    channels
        1 to ``MAX_CHANNELS`` :class:`ChannelInput` of equal length, unique labels.
    fs_hz
        Sampling rate common to all channels, Hz, within ``features.limits.MIN_FS_HZ`` to
        ``MAX_FS_HZ``.
    mains_hz
        ``MAINS_AUTO`` (detect the hum of one of ``MAINS_HZ`` from a narrow spectral
        peak), one of ``MAINS_HZ`` (Hz), or None to skip hum removal.
    empty_load_kg
        Load of the empty support (mattress, seat cushion) in kg, >= 0; 0 for a tared
        plate. Subtracted from the supported mass and the load trace.

    Returns
    -------
    ConditionedInput

    Raises
    ------
    InvalidInputError
        When any rule above is broken, naming the field (for example
        ``"channels[2].unit"``), or when samples are infinite, or when the
        record is shorter than ``MIN_DURATION_S`` or longer than ``MAX_DURATION_S``, or
        when its samples besides the gaps span less than ``MIN_DURATION_S``.

    Notes
    -----
    0. Missing samples (NaN) are filled by a straight line across each gap
       (:func:`features.gaps.fill_gaps`), so that no filter below sees NaN; where any
       channel missed a sample is kept in ``gap`` for the artifact stage to mask.

    Per channel, one at a time (peak memory: the output plus about two float64
    copies of one channel):

    1. Convert to SI (NIST SP 811 factors; counts through their ``CountsScale``),
       written straight into the float64 output row.
    2. Take 0.1 s block means (about ``SLOW_FS_HZ``); their median is the static
       value (reported as ``static_load_n`` for force) and is subtracted.
    3. In one zero-padded FFT (exactly zero-phase): notch the mains fundamental and
       every harmonic below Nyquist (gain 0 within +-0.5 Hz, cosine taper over
       1 Hz) and, for velocity or displacement, differentiate once or twice with
       the band-limited derivative ``j*2*pi*f * L(f)``, ``L`` = 1 up to 25 Hz and a
       cosine taper to 0 at 35 Hz (lower at low rates, flagged). Differentiation
       multiplies each frequency component by ``2*pi*f``, advances its phase by
       90 degrees and so emphasises high frequencies: a velocity or displacement
       waveform becomes its acceleration form, and the BCG wave letters (H, I,
       J, K, L) then refer to that acceleration form. Force needs no change:
       force = mass x acceleration has the same shape.
    4. Remove the slow part: block means low-passed at ``BASELINE_CUTOFF_HZ``
       (Butterworth, forward-backward) and interpolated back, i.e. a zero-phase
       high-pass with the complementary response (-0.03 dB at 0.3 Hz, about -26 dB
       at 0.01 Hz). Chosen over plain median removal so that thermal drift and
       posture steps do not sit in the traces; the removed part is kept in
       ``baseline_si`` so the total force per cell can be rebuilt.
    5. ``dc`` channels (calibrated force that carries the weight; see ``COUPLINGS``):
       total block-mean force, low-passed at ``LOAD_CUTOFF_HZ``, minus
       ``empty_load_kg * g``, is the load trace; the supported mass is the sum of
       static forces / g minus ``empty_load_kg``; occupancy follows from
       ``MIN_OCCUPANT_KG`` and ``MAX_OCCUPANT_KG``. ``ac`` channels give no load: the
       level of a film, a pad, an accelerometer or an uncalibrated front end says
       nothing about the occupant's weight.

    Mains detection (``MAINS_AUTO``): Hann periodograms (0.25 Hz resolution) of up to
    16 segments of 4 s spread over the record, averaged; hum is present when the
    largest bin within +-0.5 Hz of a ``MAINS_HZ`` frequency exceeds ``MAINS_PEAK_RATIO`` times
    the median of the bins 2-5 Hz away, in any channel. Notching needs
    ``fs_hz > 2 * (mains + 5 Hz)``; otherwise it is skipped and flagged.

    References
    ----------
    .. [1] A. Thompson and B. N. Taylor, "Guide for the Use of the International
       System of Units (SI)", NIST Special Publication 811, 2008 edition.
       DOI 10.6028/NIST.SP.811e2008.
    .. [2] 3rd Conference Generale des Poids et Mesures (CGPM), 1901: declaration
       on the unit of mass and the definition of weight; conventional value of
       g_n = 980.665 cm/s^2.
    """
    fs = check_sampling_rate(fs_hz)
    chans = _check_channels(channels)
    couplings = tuple(resolve_coupling(ch.quantity, ch.unit, ch.counts_scale is not None,
                                       ch.coupling) for ch in chans)
    checked = [_check_samples(ch.samples, i) for i, ch in enumerate(chans)]
    arrays = [x for x, _ in checked]
    spans = [span for _, span in checked]  # (min, max) of a channel without missing samples
    n = _check_lengths(arrays, fs)
    arrays, gap = _fill_gaps(arrays, spans, fs)
    positions = _check_positions(chans)
    mains = _check_mains(mains_hz)
    empty_kg = _check_empty_load(empty_load_kg)

    flags: list[str] = [] if gap is None else ["missing_samples_filled"]
    notch_hz = _choose_mains(arrays, chans, fs, mains, flags)
    factor = block_factor(fs, SLOW_FS_HZ)
    slow_fs = fs / factor
    m = n // factor

    signals = np.empty((len(chans), n), dtype=np.float64)
    baselines = np.empty((len(chans), m), dtype=np.float64)
    static: list[float | None] = []
    force_blocks: list[FloatArray] = []
    live = 0
    levels: list[float] = []
    block_rows = np.empty((len(chans), m), dtype=np.float64)
    for i, (ch, x) in enumerate(zip(chans, arrays, strict=True)):
        row = signals[i]
        _to_si(x, ch, row)
        blocks = block_means(row, factor)
        level = median_1d(blocks)
        levels.append(level)
        row -= level
        derivs = _DERIVATIVES[ch.quantity]
        if derivs or notch_hz is not None:
            response = _response(fs, notch_hz, derivs, flags)
            apply_frequency_response(row, fs, response)
        block_rows[i] = block_means(row, factor)
        if couplings[i] == "dc":
            force_blocks.append(blocks)
    # One call for all channels (row by row the same numbers).
    slow_rows = lowpass(block_rows, slow_fs, BASELINE_CUTOFF_HZ)
    for i, (ch, x) in enumerate(zip(chans, arrays, strict=True)):
        row, slow, level = signals[i], slow_rows[i], levels[i]
        derivs = _DERIVATIVES[ch.quantity]
        subtract_block_series(row, slow, factor)
        if couplings[i] == "dc":
            static.append(level)
            baselines[i] = slow + level
        else:
            static.append(None)
            baselines[i] = slow
        if derivs:
            flags.append(f"channels[{i}]_{ch.quantity}_differentiated_{derivs}x")
        span = spans[i]
        live += int(span[1] > span[0]) if span is not None else int(np.ptp(x) > 0)

    mass, load, occupied = _load_outputs(force_blocks, static, slow_fs, empty_kg, flags)
    return ConditionedInput(
        signals=signals, fs_hz=fs,
        labels=tuple(ch.label for ch in chans),
        quantities=tuple(ch.quantity for ch in chans), couplings=couplings,
        units=tuple(_KINETIC_UNIT[ch.quantity] if ch.unit != "counts" or ch.counts_scale
                    else "counts" for ch in chans),
        positions_m=positions, raw_signals=tuple(_read_only(x) for x in arrays),
        baseline_si=baselines, baseline_fs_hz=slow_fs, static_load_n=tuple(static),
        supported_mass_kg=mass, load_trace_n=load, occupancy_from_load=occupied,
        mains_hz_removed=notch_hz, confidence=live / len(chans), flags=tuple(flags),
        gap=gap, raw_ranges=tuple(
            span if span is not None and (x.dtype.kind == "f" or x.dtype.itemsize <= 4) else None
            for x, span in zip(arrays, spans, strict=True)),
    )


# ----------------------------------------------------------------------------- validation


def _check_channels(channels: object) -> list[ChannelInput]:
    if not isinstance(channels, Sequence) or isinstance(channels, (str, bytes)):
        raise InvalidInputError(
            "channels", "`channels` must be a sequence of ChannelInput; got "
            f"{type(channels).__name__}.")
    if not 1 <= len(channels) <= MAX_CHANNELS:
        raise InvalidInputError(
            "channels", f"`channels` must hold 1 to {MAX_CHANNELS} channels; got {len(channels)}.")
    seen: dict[str, int] = {}
    for i, ch in enumerate(channels):
        if not isinstance(ch, ChannelInput):
            raise InvalidInputError(
                f"channels[{i}]", f"`channels[{i}]` must be a ChannelInput; got "
                f"{type(ch).__name__}.")
        if not isinstance(ch.label, str) or not ch.label.strip():
            raise InvalidInputError(
                f"channels[{i}].label", f"`channels[{i}].label` must be a non-empty string; "
                f"got {ch.label!r}.")
        if ch.label in seen:
            raise InvalidInputError(
                f"channels[{i}].label", f"`channels[{i}].label` must be unique; got {ch.label!r}, "
                f"already used by channels[{seen[ch.label]}].")
        seen[ch.label] = i
        _check_unit(ch, i)
    return list(channels)


def _check_unit(ch: ChannelInput, i: int) -> None:
    if ch.quantity not in UNIT_FACTORS:
        raise InvalidInputError(
            f"channels[{i}].quantity", f"`channels[{i}].quantity` must be one of "
            f"{sorted(UNIT_FACTORS)}; got {ch.quantity!r}.")
    choices = valid_units(ch.quantity)
    if ch.unit not in choices:
        raise InvalidInputError(
            f"channels[{i}].unit", f"`channels[{i}].unit` must be one of {choices} for "
            f"quantity {ch.quantity!r}; got {ch.unit!r}.")
    scale = ch.counts_scale
    _check_coupling(ch, i)
    if ch.unit != COUNTS_UNIT:
        if scale is not None:
            raise InvalidInputError(
                f"channels[{i}].counts_scale", f"`channels[{i}].counts_scale` must be None "
                f"unless unit is 'counts'; got a scale with unit {ch.unit!r}.")
        return
    if scale is None and resolve_coupling(ch.quantity, ch.unit, False, ch.coupling) == "ac":
        return  # counts of unknown scale: only their changes are used
    if not isinstance(scale, CountsScale):
        raise InvalidInputError(
            f"channels[{i}].counts_scale", f"`channels[{i}].counts_scale` must be a CountsScale "
            f"when unit is 'counts'; got {scale!r}.")
    physical = sorted(UNIT_FACTORS[ch.quantity])
    if scale.unit not in physical:
        raise InvalidInputError(
            f"channels[{i}].counts_scale.unit", f"`channels[{i}].counts_scale.unit` must be "
            f"one of {physical} for quantity {ch.quantity!r}; got {scale.unit!r}.")
    per = _as_float(scale.per_count)
    if per is None or per == 0.0:
        raise InvalidInputError(
            f"channels[{i}].counts_scale.per_count", f"`channels[{i}].counts_scale.per_count` "
            f"must be a finite non-zero number; got {scale.per_count!r}.")
    if _as_float(scale.offset_counts) is None:
        raise InvalidInputError(
            f"channels[{i}].counts_scale.offset_counts", f"`channels[{i}].counts_scale."
            f"offset_counts` must be a finite number; got {scale.offset_counts!r}.")


def _check_coupling(ch: ChannelInput, i: int) -> None:
    field = f"channels[{i}].coupling"
    if ch.coupling is not None and ch.coupling not in COUPLINGS:
        raise InvalidInputError(field, f"`{field}` must be one of {list(COUPLINGS)} or None; "
                                f"got {ch.coupling!r}.")
    if ch.coupling != "dc":
        return
    if ch.quantity != "force":
        raise InvalidInputError(
            field, f"`{field}` may be 'dc' only for a force channel (a load cell that carries "
            f"the occupant's weight); got quantity {ch.quantity!r}. Use 'ac'.")
    if ch.unit == "counts" and ch.counts_scale is None:
        raise InvalidInputError(
            field, f"`{field}` may be 'dc' only with a calibrated scale; got unit 'counts' "
            "without counts_scale. Give counts_scale, or use 'ac'.")


def _as_float(value: object) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        return None
    out = float(value)
    return out if math.isfinite(out) else None


def _check_samples(samples: ArrayLike, i: int
                   ) -> tuple[NDArray[np.generic], tuple[float, float] | None]:
    """The channel's samples as an array, and their (min, max) when none is missing (None
    when one is NaN, or the array is empty); or raise."""
    field = f"channels[{i}].samples"
    try:
        x = np.asarray(samples)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(field, f"`{field}` must be a 1-D array of numbers; got "
                                f"something numpy cannot read ({exc}).") from None
    if x.ndim != 1:
        raise InvalidInputError(field, f"`{field}` must be 1-D; got shape {x.shape}.")
    if x.dtype.kind not in "iuf":
        raise InvalidInputError(field, f"`{field}` must hold real numbers; got dtype {x.dtype}.")
    if not x.size:
        return x, None
    if x.dtype.kind != "f":
        return x, (float(np.minimum.reduce(x)), float(np.maximum.reduce(x)))
    # Two reductions that need no temporary: with no NaN (which they carry through), no
    # infinity and no magnitude over the limit, they are the channel's range as well.
    lo, hi = float(np.minimum.reduce(x)), float(np.maximum.reduce(x))
    if -MAX_SAMPLE_MAGNITUDE <= lo and hi <= MAX_SAMPLE_MAGNITUDE:
        return x, (lo, hi)
    if math.isnan(lo) and -MAX_SAMPLE_MAGNITUDE <= np.fmin.reduce(x) and \
            np.fmax.reduce(x) <= MAX_SAMPLE_MAGNITUDE:
        # A missing sample (NaN), and the two reductions that skip it: no infinity and no
        # magnitude over the limit. Otherwise the checks below say which.
        return x, None
    if x.dtype.kind == "f":
        bad = np.isinf(x)
        count = int(np.count_nonzero(bad))
        if count:
            first = int(np.argmax(bad))
            raise InvalidInputError(
                field, f"`{field}` must not hold infinity (a missing sample is NaN); got "
                f"{count} infinite sample(s), the first at index {first}.")
        big = np.abs(x) > MAX_SAMPLE_MAGNITUDE
        if big.any():
            first = int(np.argmax(big))
            raise InvalidInputError(
                field, f"`{field}` must hold magnitudes of at most {MAX_SAMPLE_MAGNITUDE:g} in "
                f"the channel's unit; got {float(x[first]):g} at index {first}. Send the trace "
                "in a unit that keeps it in range, or as counts with a scale.")
    return x, None


def _check_lengths(arrays: list[NDArray[np.generic]], fs: float) -> int:
    n = arrays[0].shape[0]
    for i, x in enumerate(arrays[1:], start=1):
        if x.shape[0] != n:
            raise InvalidInputError(
                f"channels[{i}].samples", f"`channels[{i}].samples` must have the same length "
                f"as channels[0].samples ({n} samples); got {x.shape[0]}.")
    duration = n / fs
    if duration < MIN_DURATION_S:
        raise InvalidInputError(
            "channels[0].samples", f"`channels[0].samples` must span at least "
            f"{MIN_DURATION_S:g} s (about 10 beats at 30 bpm and one breath); got {duration:g} s "
            f"({n} samples at {fs:g} Hz).")
    if duration > MAX_DURATION_S:
        raise InvalidInputError(
            "channels[0].samples", f"`channels[0].samples` must span at most "
            f"{MAX_DURATION_S:g} s (24 h); got {duration:g} s. Split the record.")
    return int(n)


def _fill_gaps(arrays: list[NDArray[np.generic]], spans: list[tuple[float, float] | None],
               fs: float) -> tuple[list[NDArray[np.generic]], NDArray[np.bool_] | None]:
    """Each channel with its missing samples filled, and where any channel missed one
    (``spans``: :func:`_check_samples`'s ranges, known only where none is missing)."""
    out: list[NDArray[np.generic]] = []
    union: NDArray[np.bool_] | None = None
    for i, x in enumerate(arrays):
        if spans[i] is not None or x.dtype.kind != "f" or not np.isnan(x).any():
            out.append(x)
            continue
        check_enough_samples(np.isnan(x), fs, f"channels[{i}].samples")
        filled, gap = fill_gaps(x)
        out.append(filled)
        union = gap if union is None else union | gap
    if union is not None:
        check_enough_samples(union, fs, "channels[0].samples")
    return out, union


def _check_positions(chans: list[ChannelInput]) -> FloatArray | None:
    given = [ch.position_m is not None for ch in chans]
    if not any(given):
        return None
    out = np.empty((len(chans), 2), dtype=np.float64)
    for i, ch in enumerate(chans):
        field = f"channels[{i}].position_m"
        if ch.position_m is None:
            raise InvalidInputError(field, f"`{field}` must be given for every channel or "
                                    "for none; got None while other channels have one.")
        pos = ch.position_m
        ok = isinstance(pos, (tuple, list)) and len(pos) == 2
        vals = [_as_float(v) for v in pos] if ok else [None]
        if not ok or any(v is None for v in vals):
            raise InvalidInputError(field, f"`{field}` must be a pair of finite numbers (x, y) "
                                    f"in m; got {pos!r}.")
        out[i] = vals
    return out


def _check_mains(mains_hz: object) -> str | int | None:
    if mains_hz is None or (isinstance(mains_hz, str) and mains_hz == MAINS_AUTO):
        return mains_hz
    if not isinstance(mains_hz, bool) and isinstance(mains_hz, (int, float)) and \
            mains_hz in MAINS_HZ:
        return int(mains_hz)
    raise InvalidInputError("mains_hz", f"`mains_hz` must be one of {mains_choices()}; "
                            f"got {mains_hz!r}.")


def _check_empty_load(empty_load_kg: object) -> float:
    value = _as_float(empty_load_kg)
    if value is None or value < 0.0:
        raise InvalidInputError("empty_load_kg", "`empty_load_kg` must be a finite mass >= 0 "
                                f"kg (0 for a tared support); got {empty_load_kg!r}.")
    return value


# ----------------------------------------------------------------------------- kernels


def _to_si(x: NDArray[np.generic], ch: ChannelInput, out: FloatArray) -> None:
    if ch.unit == COUNTS_UNIT and ch.counts_scale is None:
        np.subtract(x, 0.0, out=out)  # counts of unknown scale stay counts
    elif ch.unit == COUNTS_UNIT:
        assert ch.counts_scale is not None
        scale = ch.counts_scale
        np.subtract(x, float(scale.offset_counts), out=out)
        out *= float(scale.per_count) * si_factor(ch.quantity, scale.unit)
    else:
        np.multiply(x, si_factor(ch.quantity, ch.unit), out=out)


def _read_only(x: NDArray[np.generic]) -> NDArray[np.generic]:
    view = x.view()
    view.flags.writeable = False
    return view


def _mains_allowed(fs: float, mains: int) -> bool:
    return fs > 2.0 * (mains + MAINS_MARGIN_HZ)


def _choose_mains(arrays: list[NDArray[np.generic]], chans: list[ChannelInput], fs: float,
                  mains: str | int | None, flags: list[str]) -> int | None:
    if mains is None:
        flags.append("mains_removal_off")
        return None
    if mains == MAINS_AUTO:
        candidates = [f for f in MAINS_HZ if _mains_allowed(fs, f)]
        if not candidates:
            flags.append("mains_detection_skipped_rate_too_low")
            return None
        freqs, psds = _hum_spectra(arrays, fs)  # one per channel, for both candidates
        ratios = {f: max(_hum_ratio_of(freqs, psd, f) for psd in psds) for f in candidates}
        best = max(ratios, key=lambda f: ratios[f])
        if ratios[best] < MAINS_PEAK_RATIO:
            flags.append("mains_hum_not_detected")
            return None
        flags.append(f"mains_hum_detected_{best}hz")
        mains = best
    assert isinstance(mains, int)
    if not _mains_allowed(fs, mains):
        flags.append("mains_removal_skipped_rate_too_low")
        return None
    flags.append(f"mains_{mains}hz_and_harmonics_notched")
    return mains


def _hum_spectra(arrays: list[NDArray[np.generic]], fs: float
                 ) -> tuple[FloatArray, FloatArray]:
    """Per channel, the mean Hann periodogram (0.25 Hz resolution) of up to 16 spread 4-s
    segments; one FFT call for all channels (equal lengths)."""
    seg = int(round(4.0 * fs))
    count = min(16, arrays[0].shape[0] // seg)
    starts = np.linspace(0, arrays[0].shape[0] - seg, count).astype(np.int64)
    segments = np.stack([np.asarray(x[s:s + seg], dtype=np.float64)
                         for x in arrays for s in starts])
    # the periodogram of scipy.signal.periodogram(segments, fs=fs, window="hann",
    # detrend="constant", axis=-1), one row per segment
    est = welch_spectra(segments, fs, segment_n=seg, overlap_n=0)
    psds = est.psd_x.reshape(len(arrays), count, -1).mean(axis=1)
    return est.frequencies_hz, psds


def _hum_ratio_of(freqs: FloatArray, mean_psd: FloatArray, mains: int) -> float:
    """Peak power near ``mains`` over the median power 2-5 Hz away."""
    dist = np.abs(freqs - mains)
    peak = float(mean_psd[dist <= 0.5].max())
    floor = median_1d(mean_psd[(dist >= 2.0) & (dist <= 5.0)])
    if floor <= 0.0:
        return math.inf if peak > 0.0 else 0.0
    return peak / floor


def _response(fs: float, notch_hz: int | None, derivs: int, flags: list[str]
              ) -> Callable[[FloatArray], NDArray[np.complexfloating] | FloatArray]:
    nyquist = fs / 2.0
    pass_hz = min(DIFFERENTIATOR_PASS_HZ, 0.7 * nyquist)
    stop_hz = min(DIFFERENTIATOR_STOP_HZ, nyquist)
    if derivs and pass_hz < DIFFERENTIATOR_PASS_HZ:
        flag = f"differentiator_band_reduced_to_{pass_hz:g}hz"
        if flag not in flags:
            flags.append(flag)
    harmonics = ([float(k * notch_hz) for k in range(1, int(nyquist // notch_hz) + 1)
                  if k * notch_hz < nyquist] if notch_hz is not None else [])

    def response(freqs: FloatArray) -> NDArray[np.complexfloating] | FloatArray:
        gain: FloatArray = np.ones_like(freqs)
        if harmonics:
            gain = raised_cosine_notches(freqs, harmonics,
                                         stop_halfwidth_hz=MAINS_STOP_HALFWIDTH_HZ,
                                         taper_hz=MAINS_TAPER_HZ)
        if not derivs:
            return gain
        gain = gain * raised_cosine_lowpass(freqs, pass_hz, stop_hz) ** derivs
        return gain * (2j * np.pi * freqs) ** derivs

    return response


def _load_outputs(force_blocks: list[FloatArray], static: list[float | None], slow_fs: float,
                  empty_kg: float, flags: list[str]
                  ) -> tuple[float | None, FloatArray | None, bool | None]:
    if not force_blocks:
        occupied, extra = occupancy_from_mass(None)
        flags.extend(extra)
        return None, None, occupied
    total_static = float(sum(v for v in static if v is not None))
    mass = total_static / STANDARD_GRAVITY_M_S2 - empty_kg
    total = np.sum(force_blocks, axis=0)
    load = lowpass(total, slow_fs, LOAD_CUTOFF_HZ) - empty_kg * STANDARD_GRAVITY_M_S2
    occupied, extra = occupancy_from_mass(mass)
    flags.extend(extra)
    return mass, load, occupied
